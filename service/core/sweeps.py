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

from . import budget
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


def _block(model, n, reserves, v0):
    """Figures for one bidder count over all reserves, per route: a dict of arrays."""
    floor = np.maximum(reserves, model.lower)
    binds = reserves > model.lower
    s_r = np.where(binds, model.neg_log_cdf(floor), np.inf)
    with np.errstate(over="ignore", invalid="ignore"):
        p_sale = np.where(np.isfinite(s_r), -np.expm1(-n * s_r), 1.0)
    p0 = 1.0 - p_sale
    out = {"p_sale": p_sale}
    if n == 1:
        q = _filled(model, 1, 1)
        v, dens, s = _flat(q)
        W = q.cut_weights(_t_of(s_r, 1.0))
        e1 = W @ (dens * v)
        with np.errstate(invalid="ignore"):
            rev = np.where(p_sale > 0, floor * p_sale, 0.0)
            var = np.where(p_sale > 0, p_sale * p0 * floor**2, 0.0)
        for key in ("sp", "fp", "ap"):
            out[key] = (rev, var, rev)
        out["e1"] = e1
        if v0 is not None:
            out["best"] = _best_gain(model, q, dens, v, s, 1.0, v0)
        return out

    k = n - 1.0
    # Second price: the price is max(X2, r) on a sale.
    q2 = _filled(model, n, 2)
    v2, d2, _ = _flat(q2)
    W2 = q2.cut_weights(_t_of(s_r, k))
    with np.errstate(over="ignore", invalid="ignore"):
        pr = np.where(binds, n * np.exp(-k * s_r) * -np.expm1(-s_r), 0.0)
        at_floor = np.where(pr > 0, pr * floor, 0.0)
    c = float(np.sum(q2.w_hi * q2.values_hi) / q2.total())  # centre for the second moments
    rev_sp = at_floor + W2 @ (d2 * v2)
    m2 = p0 * c * c + np.where(pr > 0, pr * (floor - c) ** 2, 0.0) + W2 @ (d2 * (v2 - c) ** 2)
    out["sp"] = (rev_sp, m2 - (rev_sp - c) ** 2, rev_sp)

    # First price and all-pay on the nodes of the highest rival value.
    auc = ForwardAuction(model, n, None, v0)
    nb = auc.node_bids()
    q1 = auc._inner_quadrature()
    v1, s1, b0 = nb.first_rule(nb.values), nb.first_rule(nb.s), nb.first_rule(nb.bids)
    W1 = q1.cut_weights(_t_of(s_r, k))
    b0_r = _bids_at_reserves(auc, q1, floor, s_r, binds)
    delta = np.where(binds, floor - b0_r, 0.0)
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
    rev_fp = W1 @ (outer * b0) + delta * n * g_r * sx
    m2_fp = W1 @ (outer * (b0 - c) ** 2) + 2.0 * delta * g_r * (W1 @ (n * single * (b0 - c))) + delta**2 * i3 + p0 * c * c
    out["fp"] = (rev_fp, m2_fp - (rev_fp - c) ** 2, rev_fp)
    a0 = nb.first_rule(nb.rivals) * b0  # a_r(v) = F(v)^(n-1) b_0(v) + G(r) delta
    lift = g_r * delta
    ea = W1 @ (single * a0) + lift * sx
    ea2 = W1 @ (single * a0 * a0) + 2.0 * lift * (W1 @ (single * a0)) + lift**2 * sx
    winner_pays = W1 @ (outer * a0) + lift * p_sale
    out["ap"] = (n * ea, n * np.maximum(ea2 - ea * ea, 0.0), winner_pays)
    out["e1"] = W1 @ (outer * v1)
    if v0 is not None:
        out["best"] = _best_gain(model, q1, outer, v1, s1, k, v0)
    return out


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
        out[inside] = auc._sub_integral(tq, q.b[p]) + shrink * d[p + 1]
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
    rows = []
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
                rev, var, winner_pays = (x[j] for x in blk[route])
                cells = {
                    names[0]: sign * rev,
                    names[1]: math.sqrt(max(var, 0.0)) if has_var[route] else None,
                    names[2]: p_sale[j],
                    "expected_winner_surplus": e1[j] - winner_pays,
                    "expected_bidder_surplus": e1[j] - rev,
                    "efficiency": None if v0 is None or not best or best <= 0 else (e1[j] - v0 * p_sale[j]) / best,
                    # Seller: revenue plus the kept item's value; buyer: the award's value less the payment.
                    "expected_payoff": None if v0 is None else (rev + v0 * (1.0 - p_sale[j]) if sign > 0 else rev - v0 * p_sale[j]),
                }
                rows.append([n, r, rule, *[finite(cells[m]) for m in metrics]])
    return {"direction": direction, "columns": ["bidders", "reserve", "rule", *metrics], "rows": rows}
