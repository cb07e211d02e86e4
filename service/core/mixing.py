"""Auctions whose number of bidders is uncertain: each count's auction, and the figures mixed.

Bidders know the count's distribution, not the count (Harstad, Kagel and Levin 1990;
Krishna, Auction Theory, 2nd ed., 2009, ch. 3). A bidder who takes part faces k rivals
with chance pi_k = (k + 1) P(N = k + 1) / E[N], so it wins with chance
G(v) = sum_k pi_k F(v)^k and the first-price equilibrium bid is

    b(v) = [pi_0 r + sum_{k >= 1} pi_k F(v)^k b_k(v)] / G(v),

b_k the bid against exactly k rivals (Krishna 2009, ch. 3): a weighted average of the
fixed-count bids, each computed by :mod:`bids`. A lone bidder pays the reserve.

What is linear in the count's distribution is each count's figure mixed, each rule by its
own route, so revenue equivalence stays a check count by count: every rule's expected
revenue (E_N[b(X1)] = sum_n P(n) E[b_{n-1}(X1) on n], since N F^(N-1) averages to
E[N] G), the probability of a sale, the surpluses, the efficiency's gains. What is not
is computed from the mixture itself: the second moment and quantiles of a bid-priced
revenue (the winner pays the mixed bid), which integrate over one value's quadrature
weighted by the highest value's density over one value's, H'(F) = E[N F^(N-1)]; the
second-price quantiles, from P(second-highest <= x) = H(u) + (1 - u) H'(u) at u = F(x).
"""
from __future__ import annotations

import math

import numpy as np
from scipy import optimize, special

from . import gains, price, revenue
from .auction import FAR_RESERVE
from .bids import TAIL_BOTH
from . import orderstats as os_
from . import rules as R
from .auction import ForwardAuction
from .bidders import Bidders, CostlyEntry
from .errors import ParameterError


def resolve(bidders, model, reserve=None):
    """The count as :class:`Bidders`: an integer or a ``Bidders`` as it is; costly entry
    solved against the (forward) value model and reserve (:func:`entry_count`)."""
    if isinstance(bidders, CostlyEntry):
        return entry_count(model, bidders.potential, bidders.entry_cost, reserve, bidders.to_params())
    return Bidders.of(bidders)


class MixedAuction:
    """``bidders`` (an uncertain :class:`Bidders`) with values from ``model``, a reserve, the
    seller's own value: one :class:`auction.ForwardAuction` per count that can occur."""

    def __init__(self, model, bidders, reserve=None, seller_value=0.0):
        self.model, self.bidders, self.v0 = model, bidders, seller_value
        self._parts = {}
        # the floor, its -log F and the lone bidder's price are the same for every count
        ref = ForwardAuction(model, max(bidders.counts[-1], 1), reserve, seller_value)
        self.reserve, self.floor, self.s_r, self.f_r = ref.reserve, ref.floor, ref.s_r, ref.f_r
        self.reserve_binds, self.lone_price = ref.reserve_binds, ref.lone_price
        self.p_sale = bidders.p_sale(self.s_r)
        self._single = None
        self.kept = {}

    @property
    def lone_buys(self):
        """P(a lone bidder takes part and its value beats the floor): it pays the reserve itself
        under a truthful rule, apart from the floor where the reserve lies below the support."""
        return dict(zip(self.bidders.counts, self.bidders.weights)).get(1, 0.0) * (-math.expm1(-self.s_r) if math.isfinite(self.s_r) else 1.0)

    def second_sf(self, x):
        """P(X2 > x) over the count (no second value with fewer than two bidders): 1 - H(u) -
        (1 - u) H'(u) at u = F(x), and where n S(x) is below 0.05 for the largest count n, where
        that difference would lose digits, the binomial tail term by term (``Bidders.second_tail_s``,
        whose 12 terms then leave out less than 0.05^11 of it)."""
        x = np.asarray(x, float)
        v = np.asarray(self.model.sf(x), float)
        s = np.asarray(self.model.neg_log_cdf(x), float)
        with np.errstate(invalid="ignore", over="ignore"):
            direct = 1.0 - self._second_cdf_s(s)
        small = v * self.bidders.counts[-1] < 0.05  # where the direct form would lose more than a digit or two
        if np.any(small):
            direct = np.where(small, direct, direct)
            direct[small] = self.bidders.second_tail_s(s[small], v[small])
        return direct

    def second_cdf(self, x):
        """P(X2 <= x) = H(u) + (1 - u) H'(u) at u = F(x), a missing second value counting as below every x."""
        return self._second_cdf_s(np.asarray(self.model.neg_log_cdf(np.asarray(x, float)), float))

    def second_quantiles(self, ps):
        """The quantiles of X2 over the count from P(X2 <= x) = H(u) + (1 - u) H'(u), u = F(x);
        -inf where p falls on a missing second value."""
        ps = np.asarray(ps, float)
        low = float(self.bidders.highest_cdf_s(np.inf) + self.bidders.highest_density_s(np.inf))  # P(N <= 1)
        out = np.full(ps.shape, -math.inf)
        live = ps > low
        if live.any():
            out[live] = _value_at_s(self.model, _solve_s(ps[live], 0.0, math.inf, self._second_cdf_s, self._second_slope_s))
        return out

    def _second_cdf_s(self, s):
        """P(X2 <= x) at -log F(x) = s: H(u) + (1 - u) H'(u)."""
        return self.bidders.highest_cdf_s(s) - np.expm1(-s) * self.bidders.highest_density_s(s)

    def _second_slope_s(self, s):
        """d/ds of ``_second_cdf_s``: -u (1 - u) H''(u)."""
        return np.exp(-s) * np.expm1(-s) * self.bidders.second_density_s(s)

    @property
    def second_lower_index(self):
        """The second-highest's lower tail index, that of the fewest bidders (two or more) that can occur."""
        return (min(n for n in self.bidders.counts if n >= 2) - 1.0) * self.model.lower_tail_index

    def part(self, n):
        """The auction of exactly n bidders (built on first use)."""
        if n not in self._parts:
            self._parts[n] = ForwardAuction(self.model, n, self.reserve, self.v0)
        return self._parts[n]

    def weighted(self):
        """(n, P(N = n), that count's auction) for every count of at least one bidder."""
        return [(n, w, self.part(n)) for n, w in zip(self.bidders.counts, self.bidders.weights) if n >= 1]

    def bids_at_s(self, s):
        """The mixed first-price bid at values with -log F(v) = s (array), the floor's bid at
        and below the floor: on one value's quadrature where it is built and reaches
        (``_bids_between``), else each fixed-count bid weighted by pi_k F^k, in logs so that no
        weight underflows before the others."""
        s = np.minimum(np.asarray(s, float), self.s_r)
        if self._single is not None and not self.steep(self._single[1]):
            q = self._single[1]
            t = np.log(np.where(s > 0.0, s, 1.0))
            inside = (s > 0.0) & (t >= q.a[0]) & (t <= q.b[-1]) & (s < self.s_r)
            if inside.all():
                return self._bids_between(q, s)
            if inside.any():
                out = self._counts_bids(s)
                out[inside] = self._bids_between(q, s[inside])
                return out
        return self._counts_bids(s)

    def _counts_bids(self, s):
        """The mixed bid from every count's own bids (``EquilibriumBids.at_s``)."""
        pis = self.bidders.rival_weights
        with np.errstate(invalid="ignore", over="ignore"):
            logw = np.stack([np.full(s.shape, math.log(p)) - (k * s if k else 0.0) for k, p in pis.items()])
            top = np.max(logw, axis=0)
            w = np.exp(logw - np.where(np.isfinite(top), top, 0.0))
        # a count whose weight is below 1e-20 of the largest moves the bid by less than that
        # share of v - floor: its bids are not computed
        bids = np.zeros(w.shape)
        for i, k in enumerate(pis):
            live = w[i] > 1e-20
            if live.any():
                bids[i, live] = self.lone_price if k == 0 else self.part(k + 1).bids.at_s(s[live])
        w = np.where(w > 1e-20, w, 0.0)
        with np.errstate(invalid="ignore"):
            total = w.sum(axis=0)
            out = (w * bids).sum(axis=0) / total
        return np.where(total > 0.0, out, self.floor)

    def single_quadrature(self, power):
        """One value's quadrature at and above the floor, with the mixed bids at its nodes
        and H'(F), the highest value's density over one value's: (quadrature, bids, H')."""
        if self._single is None or self._single[0] < power:
            q = os_.filled_rank_quadrature(self.model, 1, 1, power=power, s_cut=self.s_r, fine=True, checked=True)
            s = np.exp(q.stacked()[0])  # the rule for one value runs in t = log s
            hp = self.bidders.highest_density_s(s)
            if not q.panels:
                bids = np.empty((0, q.w.shape[1]))
            elif self.steep(q):  # only where the highest value, or a bidder's chance to win, still weighs
                bids = np.full(s.shape, self.floor)
                live = (hp > 1e-30 * np.max(hp)) | (self.win_chance(s) > 1e-30)
                bids[live] = self._counts_bids(s[live])
            else:
                bids = self._bids_on(q, s)
            self._single = (power, q, bids, hp)
        return self._single[1:]

    def steep(self, q):
        """Whether G(u) = sum_k pi_k u^k falls below e^-300 within the reach of one value's
        quadrature ``q`` (every count large): its panels cannot follow so steep a G, and the mixed
        bids there come from every count's own bids instead (``_counts_bids``)."""
        return min(self.bidders.rival_weights) * math.exp(q.b[-1]) > 300.0

    def _bid_parts(self, q, s):
        """What the mixed bids on one value's quadrature ``q`` are built from, by
        G(v) (b(v) - o) = pi_0 (r - o) + (G(F(floor)) - pi_0) (floor - o) + int_floor^v (x - o) dG:
        (o, the integrand per unit t at the nodes, each panel's integral from its right edge to
        the cut by each rule, the constant term). The origin o is the floor where it is finite,
        so every term is positive and small bids keep their digits."""
        pis = self.bidders.rival_weights
        ref, off = q.offsets()
        o = self.floor if math.isfinite(self.floor) else ref
        count = self.bidders
        g = np.exp(-s) * count.second_density_s(s) / count.mean  # -dG/ds = u G'(u), G' = H''/E[N]
        with np.errstate(over="ignore", invalid="ignore"):
            h = (off + (ref - o)) * g * s
        _, dt, _ = q.stacked()
        whole = (dt * h) @ os_.RULE_COLUMNS  # (panels, 2): each panel's integral by each rule
        beyond = np.vstack((np.cumsum(whole[::-1], axis=0)[::-1][1:], np.zeros((1, 2))))
        pi0 = pis.get(0, 0.0)
        g_floor = float(sum(p * math.exp(-k * self.s_r) for k, p in pis.items() if k >= 1)) if math.isfinite(self.s_r) else 0.0
        start = pi0 * (self.lone_price - o) + (g_floor * (self.floor - o) if g_floor else 0.0)
        return o, h, beyond, start

    def win_chance(self, s):
        """G(F) = sum_k pi_k F^k = H'(F) / E[N] at F = e^-s: a bidder's chance to beat every rival."""
        count = self.bidders
        return count.highest_density_s(s) / count.mean if count.mean > 0 else np.ones(np.shape(s))

    def _finished(self, o, start, above, big_g, values):
        """b = o + (start + the integral) / G, held between the floor's bid and the value."""
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            bids = o + (start + above) / big_g
        return np.where(big_g > 0.0, np.minimum(np.maximum(bids, min(self.floor, self.lone_price)), values), self.floor)

    def _bids_on(self, q, s):
        """The mixed bids at the nodes of one value's quadrature ``q`` (s = -log F there): the
        integral from the cut up to each node on q's own panels, whole panels summed from the
        cut, the node's own panel by the spectral partial-panel rule (as ``bids._at_nodes``
        does for one count)."""
        o, h, beyond, start = self._bid_parts(q, s)
        half = 0.5 * (q.b - q.a)[:, None]
        above = half * (h @ TAIL_BOTH) + beyond @ os_.RULE_COLUMNS.T
        return self._finished(o, start, above, self.win_chance(s), q.values)

    def _bids_between(self, q, s):
        """The mixed bids at points inside the panels of one value's quadrature ``q``: the
        point's own panel from it to the panel's end by the spectral partial-panel rule on the
        24-node rule's node values, then the panels beyond."""
        o, h, beyond, start = self._bid_parts(q, np.exp(q.stacked()[0]))
        t = np.log(s)
        j = np.clip(np.searchsorted(q.a, t, side="right") - 1, 0, q.panels - 1)
        half = 0.5 * (q.b - q.a)[j]
        x = (t - 0.5 * (q.a + q.b)[j]) / half
        rest = os_.GAUSS_RULES[0][1] - os_.partial_panel_weights(x)  # the integral from x to 1 of each basis polynomial
        above = half * np.einsum("pi,pi->p", rest, h[j, :os_.RULE_SPLIT]) + beyond[j, 0]
        return self._finished(o, start, above, self.win_chance(s), _value_at_s(self.model, s))


def _mix_moments(parts):
    """(mean, sd) of a mixture from each part's (weight, mean, sd), by the law of total variance."""
    mean = sum(w * m for w, m, _ in parts)
    second = sum(w * (sd * sd + (m - mean) ** 2) for w, m, sd in parts)
    return mean, math.sqrt(max(second, 0.0))


def mixed_figures(auc, rules, quantiles):
    """Each rule's figures under an uncertain count, as :func:`reports.forward_figures`
    gives them for one count: on one value's quadrature (:func:`one_pass`) where it applies,
    else count by count."""
    if auc.p_sale == 0.0:  # nobody takes part, or no value reaches the reserve
        return {rule: {"rule": rule, "expected_revenue": 0.0, "revenue_sd": 0.0, "revenue_quantiles": [0.0] * len(quantiles),
                       "probability_of_sale": 0.0, "expected_winner_surplus": 0.0, "expected_bidder_surplus": 0.0,
                       "efficiency": None, "_err": 0.0} for rule in rules}, []
    warnings = []
    got = one_pass(auc, rules, warnings)
    if got is None:
        return count_by_count(auc, rules, quantiles)
    out, shared = {}, {}  # the quantiles depend on the pricing alone
    for rule in rules:
        f = got[rule]
        pricing = R.get(rule).pricing
        if pricing is not R.SECOND:
            f["revenue_sd"], sd_err = bid_revenue_sd(auc, pricing)
            f["_err"] = max(f["_err"], sd_err)
        if pricing.name not in shared:
            shared[pricing.name] = (second_price_quantiles(auc, quantiles) if pricing is R.SECOND
                                    else None if pricing is R.ALL_PAY else bid_price_quantiles(auc, quantiles))
        qs = shared[pricing.name]
        out[rule] = {"rule": rule, **f, "revenue_quantiles": None if qs is None else np.asarray(qs, float).tolist(),
                     "probability_of_sale": auc.p_sale}
    return out, warnings


def one_pass(auc, rules, warnings):
    """Each rule's expected revenue (by its own route), the second-price sd, the surpluses and
    the efficiency, all on one value's quadrature above the floor (``single_quadrature``),
    weighted by the count's generating function H(u) = E[u^N]: the highest value's density
    over one value's is H'(u), the second-highest's (1 - u) H''(u), the highest rival's G(u) =
    H'(u)/E[N]. Its cost grows little with the counts kept. None (count by count instead)
    where a value's variance does not exist, the floor is not finite, the reserve is beyond
    the nodes' reach, or G underflows within it (every count large: a binomial count of many
    potential bidders, a Poisson count of a large mean).

    Routes (forward revenue; a lone bidder, who knows the count's distribution only, pays the
    reserve under a truthful rule and its bid under a bid-priced one):
    second price: lone + floor P(X2 < r <= X1) + int Q(u) (1 - u) H''(u) du;
    ascending: the value-space route of one count (``revenue.ascending_revenue``) on the
    mixture's second-highest, P(X2 <= x) = K2(F(x)), K2 = H + (1 - u) H';
    first price: int b H' du; descending: by parts, b(r) (1 - H(F(r))) + int (v - b) G'/G (1 - H) du
    (b' = (v - b) G'/G from the first-order condition); all-pay: E[N] int G b du.
    """
    m = auc.model
    if not (m.upper_tail_index > 2.0 and math.isfinite(auc.floor)) or 0.0 < auc.s_r < FAR_RESERVE:
        return None
    q = auc.single_quadrature(2)[0]
    if not q.panels or auc.steep(q):  # the descending route's G'/G cannot be followed there: count by count
        return None
    weighted = _Weighted(auc)
    if weighted.lone_mass > 0.0 and not math.isfinite(auc.lone_price):
        return None
    out = {}
    for rule in rules:
        figures = weighted.figures(rule)
        if figures is None:
            return None  # a rule registered later: count by count
        out[rule] = figures
    eff = _one_pass_efficiency(auc, warnings)
    for f in out.values():
        f["efficiency"] = eff
    return out


class _Weighted:
    """One value's quadrature above the floor with what every route of an uncertain count
    weighs it by (see :func:`one_pass`): H'(u), (1 - u) H''(u), G(u), G'/G, 1 - H(u), the
    mixed bids, and the atoms at the floor."""

    def __init__(self, auc):
        count = auc.bidders
        self.auc, self.count = auc, count
        self.q, self.bids, self.hp = auc.single_quadrature(2)
        if not self.q.panels:
            return
        s = np.exp(self.q.stacked()[0])
        self.h2 = -np.expm1(-s) * count.second_density_s(s)
        ref, off = self.q.offsets()
        self.values = off + ref
        self.big_g = auc.win_chance(s)
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            self.slope = np.where(self.big_g > 0.0, count.second_density_s(s) / count.mean / self.big_g, 0.0)  # G'/G
        n_arr, w_arr = count.arrays
        self.one_less_h = -(w_arr @ np.expm1(-np.multiply.outer(n_arr, s.ravel()))).reshape(s.shape)  # 1 - H, its digits kept
        s_r = auc.s_r
        self.h_r = float(count.highest_cdf_s(s_r))
        k2_r = float(auc._second_cdf_s(np.array(s_r)))
        self.lone_mass = auc.lone_buys
        self.atom = max(k2_r - self.h_r - self.lone_mass, 0.0)  # n >= 2, X2 below the floor, X1 above: the floor is paid
        self.top = self.integral(self.values * self.hp)  # E[X1; sale]

    def integral(self, h):
        with np.errstate(over="ignore", invalid="ignore"):
            return self.q.integrate_nodes(np.nan_to_num(h, nan=0.0, posinf=0.0, neginf=0.0))

    def revenue(self, route):
        """(mean, error) of the forward revenue by ``route`` (a registered rule's), or None."""
        auc, count, pis = self.auc, self.count, self.count.rival_weights
        if route is revenue.second_price_revenue:
            inner, err = self.integral(self.values * self.h2)
            return self.lone_mass * auc.lone_price + self.atom * auc.floor + inner, err
        if route is revenue.ascending_revenue:  # the same value-space route as one count's, on the mixture's X2
            return revenue.ascending_revenue(auc)
        if route is revenue.first_price_revenue:
            return self.integral(self.bids * self.hp)
        if route is revenue.descending_revenue:
            g_r = float(self.auc.win_chance(np.array(auc.s_r))) if math.isfinite(auc.s_r) else pis.get(0, 0.0)
            pi0 = pis.get(0, 0.0)
            b_r = (pi0 * auc.lone_price + (g_r - pi0) * auc.floor) / g_r if g_r > 0 else auc.floor
            inner, err = self.integral((self.values - self.bids) * self.slope * self.one_less_h)
            return b_r * auc.p_sale + inner, err
        if route is revenue.all_pay_revenue:
            each, err = self.integral(self.big_g * self.bids)
            return count.mean * each, count.mean * err
        return None

    def figures(self, rule):
        """The rule's expected revenue, second-price sd, winner's and bidders' surplus, error; or None."""
        got = self.revenue(R.get(rule).revenue)
        if got is None:
            return None
        (mean, err), pricing, auc = got, R.get(rule).pricing, self.auc
        top, top_err = self.top
        sd, sd_err = None, 0.0
        if pricing is R.SECOND:
            sd2, sd_err = self.integral((self.values - mean) ** 2 * self.h2)
            sd2 += (self.h_r * mean ** 2 + self.lone_mass * (auc.lone_price - mean) ** 2
                    + self.atom * (auc.floor - mean) ** 2)
            sd = math.sqrt(max(sd2, 0.0))
            winner, w_err = top - mean, top_err + err
        elif pricing is R.FIRST:
            winner, w_err = self.integral((self.values - self.bids) * self.hp)
        else:
            winner, w_err = self.integral((self.values - self.big_g * self.bids) * self.hp)
        return {"expected_revenue": mean, "revenue_sd": sd, "expected_winner_surplus": winner,
                "expected_bidder_surplus": winner if pricing is not R.ALL_PAY else top - mean,
                "_err": max(err, w_err, sd_err / (2.0 * sd) if sd else 0.0)}


def _one_pass_efficiency(auc, warnings):
    """The efficiency on one value's quadrature between the floor and the seller's value,
    weighted by H'(u) (``gains._efficiency``)."""
    q, s0 = gains._top_quadrature(auc, n=1)
    hp = auc.bidders.highest_density_s(np.exp(q.stacked()[0]))
    got = gains._efficiency(auc, q, s0, warnings, weight=hp)
    return None if got is None else got[0]


def count_by_count(auc, rules, quantiles):
    """Each rule's figures from every count's own auction, mixed (see the module's docstring)."""
    from .reports import forward_figures  # reports dispatches here

    warnings, per_count = [], []
    for n, w, part in auc.weighted():
        figures, notes = forward_figures(part, rules, [])
        per_count.append((n, w, part, figures))
        warnings += [x for x in notes if x not in warnings]
    p_none = 1.0 - sum(w for _, w, _, _ in per_count)  # no bidder: no sale, no revenue
    out = {}
    for rule in rules:
        pricing = R.get(rule).pricing
        rows = [(w, f[rule]) for _, w, _, f in per_count]
        mean = sum(w * f["expected_revenue"] for w, f in rows) if all(f["expected_revenue"] is not None for _, f in rows) else None
        err = max([f["_err"] for _, f in rows] + [0.0])
        sd, qs = None, None
        if mean is not None:
            if pricing is R.SECOND:
                if all(f["revenue_sd"] is not None for _, f in rows):
                    sd = _mix_moments([(w, f["expected_revenue"], f["revenue_sd"]) for w, f in rows] + [(p_none, 0.0, 0.0)])[1]
                qs = second_price_quantiles(auc, quantiles)
            elif price_moments_exist(auc, rule):
                sd, sd_err = bid_revenue_sd(auc, pricing)
                err = max(err, sd_err)
                qs = None if pricing is R.ALL_PAY else bid_price_quantiles(auc, quantiles)
        winner = _mixed(rows, "expected_winner_surplus")
        bidder = _mixed(rows, "expected_bidder_surplus")
        if pricing is R.ALL_PAY and winner is not None:
            winner = _all_pay_winner_surplus(auc, per_count)
        out[rule] = {
            "rule": rule, "expected_revenue": mean, "revenue_sd": sd,
            "revenue_quantiles": None if qs is None else np.asarray(qs, float).tolist(),
            "probability_of_sale": auc.p_sale, "expected_winner_surplus": winner, "expected_bidder_surplus": bidder,
            "efficiency": _efficiency(per_count, p_none, auc), "_err": err,
        }
    return out, warnings


def _mixed(rows, key):
    """sum_n P(n) figure_n, or None where a count's figure is."""
    if any(f[key] is None for _, f in rows):
        return None
    return sum(w * f[key] for w, f in rows)


def _efficiency(per_count, p_none, auc):
    """1 - E[lost] / E[best], the gains each count's auction gives up and could realise, mixed."""
    parts = [part.kept.get("efficiency_parts") for _, _, part, _ in per_count]
    if any(p is None for p in parts):
        return None
    best = sum(w * p[0] for (_, w, _, _), p in zip(per_count, parts))
    lost = sum(w * p[1] for (_, w, _, _), p in zip(per_count, parts))
    return 1.0 - lost / best if best > 0 else None


def price_moments_exist(auc, rule):
    """Whether the price's variance exists for every count."""
    return all(price.price_moment_exists(auc.model, n, rule, 2, auc.floor) for n, _, _ in auc.weighted())


def bid_revenue_sd(auc, pricing):
    """(sd, its error) of the revenue under a bid pricing, with the mixed bids, each taken about
    its own mean on the same nodes so that no digit is lost to a difference of squares: first
    price, E[(R - m)^2] = int (b - m)^2 H'(F) dF over a sale + P(no sale) m^2, m = int b H'(F) dF;
    all-pay, the sum of N bids a = G b: E[N] Var(a) + Var(N) E[a]^2 (a compound sum's variance),
    Var(a) about E[a] alike (a = 0 below the floor)."""
    q, bids, hp = auc.single_quadrature(2)
    if not q.panels:
        return 0.0, 0.0
    if pricing is R.ALL_PAY:
        a = _all_pay_bids(auc, q)
        mass = float(q.w_hi.sum())  # P(X >= floor), by the same rule
        ea, e_err = q.integrate_nodes(a)
        spread, s_err = q.integrate_nodes((a - ea) ** 2)
        var_a = spread + (1.0 - mass) * ea * ea
        count = auc.bidders
        var_n = count.expect(lambda n: (n - count.mean) ** 2)
        var = count.mean * var_a + var_n * ea * ea
        sd = math.sqrt(max(var, 0.0))
        err = count.mean * s_err + 2.0 * var_n * abs(ea) * e_err
    else:
        m, m_err = q.integrate_nodes(hp * bids)
        spread, err = q.integrate_nodes(hp * (bids - m) ** 2)
        var = spread + (1.0 - auc.p_sale) * m * m
        sd = math.sqrt(max(var, 0.0))
        err = err + 2.0 * abs(m) * m_err
    return sd, (err / (2.0 * sd) if sd > 0 else math.sqrt(err))


def _all_pay_bids(auc, q):
    """a(v) = G(F(v)) b(v), each bidder's all-pay bid, at the quadrature's nodes."""
    return auc.win_chance(np.exp(q.stacked()[0])) * auc.single_quadrature(2)[1]


def _all_pay_winner_surplus(auc, per_count):
    """E[X1 - a(X1); sale] with the mixed all-pay bid a = G b: what the winner keeps."""
    winner_value = sum(w * gains.winner_value(part) for _, w, part, _ in per_count)
    q, _, hp = auc.single_quadrature(2)
    paid = q.integrate_nodes(hp * _all_pay_bids(auc, q))[0] if q.panels else 0.0
    return winner_value - paid


def _solve_s(target, lo, hi, fn, slope=None):
    """s in [lo, hi] with fn(s) = target for each target (fn decreasing in s), in x = log s, so
    that values near the top (s tiny) keep their digits: by bisection, or, given ``slope``
    (d fn / ds), by Newton's method kept inside a bracket that every step narrows (a step
    that would leave it bisects instead), from the bracket a coarse grid gives."""
    target = np.asarray(target, float)
    a = np.full(target.shape, math.log(max(lo, 1e-300)))
    b = np.full(target.shape, math.log(hi) if math.isfinite(hi) else math.log(800.0))
    if slope is None:
        for _ in range(64):  # the bracket spans under 2^10 in log s: 64 halvings reach rounding
            mid = 0.5 * (a + b)
            above = fn(np.exp(mid)) > target
            a, b = np.where(above, mid, a), np.where(above, b, mid)
        return np.exp(0.5 * (a + b))
    # a bracket 0.6 wide in log s wherever s > e^-70 (1 - F below 4e-31), one more below
    grid = np.unique(np.concatenate(([a[0]], np.linspace(max(a[0], min(-70.0, b[0] - 1.0)), b[0], 128))))
    values = fn(np.exp(grid))  # decreasing
    i = np.clip(np.searchsorted(-values, -target, side="left"), 1, len(grid) - 1)
    a, b = grid[i - 1], grid[i]
    x = 0.5 * (a + b)
    for _ in range(60):
        e = np.exp(x)
        f = fn(e) - target
        done = np.abs(f) <= 4.0 * np.finfo(float).eps  # as close as fn's rounding allows
        a, b = np.where(f > 0, x, a), np.where(f < 0, x, b)  # fn above the target: the root lies to the right
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            step = x - f / (slope(e) * e)
        inside = np.isfinite(step) & (step >= a) & (step <= b)
        new = np.where(done, x, np.where(inside, step, 0.5 * (a + b)))
        if np.all(done | (np.abs(new - x) <= 4.0 * np.finfo(float).eps * np.maximum(np.abs(x), 1.0))):
            return np.exp(new)
        x = new
    return np.exp(x)


def _value_at_s(model, s):
    return model.value_at(np.exp(-s), -np.expm1(-s))


def second_price_quantiles(auc, ps):
    """Quantiles of the second-price revenue under an uncertain count: on a sale the price
    is max(X2, r) with P(X2 <= x) = H(u) + (1 - u) H'(u), u = F(x) (a missing second value
    counts as below every x), a lone bidder paying the reserve itself."""
    h_r = float(auc.bidders.highest_cdf_s(auc.s_r))  # P(no sale): no value beats the floor, or no bidder
    p_one, lone_below = auc.lone_buys, auc.lone_price < auc.floor
    at_floor = float(auc._second_cdf_s(np.array(auc.s_r))) - h_r if math.isfinite(auc.s_r) else 0.0

    def sale_quantile(q):
        q = np.asarray(q, float)
        out = np.full(q.shape, auc.floor)
        if lone_below:
            out = np.where(q <= p_one, auc.lone_price, out)
        rest = q > at_floor
        if rest.any():
            s = _solve_s(q[rest] + h_r, 0.0, auc.s_r, auc._second_cdf_s, auc._second_slope_s)
            out[rest] = _value_at_s(auc.model, s)
        return out

    return price.with_no_sale(auc, ps, sale_quantile, lambda: price.sale_mass_below_zero(auc.p_sale, sale_quantile))


def bid_price_quantiles(auc, ps):
    """Quantiles of the first-price revenue under an uncertain count: the price is the mixed
    bid at the highest value, P(sale, X1 <= v) = H(F(v)) - H(F(r))."""
    count = auc.bidders
    h_r = float(count.highest_cdf_s(auc.s_r))  # P(no sale): no value beats the floor, or no bidder

    def sale_quantile(q):
        s = _solve_s(np.asarray(q, float) + h_r, 0.0, auc.s_r, count.highest_cdf_s,
                     lambda e: -np.exp(-e) * count.highest_density_s(e))
        return auc.bids_at_s(s)

    return price.with_no_sale(auc, ps, sale_quantile, lambda: price.sale_mass_below_zero(auc.p_sale, sale_quantile))


def mixed_bids(auc, pricing, v):
    """The forward bids at values v under a bid pricing: the mixed b(v), or a(v) = G(F(v)) b(v)."""
    s = np.minimum(auc.model.neg_log_cdf(v), auc.s_r)
    b = auc.bids_at_s(s)
    if pricing is not R.ALL_PAY:
        return b
    return auc.win_chance(s) * b


# ---- top values ---------------------------------------------------------------------------

def top_value_figures(model, count, r, quantiles):
    """(P(rank r exists), mean, sd, quantiles, summaries) of the rank-r value given that it
    exists, mixing each count's (n >= r) figures by the law of total variance; quantiles
    from P(X_r <= x | N >= r) = sum_n P(n) I_F(n - r + 1, r) / P(N >= r)."""
    live = [(n, w) for n, w in zip(count.counts, count.weights) if n >= r]
    exists = sum(w for _, w in live)
    if not live:
        return 0.0, None, None, [None] * len(quantiles), []
    summaries = [(n, w / exists, os_.rank_summary(model, n, r, with_gap=(r == 1))) for n, w in live]
    if any(s.mean is None for _, _, s in summaries):
        mean = sd = None
    elif any(s.sd is None for _, _, s in summaries):
        mean, sd = sum(w * s.mean for _, w, s in summaries), None
    else:
        mean, sd = _mix_moments([(w, s.mean, s.sd) for _, w, s in summaries])

    def cdf_s(s):
        u = np.exp(-s)
        return sum(w * special.betainc(n - r + 1.0, float(r), u) for n, w in live) / exists

    s = _solve_s(np.asarray(quantiles, float), 0.0, math.inf, cdf_s)
    return exists, mean, sd, _value_at_s(model, s), [x for _, _, x in summaries]


def mixed_gap(model, count):
    """E[X1 - X2 | N >= 2], each count's expected gap mixed."""
    live = [(n, w) for n, w in zip(count.counts, count.weights) if n >= 2]
    total = sum(w for _, w in live)
    if not live:
        return None, 0.0
    gaps = [(w / total, os_.expected_gap(model, n)) for n, w in live]
    if any(g[0] is None for _, g in gaps):
        return None, 0.0
    return sum(w * g[0] for w, g in gaps), max(g[1] for _, g in gaps)


# ---- costly entry (Levin and Smith 1994) -----------------------------------------------------

def bidder_surplus_each(model, n, reserve):
    """u(n): one bidder's expected surplus among n, E[X1 - max(X2, r); sale] / n, the same
    under every standard rule (revenue equivalence)."""
    auc = ForwardAuction(model, n, reserve, 0.0)
    if auc.p_sale == 0.0:
        return 0.0
    got = gains.top_gains(auc, [])[0]
    if got is None:
        raise ParameterError("bidders.entry_cost", "the bidders' surplus does not exist (the value model's tail is too heavy)")
    return got[0] / n


def entry_payoff(model, entry, reserve, v0):
    """The seller's expected payoff at ``reserve`` under costly entry, for the reserve search:
    the winner's expected value less what the entrants keep, E[X1; sale] - E[N] u(N) summed over
    the entry count, plus v0 P(no sale), all on one value's quadrature (``surpluses_each``); the
    optimum's own figures are then computed count by count."""
    count = resolve(entry, model, reserve)
    auc = ForwardAuction(model, 1, reserve, 0.0)
    if count.p_sale(auc.s_r) == 0.0:
        return v0
    u = surpluses_each(model, entry.potential, reserve)
    kept = sum(w * n * u[n - 1] for n, w in zip(count.counts, count.weights) if n >= 1)
    q = os_.filled_rank_quadrature(model, 1, 1, power=1, s_cut=auc.s_r, fine=True, checked=True)
    top = q.integrate_nodes(q.values * count.highest_density_s(np.exp(q.stacked()[0])))[0] if q.panels else 0.0
    p_sale = count.p_sale(auc.s_r)
    return top - kept + v0 * (1.0 - p_sale)


def surpluses_each(model, potential, reserve):
    """u(n) for n = 1..potential at once, u(n) = int_{F(r)}^1 u^(n-1) (1 - u) Q'(u) du (by parts, as
    ``gains._second_price_surplus``; (1 - u) Q'(u) = S/f, ``ValueModel.inverse_hazard``), on one
    value's quadrature above the floor; a lone bidder also keeps floor - r where a reserve below the
    support is what it pays. Count by count where the model has no precise S/f."""
    auc = ForwardAuction(model, 1, reserve, 0.0)
    q = os_.filled_rank_quadrature(model, 1, 1, power=1, s_cut=auc.s_r, fine=True, checked=True)
    ih = model.inverse_hazard(q.u, q.v, q.anchor, q.delta) if q.panels and model.upper_tail_index > 1.0 else None
    if ih is None:
        return np.array([bidder_surplus_each(model, n, reserve) for n in range(1, potential + 1)])
    log_u = -np.exp(q.stacked()[0])  # log F at the nodes (the rule runs in t = log s)
    n = np.arange(1, potential + 1)
    with np.errstate(invalid="ignore", over="ignore"):
        parts = np.exp(np.multiply.outer(n - 1.0, log_u)) * (q.w * ih)
    u = parts[:, :, :os_.RULE_SPLIT].sum(axis=(1, 2))
    # a lone bidder's E[X - floor; sale] from the values: S/f has no weight u^(n-1) to damp it at
    # the bottom, below the quadrature's reach (``gains._second_price_surplus``)
    ref, off = q.offsets()
    u[0] = q.integrate_nodes(off - (auc.floor - ref))[0]
    if auc.lone_price < auc.floor:
        u[0] += (auc.floor - auc.lone_price) * auc.p_sale
    return u


def entry_count(model, potential, cost, reserve, spec):
    """The symmetric mixed-strategy entry equilibrium of Levin and Smith (1994): each of N
    potential bidders enters with the chance q at which entering pays its cost on average,
    sum_k C(N-1, k) q^k (1-q)^(N-1-k) u(k + 1) = c; everyone enters where u(N) >= c, nobody
    where u(1) <= c. Entrants do not learn how many entered; under risk-neutral private
    values their expected surplus is the same either way."""
    lone = ForwardAuction(model, 1, reserve, 0.0)
    if lone.p_sale > 0.0 and not math.isfinite(lone.lone_price):
        raise ParameterError("bidders.distribution", "costly entry needs a reserve, or a value model bounded below: a lone "
                                                     "entrant's price would be the bottom of an unbounded one")
    u = surpluses_each(model, potential, reserve)
    if not np.all(np.isfinite(u)):
        raise ParameterError("bidders.entry_cost", "an entrant's expected surplus is beyond double precision for this value "
                                                   "model, so no entry probability can be found")
    k = np.arange(potential)

    def gain(q):
        return float(np.dot(np.exp(special.gammaln(potential) - special.gammaln(k + 1) - special.gammaln(potential - k)
                                   + special.xlogy(k, q) + special.xlog1py(potential - 1 - k, -q)), u)) - cost

    if u[-1] >= cost:
        q = 1.0
    elif u[0] <= cost:
        q = 0.0
    else:
        q = optimize.brentq(gain, 0.0, 1.0, xtol=1e-15, rtol=1e-14)
    entry = {"entry_probability": q, "expected_entrants": potential * q, "surplus_each": [float(x) for x in u]}
    return Bidders.binomial(potential, q, spec=spec, entry=entry)
