"""Sweeps: auction figures over a grid of bidder counts and reserves.

For each bidder count the model's quadrature nodes are built once, and every
reserve is a row of cut weights on them (``RankQuadrature.cut_weights``: whole
panels below the cut, the cut panel by spectral partial integration), so the
reserves of one bidder count cost a few matrix products rather than one
single-scenario computation each.

The first-price bids with reserve r follow from those without one:
b_r(v) = b_0(v) + (F(r)/F(v))^(n-1) (r - b_0(r)) for v >= r, because
b_r(v) = E[max(Y, r) | Y < v] with Y the highest of the other n - 1 values.
Ascending shares the second-price route and descending the first-price one
(strategically the same rules); /v1/revenue computes all five separately.
"""
from __future__ import annotations

import math

import numpy as np

from . import audit, auctions, budget
from . import orderstats as os_
from .auctions import ForwardAuction, _check_price_exists, _forward_case
from .errors import ParameterError
from .topvalues import finite

METRICS = {
    "forward": ("expected_revenue", "revenue_sd", "probability_of_sale", "expected_winner_surplus",
                "expected_bidder_surplus", "efficiency", "expected_payoff"),
    "reverse": ("expected_payment", "payment_sd", "probability_of_award", "expected_winner_surplus",
                "expected_bidder_surplus", "efficiency", "expected_payoff"),
}
_ROUTE = {"second_price": "sp", "ascending": "sp", "first_price": "fp", "descending": "fp", "all_pay": "ap"}


def _t_of(s, k):
    with np.errstate(divide="ignore"):
        return np.log(k * s)


def _filled(model, n, r):
    p = 2 if os_.moment_exists(model, n, r, 2) else 1
    up, low = os_.tail_growth(model, p)
    return os_.rank_quadrature(n, r, kinks_u=model.kinks_u(), upper_growth=up, lower_growth=low,
                               model=model, power=p, fine=True).fill(model)


def _flat(q):
    """Node values, their density weights per dt, and the nodes' s = -log F."""
    (t, dt, v), _ = q.rules()
    dens = (q.w_hi / dt).ravel()
    return v.ravel(), dens, (np.exp(t) / q.m).ravel()


#: A cell whose vectorised terms exceed its figure by this factor has lost digits to
#: cancellation (a reserve near the top of costs that start at 0, where b_0 and the
#: reserve's lift are both far larger than the tiny price); it is recomputed by the
#: single-scenario route, which integrates with the reserve in place.
_CANCELLATION = 1e5


class _Reserves:
    """One bidder count's reserves in the forward twin: the floor max(r, lower), whether it
    binds, s_r = -log F(floor), and the chances of a sale and of none."""

    def __init__(self, model, n, reserves):
        self.reserves = reserves
        self.floor = np.maximum(reserves, model.lower)
        self.binds = reserves > model.lower
        self.s_r = np.where(self.binds, model.neg_log_cdf(self.floor), np.inf)
        with np.errstate(over="ignore", invalid="ignore"):
            self.p_sale = np.where(np.isfinite(self.s_r), -np.expm1(-n * self.s_r), 1.0)
            self.p0 = np.where(np.isfinite(self.s_r), np.exp(-n * self.s_r), 0.0)


def _block(model, n, reserves, v0):
    """Figures for one bidder count over all reserves, per route: a dict of arrays; each
    route's entry is (revenue, sd, what the winner pays)."""
    cut = _Reserves(model, n, reserves)
    if n == 1:
        return _lone_block(model, cut, v0)
    k = n - 1.0
    c, sp, loose = _second_price_cells(model, n, cut)
    auc = ForwardAuction(model, n, None, v0)
    fp, ap, loose_bid = _bid_cells(auc, cut, c)
    nb, q1 = auc.node_bids(), auc._inner_quadrature()
    v1, outer = nb.first_rule(nb.values), nb.first_rule(nb.top)
    out = {"p_sale": cut.p_sale, "sp": sp, "fp": fp, "ap": ap, "e1": q1.cut_weights(_t_of(cut.s_r, k)) @ (outer * v1)}
    if v0 is not None:
        out["best"] = _best_gain(model, q1, outer, v1, nb.first_rule(nb.s), k, v0)
    for j in np.nonzero((loose | loose_bid) & (cut.p_sale > 0.0))[0]:
        budget.check()
        _single_scenario(model, n, float(reserves[j]), v0, out, j)
    return out


def _lone_block(model, cut, v0):
    """A lone bidder pays the reserve itself (even one below the support) whenever it buys."""
    q = _filled(model, 1, 1)
    v, dens, s = _flat(q)
    e1 = q.cut_weights(_t_of(cut.s_r, 1.0)) @ (dens * v)
    # Where the sale is a sliver (a reserve near the top), the cut panel's partial integral keeps
    # too few of the winner's value's digits for the surplus, a small difference: recompute it.
    for j in np.nonzero((cut.p_sale > 0.0) & (cut.p_sale < 1e-3))[0]:
        budget.check()
        got = auctions._winner_value(ForwardAuction(model, 1, float(cut.reserves[j]), v0), ())
        e1[j] = math.nan if got is None else got
    with np.errstate(invalid="ignore"):
        rev = np.where(cut.p_sale > 0, cut.reserves * cut.p_sale, 0.0)
        sd = np.where(cut.p_sale > 0, np.abs(cut.reserves) * np.sqrt(cut.p_sale * cut.p0), 0.0)
    out = {"p_sale": cut.p_sale, "e1": e1, **{key: (rev, sd, rev) for key in ("sp", "fp", "ap")}}
    if v0 is not None:
        out["best"] = _best_gain(model, q, dens, v, s, 1.0, v0)
    return out


def _spread(m2, mean, c):
    """sd from the second moment about c, and whether the difference lost its digits."""
    with np.errstate(over="ignore", invalid="ignore"):
        shift = (mean - c) ** 2
        var = m2 - shift
        return np.sqrt(np.maximum(var, 0.0)), m2 + shift > _CANCELLATION * np.abs(var)


def _lost(total, *terms):
    """Whether a sum lost its digits to cancellation: its terms far exceed it."""
    with np.errstate(over="ignore", invalid="ignore"):
        return sum(np.abs(t) for t in terms) > _CANCELLATION * np.abs(total)


def _second_price_cells(model, n, cut):
    """The price max(X2, r) on a sale: (centre, (revenue, sd, revenue), loose cells)."""
    k = n - 1.0
    q2 = _filled(model, n, 2)
    v2, d2, _ = _flat(q2)
    W2 = q2.cut_weights(_t_of(cut.s_r, k))
    with np.errstate(over="ignore", invalid="ignore"):
        pr = np.where(cut.binds, n * np.exp(-k * cut.s_r) * -np.expm1(-cut.s_r), 0.0)
        at_floor = np.where(pr > 0, pr * cut.floor, 0.0)
        c = float(np.sum(q2.w_hi * q2.values_hi) / q2.total())  # centre for the second moments
        above = W2 @ (d2 * v2)
        rev = at_floor + above
        m2 = cut.p0 * c * c + np.where(pr > 0, pr * (cut.floor - c) ** 2, 0.0) + W2 @ (d2 * (v2 - c) ** 2)
    sd, loose = _spread(m2, rev, c)
    return c, (rev, sd, rev), loose | _lost(rev, at_floor, above) | _beyond_nodes(q2, cut, k)


def _bid_cells(auc, cut, c):
    """First price and all-pay on the nodes of the highest rival value, from the bids
    b_0 without a reserve: ((revenue, sd, winner pays) for each, loose cells)."""
    n, k = auc.n, auc.n - 1.0
    nb, q1 = auc.node_bids(), auc._inner_quadrature()
    s_r, p0 = cut.s_r, cut.p0
    b0 = nb.first_rule(nb.bids)
    W1 = q1.cut_weights(_t_of(s_r, k))
    delta = np.where(cut.binds, cut.floor - _bids_at_reserves(auc, q1, cut.floor, s_r, cut.binds), 0.0)
    # With g = G(r)/G(v) = e^(-(n-1)(s_r - s)), b_r = b_0 + g delta. The terms in g are
    # integrated in closed form or with g's growth folded into a smooth integrand,
    # never by interpolating g itself across a cut panel.
    with np.errstate(over="ignore", invalid="ignore"):
        g_r = np.where(np.isfinite(s_r), np.exp(-k * s_r), 0.0)  # G(r)
        sx = np.where(np.isfinite(s_r), -np.expm1(-s_r), 1.0)  # P(X >= r)
        if n > 2:
            i3 = np.where(np.isfinite(s_r), n * np.exp(-n * s_r) * -np.expm1(-(n - 2.0) * s_r) / (n - 2.0), 0.0)
        else:
            i3 = np.where(np.isfinite(s_r), 2.0 * s_r * np.exp(-2.0 * s_r), 0.0)
        outer, single = nb.first_rule(nb.top), nb.first_rule(nb.one)  # densities per dt: the highest value's, one bidder's
        base, lift_fp = W1 @ (outer * b0), delta * n * g_r * sx
        rev_fp = base + lift_fp
        m2_fp = W1 @ (outer * (b0 - c) ** 2) + 2.0 * delta * g_r * (W1 @ (n * single * (b0 - c))) + delta**2 * i3 + p0 * c * c
        sd_fp, loose = _spread(m2_fp, rev_fp, c)
        a0 = nb.first_rule(nb.rivals) * b0  # a_r(v) = F(v)^(n-1) b_0(v) + G(r) delta
        lift = g_r * delta
        ea0 = W1 @ (single * a0)
        ea = ea0 + lift * sx
        ea2 = W1 @ (single * a0 * a0) + 2.0 * lift * ea0 + lift**2 * sx
        paid = W1 @ (outer * a0)
        winner_pays = paid + lift * cut.p_sale
        var_ap = ea2 - ea * ea
    loose = loose | _lost(rev_fp, base, lift_fp) | _lost(ea, ea0, lift * sx) | _lost(winner_pays, paid, lift * cut.p_sale)
    loose = loose | (ea2 + ea * ea > _CANCELLATION * np.abs(var_ap)) | _beyond_nodes(q1, cut, k)
    return (rev_fp, sd_fp, rev_fp), (n * ea, np.sqrt(n * np.maximum(var_ap, 0.0)), winner_pays), loose


def _beyond_nodes(q, cut, k):
    """Reserves whose cut lies above the highest node (each value beats them with chance
    below about 1e-26): cut weights there are all zero, and the nodes say nothing."""
    return cut.binds & (_t_of(cut.s_r, k) < (q.a[0] if q.panels else np.inf))


def _single_scenario(model, n, reserve, v0, out, j):
    """Cell j of every route recomputed with the reserve in place, as /v1/revenue does."""
    auc = ForwardAuction(model, n, reserve, v0)
    if auc.single_price is not None:  # at most one bidder above a far reserve: the price is the reserve
        mean, _, sd, _, _ = auctions._single_price_stats(auc, ())
        for key in ("sp", "fp", "ap"):
            for arr, x in zip(out[key], (mean, sd, mean)):
                arr[j] = x
        out["e1"][j] = math.nan  # beyond the quadratures' reach: the surpluses are null
        return
    out["e1"][j] = auctions._winner_value(auc, ("first_price",))
    sp = auctions.second_price_revenue(auc)[0]
    fp = auctions.first_price_revenue(auc)[0]
    ap = auctions.all_pay_revenue(auc)[0]
    sd_ap, winner_ap = auctions._all_pay_stats(auc)
    for key, cell in (("sp", (sp, auctions._price_sd_second(auc, sp), sp)), ("fp", (fp, auctions._bid_price_sd(auc, fp), fp)),
                      ("ap", (ap, sd_ap, winner_ap))):
        for arr, x in zip(out[key], cell):
            arr[j] = x


def _best_gain(model, q, dens, v, s, k, v0):
    """E[(X1 - v0)^+]: the largest expected gain from trade, for efficiency."""
    s0 = model.neg_log_cdf(np.array([v0]))[0] if v0 > model.lower else np.inf
    return float((q.cut_weights(_t_of(np.array([s0]), k)) @ (dens * (v - v0)))[0])


def _bids_at_reserves(auc, q, floor, s_r, binds):
    """b_0 at each binding reserve: inside the node range by the panel recurrence
    and a spectral partial panel, elsewhere by the standalone route."""
    k = auc.n - 1.0
    out = floor.copy()
    tail = auc._bid_tail()
    se, d = tail.nodes.se, tail.d[0]
    t_r = _t_of(s_r, k)
    inside = binds & (t_r >= q.a[0]) & (t_r < q.b[-1]) & (k * s_r <= k * se[-1] - 36.0)
    if np.any(inside):
        tq = t_r[inside]
        p = np.clip(np.searchsorted(q.a, tq, side="right") - 1, 0, q.panels - 1)
        # The partial panel by its own Gauss-Legendre rule (new model values): the
        # bid's shading r - b_0(r) is a small difference and needs every digit.
        sq = s_r[inside]
        shrink = np.exp(-k * (se[p + 1] - sq))
        out[inside] = auc.origin + auc._sub_integral(tq, q.b[p]) + shrink * d[p + 1]
    # Beyond where the nodes reach, the standalone route; where G(r) = e^-(n-1)s_r is
    # below e^-40 the shading only enters multiplied by G(r), so it is left at 0.
    rest = binds & ~inside & (k * s_r < 40.0)
    if np.any(rest):
        out[rest] = auc.bids_at_s(s_r[rest])
    return np.minimum(out, floor)  # a bid never exceeds the value


def sweep(model, direction, bidders, reserves, rules, metrics, own_value=None):
    """A long table: one row per (bidders, reserve, rule), one column per metric."""
    fmodel, _, v0 = _forward_case(model, direction, None, own_value)
    if direction == "forward" and v0 is None:
        v0 = 0.0
    if model.discrete:
        raise ParameterError("smoothing", "equilibrium bidding needs a continuous value model; use smoothing: kernel")
    names = METRICS[direction]
    for i, m in enumerate(metrics):
        if m not in names:
            raise ParameterError(f"metrics.{i}", f"one of {', '.join(names)} for a {direction} sweep")
    for n in sorted(set(bidders)):
        _check_price_exists(fmodel, n)
    res = np.asarray(reserves, float)
    fres = res if direction == "forward" else -res
    sign = 1.0 if direction == "forward" else -1.0
    rows, warnings = [], []
    for n in bidders:
        budget.check()
        blk = _block(fmodel, n, fres, v0)
        has_var = {"sp": os_.moment_exists(fmodel, n, min(2, n), 2), "fp": os_.moment_exists(fmodel, n, 1, 2),
                   "ap": os_.moment_exists(fmodel, n, 1, 2)}
        e1, p_sale = blk["e1"], blk["p_sale"]
        best = blk.get("best")
        for j, r in enumerate(res.tolist()):
            for rule in rules:
                route = _ROUTE[rule]
                rev, sd, winner_pays = (x[j] for x in blk[route])
                cells = {
                    names[0]: sign * rev,
                    names[1]: sd if has_var[route] else None,
                    names[2]: p_sale[j],
                    "expected_winner_surplus": e1[j] - winner_pays,
                    "expected_bidder_surplus": e1[j] - rev,
                    "efficiency": None if v0 is None or not best or best <= 0 else (e1[j] - v0 * p_sale[j]) / best,
                    # Seller: revenue plus the kept item's value; buyer: the award's value less the payment.
                    "expected_payoff": None if v0 is None else (rev + v0 * (1.0 - p_sale[j]) if sign > 0 else rev - v0 * p_sale[j]),
                }
                rows.append([n, r, rule, *[finite(cells[m]) for m in metrics]])
        _note_nulls(blk, has_var, n, warnings)
    table = {"direction": direction, "columns": ["bidders", "reserve", "rule", *metrics], "rows": rows, "warnings": warnings}
    return audit.sweep(table, model, own_value if own_value is not None or direction == "reverse" else 0.0)


def _note_nulls(blk, has_var, n, warnings):
    """Say why figures of this bidder count are null where the mathematics has them."""
    if any(not has_var[route] for route in ("sp", "fp", "ap")):
        warnings.append(f"{n} bidders: some sds are null (the price's variance does not exist: the value model's tail is too heavy)")
    if any(has_var[route] and not np.all(np.isfinite(blk[route][1])) for route in ("sp", "fp", "ap")):
        warnings.append(f"{n} bidders: some sds are null (beyond double precision, about 1e308)")
    if not np.all(np.isfinite(blk["e1"])):
        warnings.append(f"{n} bidders: at reserves that each value beats with chance below {auctions.FAR_RESERVE:g} the price "
                        "is the reserve under every rule, but the winner's value is beyond reach: the surpluses and efficiency are null")
