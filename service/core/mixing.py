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

from . import gains, price
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
        self.parts = {n: ForwardAuction(model, n, reserve, seller_value) for n in bidders.counts if n >= 1}
        # the floor, its -log F and the lone bidder's price are the same for every count
        ref = ForwardAuction(model, max(bidders.counts[-1], 1), reserve, seller_value)
        self.reserve, self.floor, self.s_r, self.f_r = ref.reserve, ref.floor, ref.s_r, ref.f_r
        self.reserve_binds, self.lone_price = ref.reserve_binds, ref.lone_price
        self.p_sale = bidders.p_sale(self.s_r)
        self._single = None

    def weighted(self):
        """(n, P(N = n), that count's auction) for every count of at least one bidder."""
        return [(n, w, self.parts[n]) for n, w in zip(self.bidders.counts, self.bidders.weights) if n >= 1]

    def bids_at_s(self, s):
        """The mixed first-price bid at values with -log F(v) = s (array), the floor's bid
        at and below the floor: each fixed-count bid weighted by pi_k F^k, in logs so that
        no weight underflows before the others."""
        s = np.minimum(np.asarray(s, float), self.s_r)
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
                bids[i, live] = self.lone_price if k == 0 else self.parts[k + 1].bids.at_s(s[live])
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
            self._single = (power, q, self._bids_on(q, s) if q.panels else np.empty((0, q.w.shape[1])),
                            self.bidders.highest_density_s(s))
        return self._single[1:]

    def _bids_on(self, q, s):
        """The mixed bids at the nodes of one value's quadrature ``q`` (s = -log F there), from
        G(v) (b(v) - o) = pi_0 (r - o) + (G(F(floor)) - pi_0) (floor - o) + int_floor^v (x - o) dG,
        the integral taken from the cut up to each node on q's own panels: whole panels summed
        from the cut, the node's own panel by the spectral partial-panel rule (as
        ``bids._at_nodes`` does for one count). The origin o is the floor where it is finite,
        so every term is positive and small bids keep their digits."""
        pis = self.bidders.rival_weights
        ref, off = q.offsets()
        o = self.floor if math.isfinite(self.floor) else ref
        xo = off + (ref - o)
        with np.errstate(over="ignore", invalid="ignore"):
            g = sum(p * k * np.exp(-k * s) for k, p in pis.items() if k >= 1)  # -dG/ds
            big_g = sum(p * np.exp(-k * s) for k, p in pis.items())
            h = xo * g * s  # per unit t
        _, dt, _ = q.stacked()
        whole = (dt * h) @ os_.RULE_COLUMNS  # (panels, 2): each panel's integral by each rule
        beyond = np.vstack((np.cumsum(whole[::-1], axis=0)[::-1][1:], np.zeros((1, 2))))  # from each panel's right edge to the cut
        half = 0.5 * (q.b - q.a)[:, None]
        above = half * (h @ TAIL_BOTH) + beyond @ os_.RULE_COLUMNS.T
        pi0 = pis.get(0, 0.0)
        g_floor = float(sum(p * math.exp(-k * self.s_r) for k, p in pis.items() if k >= 1)) if math.isfinite(self.s_r) else 0.0
        start = pi0 * (self.lone_price - o) + (g_floor * (self.floor - o) if g_floor else 0.0)
        with np.errstate(over="ignore", invalid="ignore"):
            bids = o + (start + above) / big_g
        values = ref + off
        return np.where(big_g > 0.0, np.minimum(np.maximum(bids, min(self.floor, self.lone_price)), values), self.floor)


def _mix_moments(parts):
    """(mean, sd) of a mixture from each part's (weight, mean, sd), by the law of total variance."""
    mean = sum(w * m for w, m, _ in parts)
    second = sum(w * (sd * sd + (m - mean) ** 2) for w, m, sd in parts)
    return mean, math.sqrt(max(second, 0.0))


def mixed_figures(auc, rules, quantiles):
    """Each rule's figures under an uncertain count, as :func:`reports.forward_figures`
    gives them for one count."""
    from .reports import forward_figures  # reports dispatches here

    if auc.p_sale == 0.0:  # nobody takes part, or no value reaches the reserve
        return {rule: {"rule": rule, "expected_revenue": 0.0, "revenue_sd": 0.0, "revenue_quantiles": [0.0] * len(quantiles),
                       "probability_of_sale": 0.0, "expected_winner_surplus": 0.0, "expected_bidder_surplus": 0.0,
                       "efficiency": None, "_err": 0.0} for rule in rules}, []
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
                sd, sd_err = bid_revenue_sd(auc, pricing, mean)
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


def bid_revenue_sd(auc, pricing, mean):
    """(sd, its error) of the revenue under a bid pricing, with the mixed bids: first price
    E[b(X1)^2; sale] over one value's quadrature weighted by H'(F); all-pay, the sum of N
    bids a = G b, E[N] Var(a) + Var(N) E[a]^2 (a compound sum's variance)."""
    q, bids, hp = auc.single_quadrature(2)
    if not q.panels:
        return 0.0, 0.0
    if pricing is R.ALL_PAY:
        a = _all_pay_bids(auc, q)
        (ea, e_err), (ea2, e2_err) = q.integrate_nodes(a), q.integrate_nodes(a * a)
        count = auc.bidders
        var_n = count.expect(lambda n: n * n) - count.mean ** 2
        var = count.mean * (ea2 - ea * ea) + var_n * ea * ea
        return math.sqrt(max(var, 0.0)), math.sqrt(abs(count.mean * e2_err)) + abs(ea) * e_err
    second, err = q.integrate_nodes(hp * bids * bids)
    var = second - mean * mean
    sd = math.sqrt(max(var, 0.0))
    return sd, (err / (2.0 * sd) if sd > 0 else math.sqrt(err))


def _all_pay_bids(auc, q):
    """a(v) = G(F(v)) b(v), each bidder's all-pay bid, at the quadrature's nodes."""
    pis = auc.bidders.rival_weights
    s = -np.log(q.u)
    g = sum(p * np.exp(-k * s) for k, p in pis.items())
    return g * auc.single_quadrature(2)[1]


def _all_pay_winner_surplus(auc, per_count):
    """E[X1 - a(X1); sale] with the mixed all-pay bid a = G b: what the winner keeps."""
    winner_value = sum(w * gains.winner_value(part) for _, w, part, _ in per_count)
    q, _, hp = auc.single_quadrature(2)
    paid = q.integrate_nodes(hp * _all_pay_bids(auc, q))[0] if q.panels else 0.0
    return winner_value - paid


def _solve_s(target, lo, hi, fn):
    """s in [lo, hi] with fn(s) = target for each target (fn decreasing in s), by bisection
    in log s, so that values near the top (s tiny) keep their digits."""
    target = np.asarray(target, float)
    a = np.full(target.shape, math.log(max(lo, 1e-300)))
    b = np.full(target.shape, math.log(hi) if math.isfinite(hi) else math.log(800.0))
    for _ in range(120):
        mid = 0.5 * (a + b)
        above = fn(np.exp(mid)) > target
        a, b = np.where(above, mid, a), np.where(above, b, mid)
    return np.exp(0.5 * (a + b))


def _value_at_s(model, s):
    return model.value_at(np.exp(-s), -np.expm1(-s))


def second_price_quantiles(auc, ps):
    """Quantiles of the second-price revenue under an uncertain count: on a sale the price
    is max(X2, r) with P(X2 <= x) = H(u) + (1 - u) H'(u), u = F(x) (a missing second value
    counts as below every x), a lone bidder paying the reserve itself."""
    count = auc.bidders
    h_r = float(count.highest_cdf_s(auc.s_r))  # P(no sale): no value beats the floor, or no bidder
    p_one = dict(zip(count.counts, count.weights)).get(1, 0.0) * (1.0 - auc.f_r)
    lone_below = auc.lone_price < auc.floor

    def second_cdf_s(s):
        return count.highest_cdf_s(s) - np.expm1(-s) * count.highest_density_s(s)

    at_floor = float(second_cdf_s(np.array(auc.s_r))) - h_r if math.isfinite(auc.s_r) else 0.0

    def sale_quantile(q):
        q = np.asarray(q, float)
        out = np.full(q.shape, auc.floor)
        if lone_below:
            out = np.where(q <= p_one, auc.lone_price, out)
        rest = q > at_floor
        if rest.any():
            s = _solve_s(q[rest] + h_r, 0.0, auc.s_r, second_cdf_s)
            out[rest] = _value_at_s(auc.model, s)
        return out

    return price._with_no_sale(auc, ps, sale_quantile, lambda: _cdf_at_zero(auc, sale_quantile))


def bid_price_quantiles(auc, ps):
    """Quantiles of the first-price revenue under an uncertain count: the price is the mixed
    bid at the highest value, P(sale, X1 <= v) = H(F(v)) - H(F(r))."""
    count = auc.bidders
    h_r = float(count.highest_cdf_s(auc.s_r))  # P(no sale): no value beats the floor, or no bidder

    def sale_quantile(q):
        s = _solve_s(np.asarray(q, float) + h_r, 0.0, auc.s_r, count.highest_cdf_s)
        return auc.bids_at_s(s)

    return price._with_no_sale(auc, ps, sale_quantile, lambda: _cdf_at_zero(auc, sale_quantile))


def _cdf_at_zero(auc, sale_quantile):
    """The sale mass below a price of 0, by bisection on the increasing sale quantile."""
    lo, hi = 0.0, auc.p_sale
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        lo, hi = (mid, hi) if float(sale_quantile(np.array([mid]))[0]) < 0.0 else (lo, mid)
    return lo


def mixed_bids(auc, pricing, v):
    """The forward bids at values v under a bid pricing: the mixed b(v), or a(v) = G(F(v)) b(v)."""
    s = np.minimum(auc.model.neg_log_cdf(v), auc.s_r)
    b = auc.bids_at_s(s)
    if pricing is not R.ALL_PAY:
        return b
    g = sum(p * np.exp(-k * np.where(np.isfinite(s), s, 0.0)) if k else p for k, p in auc.bidders.rival_weights.items())
    g = np.where(np.isfinite(s), g, auc.bidders.rival_weights.get(0, 0.0))
    return g * b


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
    if count.p_sale(ForwardAuction(model, 1, reserve, 0.0).s_r) == 0.0:
        return v0
    u = surpluses_each(model, entry.potential, reserve)
    kept = sum(w * n * u[n - 1] for n, w in zip(count.counts, count.weights) if n >= 1)
    auc = ForwardAuction(model, 1, reserve, 0.0)
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
    if auc.lone_price < auc.floor:
        u[0] += (auc.floor - auc.lone_price) * auc.p_sale
    return u


def entry_count(model, potential, cost, reserve, spec):
    """The symmetric mixed-strategy entry equilibrium of Levin and Smith (1994): each of N
    potential bidders enters with the chance q at which entering pays its cost on average,
    sum_k C(N-1, k) q^k (1-q)^(N-1-k) u(k + 1) = c; everyone enters where u(N) >= c, nobody
    where u(1) <= c. Entrants do not learn how many entered; under risk-neutral private
    values their expected surplus is the same either way."""
    u = surpluses_each(model, potential, reserve)
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
