"""Bidders who differ: groups of bidders, each with its own value model and count, and a bid
preference per group.

A preference delta ranks a forward bid b as (1 + delta) b and a reverse bid b as (1 - delta) b
(an evaluation credit); the winner pays its own bid under first price, and under second price
(and the ascending clock) the least bid that would still have won. The reserve (a maximum price
in reverse) is compared with the ranked, evaluated bid, the same number the ranking uses; with
no preference that is the bid itself.

Everything is computed on the forward twin (a reverse auction's costs C as values X = -C,
:func:`auction.forward_case`), in score space: a bid b of group i scores m_i b with m_i = 1 + delta
forward and 1 - delta reverse, so a group bidding in score space has values m_i X. Under second
price bidding one's value is dominant, the chance that a bidder of group i with value x wins is
Q_i(x) = prod_k G_k(m_i x)^(n_k - [k = i]) (G_k the chance that a group-k score stays below, or
under the reserve), and each payment's moments follow from Q by Myerson's (1981) envelope. Under
first price the bids solve the boundary-value problem of :mod:`asymmetric`. Each group's figures
are integrals over its values in quantile space (graded Gauss-Legendre panels).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from . import budget
from . import rules as R
from .asymmetric import AsymmetricBids, ScoreGroup
from .errors import ParameterError
from .models import Reflected

_GL = np.polynomial.legendre.leggauss(20)
#: Quantile panels: graded geometrically towards both ends (10^-16 .. 10^-1), uniform between.
_ENDS = [10.0**-k for k in range(16, 0, -1)]


@dataclass
class Group:
    """A group as the caller gave it: ``model`` in the caller's direction (values, or costs)."""

    name: str
    count: int
    model: object
    preference: float = 0.0


class _TwinGroup:
    """One group on the forward twin: value model, count, score factor m, the value at which
    its score reaches the floor (``entry``), and quantile nodes over its whole support."""

    def __init__(self, group, direction, floor, splits):
        self.name, self.n = group.name, group.count
        self.model = group.model if direction == "forward" else Reflected(group.model)
        self.m = 1.0 + group.preference if direction == "forward" else 1.0 - group.preference
        self.entry = -math.inf if floor is None else floor / self.m
        u0 = 0.0 if floor is None or self.entry <= self.model.lower else float(self.model.cdf(self.entry))
        self.p_entry, self.floor, self.splits = u0, floor, list(splits)
        self._nodes()

    def _nodes(self):
        cuts = [self.p_entry] + [float(self.model.cdf(s)) for s in self.splits if self.model.lower < s < self.model.upper]
        self.u, self.v, self.w = _quantile_nodes(cuts)
        self.x = self.model.value_at(self.u, self.v)
        with np.errstate(divide="ignore", invalid="ignore"):
            f = self.model.pdf(self.x)
            self.ih = np.where(f > 0.0, self.v / f, 0.0)  # (1 - F) / f
        self.above = self.x >= self.entry if self.floor is not None else np.ones(self.x.shape, bool)

    def split_at(self, value):
        """Add a panel edge at ``value`` (where an integrand kinks) and rebuild the nodes."""
        if value not in self.splits:
            self.splits.append(value)
            self._nodes()

    def cdf(self, x):
        return self.model.cdf(np.asarray(x, float))


def _quantile_nodes(cuts):
    """Gauss-Legendre nodes (u, v = 1 - u, weight) over (0, 1), graded towards both ends and
    split at ``cuts`` (quantiles where an integrand starts or kinks)."""
    edges = sorted({0.0, 1.0, *_ENDS, *[1.0 - e for e in _ENDS], *np.linspace(0.1, 0.9, 9).tolist(),
                    *[c for c in cuts if 0.0 < c < 1.0]})
    lo_u, hi_u = np.array(edges[:-1]), np.array(edges[1:])
    # 1 - u kept exactly at the upper ends' edges (1 - 10^-k is 10^-k below 1 to full precision)
    comp = {1.0 - e: e for e in _ENDS}
    hi_v = np.array([comp.get(e, 1.0 - e) for e in edges[1:]])
    xi, wi = _GL
    half = 0.5 * (hi_u - lo_u)
    u = (lo_u[:, None] + half[:, None] * (xi[None, :] + 1.0)).ravel()
    v = (hi_v[:, None] + half[:, None] * (1.0 - xi[None, :])).ravel()
    w = (half[:, None] * wi[None, :]).ravel()
    return u, v, w


def _check_rules(rules):
    for i, name in enumerate(rules):
        if R.get(name, f"rules.{i}").pricing is R.ALL_PAY:
            raise ParameterError(f"rules.{i}", "all-pay with bidder groups is not offered; drop it")


class GroupAuction:
    """Groups that differ (a list of :class:`Group`), in ``direction`` with ``reserve`` (a
    maximum price in reverse) and the auctioneer's own value (None: not given), on the
    forward twin."""

    def __init__(self, groups, direction, reserve=None, own_value=None):
        self.direction = direction
        self.floor = None if reserve is None else (reserve if direction == "forward" else -reserve)
        self.v0 = None if own_value is None else (own_value if direction == "forward" else -own_value)
        twins = [(g.model if direction == "forward" else Reflected(g.model),
                  1.0 + g.preference if direction == "forward" else 1.0 - g.preference) for g in groups]
        self.groups = []
        for g, (_, m) in zip(groups, twins):
            # where another group's chance to stay below kinks: its support's ends, as values (the
            # highest value's figures) and as scores met by this group's (the ranking's)
            ends = [e * f for mk_model, mk in twins for e in (mk_model.lower, mk_model.upper) if math.isfinite(e)
                    for f in (1.0, mk / m)]
            kinks = [float(k) for k in model_kinks(twins)]
            self.groups.append(_TwinGroup(g, direction, self.floor, ([] if self.v0 is None else [self.v0]) + ends + kinks))
        self.N = sum(g.n for g in self.groups)
        self._first = None

    # --- second price --------------------------------------------------------------------
    def _below(self, k, score):
        """G_k: the chance that one group-k bidder's score stays below ``score`` or under the floor."""
        g = self.groups[k]
        s = score if self.floor is None else np.maximum(score, self.floor)
        return g.cdf(s / g.m)

    def _win_second(self, i):
        """Q_i at group i's nodes under second price (0 where its score misses the floor)."""
        g = self.groups[i]
        q = np.ones(g.x.shape)
        for k, h in enumerate(self.groups):
            q = q * self._below(k, g.m * g.x) ** (h.n - (k == i))
        return np.where(g.above, q, 0.0)

    # --- first price ---------------------------------------------------------------------
    @property
    def first(self):
        """The first-price equilibrium (:class:`asymmetric.AsymmetricBids`), solved on first use.
        Where a group stops bidding below the top bid, the others' win chances kink at the values
        that bid its last bid: panel edges go there."""
        if self._first is None:
            self._first = AsymmetricBids([ScoreGroup(g.model, g.n, g.m) for g in self.groups], self.first_floor())
            for g, kinks in zip(self.groups, map(self._first.kinks, range(len(self.groups)))):
                for k in kinks:
                    g.split_at(k / g.m)
        return self._first

    def first_floor(self):
        """The score at which every group starts bidding under first price: the reserve, where it
        is at or above every group's lowest score, else the lowest score all groups share."""
        lows = [g.m * g.model.lower for g in self.groups]
        flat = [g for g in self.groups if ScoreGroup(g.model, g.n, g.m).flat_top]
        if len(flat) > 1 or (flat and flat[0].n < 2):
            names = ", ".join(repr(g.name) for g in flat)
            raise ParameterError("rules", "first price with bidder groups is offered where every group's model has a top "
                                          "with a positive density there (uniform, power, a truncated family), but one: "
                                          "a group of two bidders or more whose model has none (lognormal, gamma) may "
                                          "bid on alone above the others' last bids; here "
                                          f"{'groups' if len(flat) > 1 else 'group'} {names} "
                                          f"{'have' if len(flat) > 1 else 'has one bidder and'} none: ask for second "
                                          "price or the ascending clock")
        if self.floor is not None and self.floor >= max(lows):
            return self.floor
        spread = max(lows) - min(lows)
        if math.isfinite(max(lows)) and spread <= 1e-12 * max(1.0, abs(max(lows))) \
                and (self.floor is None or self.floor <= min(lows)):
            return max(lows)
        where = "a reserve at or above" if self.direction == "forward" else "a maximum price at or below"
        raise ParameterError("reserve", f"under first price every group must start bidding at one score: give {where} "
                                        f"{_caller(self.direction, max(lows)):g} (the groups' lowest evaluated "
                                        f"{'values' if self.direction == 'forward' else 'highest costs'} differ)")

    def _at_values(self, i):
        """(score bid, each group's inverse bid there) at group i's nodes that take part."""
        g = self.groups[i]
        return self.first.at_values(i, g.m * g.x[g.above])

    def _win_first(self, i):
        """(Q_i, the bid in value units, the group-k thresholds) at group i's nodes under first price."""
        g = self.groups[i]
        b, phi = self._at_values(i)
        q = np.ones(b.shape)
        for k, h in enumerate(self.groups):
            q = q * h.cdf(phi[k] / h.m) ** (h.n - (k == i))
        full_q, full_b = np.zeros(g.x.shape), np.full(g.x.shape, np.nan)
        full_q[g.above], full_b[g.above] = q, b / g.m
        thresholds = np.full((len(self.groups), g.x.size), -np.inf)
        thresholds[:, g.above] = phi / np.array([h.m for h in self.groups])[:, None]
        return full_q, full_b, thresholds

    # --- figures ------------------------------------------------------------------------
    def p_sale(self):
        return 1.0 - math.prod(float(g.cdf(g.entry)) ** g.n if g.entry > g.model.lower else 0.0 for g in self.groups)

    def figures(self, pricing):
        """Revenue mean, sd, its error estimate, and per group: win probability, payment,
        surplus; the chance that the highest value wins and the value lost (on the twin)."""
        budget.check()
        if self.p_sale() == 0.0:  # the reserve is beyond every group's values: nothing is sold
            gains = self._highest_value()[1]
            return {"mean": 0.0, "sd": 0.0, "err": 0.0, "p_sale": 0.0, "probability_highest_value_wins": 0.0,
                    "expected_value_lost": 0.0, "efficiency": 0.0 if gains else None,
                    "groups": [{"name": g.name, "win_probability": 0.0, "expected_payment": 0.0, "expected_surplus": 0.0}
                               for g in self.groups]}
        if pricing is not R.SECOND:
            self.first  # solved (and the nodes split where its shape needs) before any node is read
        per_group, m1, m2, err = [], 0.0, 0.0, 0.0
        win_value, top_wins = 0.0, 0.0
        for i, g in enumerate(self.groups):
            if pricing is R.SECOND:
                q = self._win_second(i)
                pay1 = (g.x - g.ih) * q  # Myerson's envelope: E[pay | x] integrates to this
                pay2 = (g.x**2 - 2.0 * g.x * g.ih) * q
                surplus = g.ih * q
                thresholds = np.array([g.m * g.x / h.m for h in self.groups])
            else:
                q, bid, thresholds = self._win_first(i)
                with np.errstate(invalid="ignore"):
                    pay1 = np.where(g.above, bid * q, 0.0)
                    pay2 = np.where(g.above, bid**2 * q, 0.0)
                    surplus = np.where(g.above, (g.x - bid) * q, 0.0)
                    envelope = float(g.w @ np.where(g.above, (g.x - g.ih) * q, 0.0))
                err = max(err, g.n * abs(envelope - float(g.w @ pay1)))
            win = float(g.w @ q)
            e1, e2 = float(g.w @ np.where(g.above, pay1, 0.0)), float(g.w @ np.where(g.above, pay2, 0.0))
            m1, m2 = m1 + g.n * e1, m2 + g.n * e2
            win_value += g.n * float(g.w @ np.where(g.above, g.x * q, 0.0))
            # the winner is also the highest value: every rival's value below x as well as beaten
            best = np.ones(g.x.shape)
            for k, h in enumerate(self.groups):
                best = best * h.cdf(np.minimum(g.x, thresholds[k])) ** (h.n - (k == i))
            top_wins += g.n * float(g.w @ np.where(g.above, best, 0.0))
            per_group.append({"name": g.name, "win_probability": _prob(g.n * win), "expected_payment": g.n * e1,
                              "expected_surplus": g.n * float(g.w @ np.where(g.above, surplus, 0.0))})
        var = m2 - m1 * m1
        sd = math.sqrt(max(var, 0.0)) if math.isfinite(var) else None
        max_value, gains_max = self._highest_value()
        p_sale = self.p_sale()
        out = {"mean": m1, "sd": sd, "err": err, "groups": per_group, "p_sale": p_sale,
               "probability_highest_value_wins": _prob(top_wins), "expected_value_lost": max(max_value - win_value, 0.0)}
        out["efficiency"] = None
        if gains_max is not None and gains_max > 0.0:
            out["efficiency"] = _prob((win_value - self.v0 * p_sale) / gains_max)
        return out

    def _highest_value(self):
        """(E[max value; sale], E[(max value - v0)^+] or None without v0): the first integrates
        x P(every rival below x, and some bidder takes part) over each group's values."""
        on_sale, gains = 0.0, 0.0 if self.v0 is not None else None
        for i, g in enumerate(self.groups):
            below = np.ones(g.x.shape)
            none_in = np.ones(g.x.shape)
            for k, h in enumerate(self.groups):
                below = below * h.cdf(g.x) ** (h.n - (k == i))
                none_in = none_in * h.cdf(np.minimum(g.x, h.entry)) ** (h.n - (k == i))
            sale = np.where(g.above, below, below - none_in)
            on_sale += g.n * float(g.w @ (g.x * sale))
            if gains is not None:
                gains += g.n * float(g.w @ np.where(g.x > self.v0, (g.x - self.v0) * below, 0.0))
        return on_sale, gains

    def bids(self, i, x, pricing):
        """Group i's bids (in value units, on the twin) at twin values x that take part."""
        g = self.groups[i]
        if pricing.truthful:
            return np.asarray(x, float)
        eq = self.first
        w = g.m * np.asarray(x, float)
        return eq.bids(i, np.minimum(w, eq.tops[i])) / g.m


def model_kinks(twins):
    """Every group's kinks (a mixture's components' ends, a table's knots), as values and as the
    scores other groups meet them at: their chances to stay below kink there too."""
    out = []
    for model, mk in twins:
        for k in model.kink_values():
            out += [k * mk / m for _, m in twins]
    return out


def _prob(p):
    """A probability integrated by quadrature, kept within [0, 1] against rounding."""
    return min(max(p, 0.0), 1.0)


def _caller(direction, score):
    """A twin score in the caller's sign."""
    return score if direction == "forward" else -score


def group_report(groups, direction, reserve=None, own_value=None, rules=None):
    """Revenue (or payment) figures of each rule asked (default: second price, ascending, first
    price, descending) for groups that differ, in the caller's sign, under the core's names."""
    asked = rules is not None
    rules = [r for r in R.names() if R.get(r).pricing is not R.ALL_PAY] if rules is None else list(rules)
    _check_rules(rules)
    auc = GroupAuction(groups, direction, reserve, own_value)
    sign = 1.0 if direction == "forward" else -1.0
    shared, results, err, warnings = {}, [], 0.0, []
    for name in rules:
        pricing = R.get(name).pricing
        if pricing.name not in shared:
            try:
                shared[pricing.name] = auc.figures(pricing)
            except ParameterError as e:
                if asked:  # a rule the caller named: its refusal is the answer
                    raise
                shared[pricing.name] = None  # a default rule: left out, and the warning says why
                warnings.append(f"the bid-priced rules are left out: {e.message}")
        f = shared[pricing.name]
        if f is None:
            continue
        err = max(err, f["err"])
        results.append({
            "rule": name,
            "expected_revenue": sign * f["mean"],
            "revenue_sd": f["sd"],
            "probability_of_sale": f["p_sale"],
            "efficiency": f["efficiency"],
            "probability_highest_value_wins": f["probability_highest_value_wins"],
            "expected_value_lost": f["expected_value_lost"],
            "groups": [{**gr, "expected_payment": sign * gr["expected_payment"]} for gr in f["groups"]],
        })
    first = auc._first
    numerics = {"method": "quantile_gauss_legendre" + ("+chebyshev_collocation" if first is not None else ""),
                "abs_error": err}
    if first is not None:
        numerics.update({"foc_residual": first.residual, "collocation_points": first.m,
                         "top_evaluated_bid": _caller(direction, first.top_bid)})
    return {"direction": direction, "reserve": reserve, "results": results, "numerics": numerics,
            "first_vs_second": _first_vs_second(results, direction), "warnings": warnings}


def _first_vs_second(results, direction):
    """The first-price revenue less the second-price one (forward; reverse: payment), where both were asked."""
    by = {R.get(r["rule"]).pricing.name: r["expected_revenue"] for r in results}
    if "first" not in by or "second" not in by:
        return None
    diff = by["first"] - by["second"]
    better = "first_price" if (diff > 0) == (direction == "forward") else "second_price"
    return {"difference": diff, "better_for_auctioneer": better if diff != 0 else None}


def group_bids(groups, direction, reserve=None, rule="first_price", points=51, at=None):
    """Each group's equilibrium bids at ``at`` values (or ``points`` across its support)."""
    if R.get(rule, "rule").pricing is R.ALL_PAY:
        raise ParameterError("rule", "all-pay with bidder groups is not offered; ask for another rule")
    auc = GroupAuction(groups, direction, reserve)
    pricing = R.get(rule, "rule").pricing
    if not pricing.truthful and auc.p_sale() > 0.0:  # with nothing to sell nobody bids: no equilibrium to solve
        try:
            auc.first
        except ParameterError as e:
            raise ParameterError("rule" if e.field == "rules" else e.field, e.message) from None
    out = []
    for i, (g, tw) in enumerate(zip(groups, auc.groups)):
        if at is not None:
            grid = np.asarray(at, float)
        else:
            lo = g.model.lower if math.isfinite(g.model.lower) else float(g.model.ppf(1e-3))
            hi = g.model.upper if math.isfinite(g.model.upper) else float(g.model.isf(1e-3))
            grid = np.linspace(lo, hi, points)
        x = grid if direction == "forward" else -grid
        takes_part = (x >= tw.model.lower) & (x <= tw.model.upper) & (x * tw.m >= (auc.floor if auc.floor is not None else -np.inf))
        b = np.full(x.shape, np.nan)
        if takes_part.any():
            b[takes_part] = auc.bids(i, x[takes_part], pricing)
        b = b if direction == "forward" else -b
        out.append({"name": g.name, "values": grid.tolist(),
                    "bids": [float(v) if ok and math.isfinite(v) else None for v, ok in zip(b.tolist(), takes_part.tolist())]})
    numerics = None
    if not pricing.truthful and auc.p_sale() > 0.0:
        numerics = {"method": "chebyshev_collocation", "foc_residual": auc.first.residual,
                    "top_evaluated_bid": _caller(direction, auc.first.top_bid)}
    return {"direction": direction, "rule": rule, "reserve": reserve, "groups": out, "numerics": numerics}


def _top_densities(auc, i):
    """At group i's nodes: (P(every rival below x), P(exactly one rival above x)), so that the
    highest of all values has density sum_i n_i f_i A_i and the second highest sum_i n_i f_i B_i."""
    g = auc.groups[i]
    F = [h.cdf(g.x) for h in auc.groups]
    ex = [h.n - (k == i) for k, h in enumerate(auc.groups)]
    A = np.ones(g.x.shape)
    for Fk, e in zip(F, ex):
        A = A * Fk**e
    B = np.zeros(g.x.shape)
    for j, (Fj, ej) in enumerate(zip(F, ex)):
        if ej == 0:
            continue
        term = ej * (1.0 - Fj) * Fj ** (ej - 1)
        for k, (Fk, e) in enumerate(zip(F, ex)):
            if k != j:
                term = term * Fk**e
        B = B + term
    return A, B


def group_top_values(groups, direction, quantiles=(0.05, 0.25, 0.5, 0.75, 0.95)):
    """The highest and second-highest value (reverse: lowest and second-lowest cost) across
    groups that differ: mean, sd, quantiles, and each group's chance to hold the rank. The
    highest of independent values has CDF H = prod_k F_k^n_k; the second highest
    H + sum_j n_j (1 - F_j) F_j^(n_j - 1) prod_(k != j) F_k^n_k (David and Nagaraja 2003, ch. 5)."""
    auc = GroupAuction(groups, direction)
    sign = 1.0 if direction == "forward" else -1.0
    moments = np.zeros((2, 3))  # rank x (mass, first, second moment)
    shares = [[], []]
    for i, g in enumerate(auc.groups):
        A, B = _top_densities(auc, i)
        for r, dens in enumerate((A, B)):
            wd = g.n * g.w * dens
            moments[r] += [wd.sum(), wd @ g.x, wd @ g.x**2]
            shares[r].append(float(wd.sum()))
    results = []
    for r in range(2):
        mass, m1, m2 = moments[r]
        mean = m1 / mass
        var = m2 / mass - mean * mean
        qs = _rank_quantiles(auc, r + 1, [p if direction == "forward" else 1.0 - p for p in quantiles])
        results.append({"rank": r + 1, "mean": sign * mean, "sd": math.sqrt(max(var, 0.0)) if math.isfinite(var) else None,
                        "quantiles": [{"p": float(p), "value": sign * float(x)} for p, x in zip(quantiles, qs)],
                        "groups": [{"name": g.name, "probability": _prob(s / mass)} for g, s in zip(auc.groups, shares[r])]})
    gap = results[0]["mean"] - results[1]["mean"]
    return {"direction": direction, "results": results, "expected_gap": abs(gap),
            "ranks_counted_from": "highest" if direction == "forward" else "lowest",
            "numerics": {"method": "quantile_gauss_legendre", "abs_error": abs(1.0 - moments[0][0]) + abs(1.0 - moments[1][0])}}


def _rank_cdf(auc, rank, x):
    """P(the rank-th highest value <= x), rank 1 or 2."""
    F = [g.cdf(x) for g in auc.groups]
    H = np.ones(np.shape(x))
    for Fk, g in zip(F, auc.groups):
        H = H * Fk**g.n
    if rank == 1:
        return H
    out = H.copy()
    for j, (Fj, gj) in enumerate(zip(F, auc.groups)):
        term = gj.n * (1.0 - Fj) * Fj ** (gj.n - 1)
        for k, (Fk, gk) in enumerate(zip(F, auc.groups)):
            if k != j:
                term = term * Fk**gk.n
        out = out + term
    return out


def _rank_quantiles(auc, rank, ps):
    """The rank's quantiles at ps by bisection between the lowest and highest values any group holds."""
    ps = np.asarray(ps, float)
    if ps.size == 0:
        return np.empty(0)
    lo = min(float(g.model.value_at(np.array(1e-16), np.array(1.0 - 1e-16))) for g in auc.groups)
    hi = max(float(g.model.value_at(np.array(1.0 - 1e-16), np.array(1e-16))) for g in auc.groups)
    a, b = np.full(ps.shape, lo), np.full(ps.shape, hi)
    for _ in range(200):
        mid = 0.5 * (a + b)
        below = _rank_cdf(auc, rank, mid) < ps
        a, b = np.where(below, mid, a), np.where(below, b, mid)
        if np.all(b - a <= 4e-16 * np.maximum(np.abs(a), np.abs(b))):
            break
    return 0.5 * (a + b)
