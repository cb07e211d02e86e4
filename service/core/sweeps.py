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
from .auctions import ForwardAuction, _check_price_exists, _forward_case, price_moment_exists
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
    """Figures for one bidder count over all reserves: per route (revenue, variance, the
    winner's payment), E[X1; sale] ("e1"), and the gains ("gains": the bidders' surplus and
    the efficiency's best and lost gains, see ``_gains``)."""
    floor = np.maximum(reserves, model.lower)
    binds = reserves > model.lower
    s_r = np.where(binds, model.neg_log_cdf(floor), np.inf)
    with np.errstate(over="ignore", invalid="ignore"):
        p_sale = np.where(np.isfinite(s_r), -np.expm1(-n * s_r), 1.0)
    out = {"p_sale": p_sale}
    if n == 1:
        q = _filled(model, 1, 1)
        v, dens, s = _flat(q)
        W = q.cut_weights(_t_of(s_r, 1.0))
        with np.errstate(invalid="ignore"):
            rev = np.where(p_sale > 0, floor * p_sale, 0.0)
            var = np.where(p_sale > 0, p_sale * (1.0 - p_sale) * floor**2, 0.0)
        for key in ("sp", "fp", "ap"):
            out[key] = (rev, var, rev)
        out["e1"] = _weigh(W, dens * v)
        out["gains"] = _gains(model, q, dens, W, s_r, 1.0, v0)
        return out
    out["sp"] = _second_price_block(model, n, floor, binds, s_r, p_sale)
    auc = ForwardAuction(model, n, None, v0)
    q1 = auc._inner_quadrature()
    W1 = q1.cut_weights(_t_of(s_r, n - 1.0))
    out.update(_bid_block(auc, W1, floor, binds, s_r, p_sale))
    out["gains"] = _gains(model, q1, auc.node_bids().first_rule(auc.node_bids().top), W1, s_r, n - 1.0, v0)
    return out


def _weigh(W, h):
    """W @ h over node values h that may lie beyond the double range (inf or nan where a heavy
    tail's values overflow): such a node counts as 0 in a row that gives it no weight, and
    makes nan of a row that does (that row's integral needs it)."""
    bad = ~np.isfinite(h)
    if not bad.any():
        return W @ h
    with np.errstate(invalid="ignore"):
        return np.where((W[..., bad] != 0).any(axis=-1), np.nan, W @ np.where(bad, 0.0, h))


def _finite_sum(a):
    """The sum of a's finite entries: a centre for second moments, which need not be exact."""
    with np.errstate(invalid="ignore"):
        return float(np.sum(np.where(np.isfinite(a), a, 0.0)))


def _conditional_variance(p_sale, mass, centre, first, second):
    """The revenue's variance (price on a sale, 0 otherwise) from the integrals over the
    sale of the price's offset from ``centre`` (``first``) and of its square (``second``),
    ``mass`` the sale's chance on the nodes: p Var + p (1 - p) mean^2 on a sale (law of
    total variance). Offsets from a centre in the bulk keep the spread's digits wherever
    the values sit."""
    with np.errstate(invalid="ignore", divide="ignore"):
        safe = np.where(mass > 0, mass, 1.0)
        shift = np.where(mass > 0, first / safe, 0.0)
        var_c = np.where(mass > 0, second / safe - shift**2, 0.0)
    return p_sale * var_c + p_sale * (1.0 - p_sale) * (centre + shift) ** 2


def _second_price_block(model, n, floor, binds, s_r, p_sale):
    """(revenue, variance, the winner's payment) under second price: the price is max(X2, r)
    on a sale. Second moments are taken about the second-highest value's mean, from the
    values' offsets (``RankQuadrature.offsets``)."""
    k = n - 1.0
    q2 = _filled(model, n, 2)
    v2, d2, _ = _flat(q2)
    ref, o = q2.offsets()
    c = _finite_sum(q2.w_hi * o[:, :os_.RULE_SPLIT]) / q2.total()  # the centre, as an offset from ref
    o2 = o[:, :os_.RULE_SPLIT].ravel() - c
    W2 = q2.cut_weights(_t_of(s_r, k))
    # a variance that does not exist (a heavy tail) may overflow here; the caller leaves it out
    with np.errstate(over="ignore", invalid="ignore"):
        pr = np.where(binds, n * np.exp(-k * s_r) * -np.expm1(-s_r), 0.0)
        at_floor = np.where(pr > 0, floor - ref - c, 0.0)
        rev = pr * np.where(pr > 0, floor, 0.0) + _weigh(W2, d2 * v2)
        first, second = pr * at_floor + _weigh(W2, d2 * o2), pr * at_floor**2 + _weigh(W2, d2 * o2 * o2)
        return rev, _conditional_variance(p_sale, pr + _weigh(W2, d2), ref + c, first, second), rev


def _bid_block(auc, W1, floor, binds, s_r, p_sale):
    """First price and all-pay, each (revenue, variance, the winner's payment), on the nodes
    of the highest rival value. With g = G(r)/G(v) = e^(-(n-1)(s_r - s)), b_r = b_0 + g delta,
    delta = r - b_0(r); the terms in g are integrated in closed form or with g's growth folded
    into a smooth integrand, never by interpolating g itself across a cut panel."""
    n, k = auc.n, auc.n - 1.0
    nb = auc.node_bids()
    q1 = auc._inner_quadrature()
    b0 = nb.first_rule(nb.bids)
    delta = np.where(binds, floor - _bids_at_reserves(auc, q1, floor, s_r, binds), 0.0)
    with np.errstate(over="ignore", invalid="ignore"):
        g_r = np.where(np.isfinite(s_r), np.exp(-k * s_r), 0.0)  # G(r)
        sx = np.where(np.isfinite(s_r), -np.expm1(-s_r), 1.0)  # P(X >= r)
        if n > 2:
            i3 = np.where(np.isfinite(s_r), n * np.exp(-n * s_r) * -np.expm1(-(n - 2.0) * s_r) / (n - 2.0), 0.0)
        else:
            i3 = np.where(np.isfinite(s_r), 2.0 * s_r * np.exp(-2.0 * s_r), 0.0)
    outer, single = nb.first_rule(nb.top), nb.first_rule(nb.one)  # densities per dt: the highest value's, one bidder's
    rev_fp = _weigh(W1, outer * b0) + delta * n * g_r * sx
    # second moments from the bids' offsets, about their mean without a reserve
    ref, b_off = auc.node_bid_offsets()
    b_off = nb.first_rule(b_off)
    # a variance that does not exist (a heavy tail) may overflow here; the caller leaves it out
    with np.errstate(over="ignore", invalid="ignore"):
        c = _finite_sum(nb.first_rule(nb.dt) * outer * b_off)
        b_off = b_off - c
        first = _weigh(W1, outer * b_off) + delta * n * g_r * sx
        second = _weigh(W1, outer * b_off**2) + 2.0 * delta * g_r * (_weigh(W1, n * single * b_off)) + delta**2 * i3
        out = {"fp": (rev_fp, _conditional_variance(p_sale, _weigh(W1, outer), ref + c, first, second), rev_fp)}
        a0 = nb.first_rule(nb.rivals) * b0  # a_r(v) = F(v)^(n-1) b_0(v) + G(r) delta
        lift = g_r * delta
        ea = _weigh(W1, single * a0) + lift * sx
        ea2 = _weigh(W1, single * a0 * a0) + 2.0 * lift * (_weigh(W1, single * a0)) + lift**2 * sx
    winner_pays = _weigh(W1, outer * a0) + lift * p_sale
    out["ap"] = (n * ea, n * np.maximum(ea2 - ea * ea, 0.0), winner_pays)
    out["e1"] = _weigh(W1, outer * nb.first_rule(nb.values))
    return out


def _gains(model, q, dens, W_r, s_r, k, v0):
    """Per reserve, on the highest value's nodes (weights per dt ``dens``, 24-node rule; ``W_r``
    the cut weights at the reserves, s_r = -log F there, ``k`` the quadrature's n - r + 1):
    the bidders' surplus E[(X1 - max(X2, r)) 1{X1 >= r}] = E[(1 - U) Q'(U); U >= F(r)]
    (see ``orderstats.expected_gap``; None without a precise S / f), and the efficiency's best
    gain E[(X1 - v0)^+] and lost gain, the band between r and v0 integrated as one quantity:
    the difference of two cut-weight rows is the band's own weights. None where E[X1] does
    not exist."""
    if not model.upper_tail_index > 1.0:
        return None
    first = lambda a: a[:, :os_.RULE_SPLIT].ravel()  # noqa: E731
    ih = model.inverse_hazard(q.u, q.v, q.anchor, q.delta)
    with np.errstate(invalid="ignore", over="ignore"):
        surplus = None if ih is None else _weigh(W_r, dens * first(ih))
    if v0 is None:
        return surplus, None, None
    s0 = model.neg_log_cdf(np.array([v0]))[0] if v0 > model.lower else np.inf
    ref, o = q.offsets()
    gain = dens * (first(o) - (v0 - ref))
    W_0 = q.cut_weights(_t_of(np.array([s0]), k))
    best = float(_weigh(W_0, gain)[0])
    lost = np.where(s_r <= s0, _weigh(W_0 - W_r, gain), _weigh(W_r - W_0, -gain))
    return surplus, best, lost


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


def _cells(blk, j, n, rule, has_var, v0, sign, names):
    """One row's figures from its bidder count's block: reserve j, ``rule``. The surpluses
    and the efficiency come from the gains integrated directly (``_gains``); a figure that
    does not exist is None."""
    rev, var, winner_pays = (x[j] for x in blk[_ROUTE[rule]])
    p_sale, gains = blk["p_sale"][j], blk["gains"]
    has_var = has_var or p_sale == 0.0
    bidders = winner = efficiency = None
    if gains is not None:
        surplus, best, lost = gains
        # without a precise S / f, E[X1; sale] less the revenue
        bidders = surplus[j] if surplus is not None else blk["e1"][j] - rev
        winner = bidders if rule != "all_pay" or n == 1 else blk["e1"][j] - winner_pays
        efficiency = None if best is None or not best > 0 else 1.0 - lost[j] / best
    return {
        names[0]: sign * rev,
        names[1]: math.sqrt(max(var, 0.0)) if has_var else None,
        names[2]: p_sale,
        "expected_winner_surplus": winner,
        "expected_bidder_surplus": bidders,
        "efficiency": efficiency,
        # Seller: revenue plus the kept item's value; buyer: the award's value less the payment.
        "expected_payoff": None if v0 is None else (rev + v0 * (1.0 - p_sale) if sign > 0 else rev - v0 * p_sale),
    }


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
    for n in sorted(set(bidders)):  # every row comes from the bids without a reserve, which must exist
        _check_price_exists(fmodel, n)
    res = np.asarray(reserves, float)
    fres = res if direction == "forward" else -res
    sign = 1.0 if direction == "forward" else -1.0
    rows = []
    for n in bidders:
        budget.check()
        blk = _block(fmodel, n, fres, v0)
        # a finite floor (the reserve, or the bottom of the support) is all the sd's existence asks of a row
        has_var = {(rule, f): price_moment_exists(fmodel, n, rule, 2, 0.0 if f else -math.inf) for rule in rules for f in (0, 1)}
        for j, r in enumerate(res.tolist()):
            floor_finite = int(math.isfinite(max(fres[j], fmodel.lower)))
            for rule in rules:
                cells = _cells(blk, j, n, rule, has_var[rule, floor_finite], v0, sign, names)
                rows.append([n, r, rule, *[finite(cells[m]) for m in metrics]])
    return {"direction": direction, "columns": ["bidders", "reserve", "rule", *metrics], "rows": rows}
