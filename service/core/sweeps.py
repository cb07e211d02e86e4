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

from . import audit, budget, gains, mixing, price, reports
from . import rules as R
from . import orderstats as os_
from .auction import FAR_RESERVE, ForwardAuction, forward_case
from .bidders import Bidders
from .price import check_price_exists, price_moment_exists
from .errors import ParameterError
from .topvalues import finite

#: The figures a sweep can tabulate, under the core's names (service/web/wording.py names them per direction).
METRICS = ("expected_revenue", "revenue_sd", "probability_of_sale", "expected_winner_surplus",
           "expected_bidder_surplus", "efficiency", "expected_payoff")


def _t_of(s, k):
    with np.errstate(divide="ignore"):
        return np.log(k * s)


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


def _block(model, n, reserves, v0):
    """Figures for one bidder count over all reserves: per route (revenue, sd, the winner's
    payment), E[X1; sale] ("e1"), and the gains ("gains": the bidders' surplus and the
    efficiency's best and lost gains, see ``_gains``). Cells whose vectorised terms cancel,
    or whose cut lies beyond the nodes, are recomputed one by one (``_single_scenario``)."""
    floor = np.maximum(reserves, model.lower)
    binds = reserves > model.lower
    s_r = np.where(binds, model.neg_log_cdf(floor), np.inf)
    count = Bidders.exactly(n)
    p_sale = count.p_sale(s_r)
    out = {"p_sale": p_sale, "lone": count.lone}
    if count.lone:
        q = os_.filled_rank_quadrature(model, 1, 1, fine=True)
        v, dens, s = _flat(q)
        W = q.cut_weights(_t_of(s_r, 1.0))
        # a lone bidder pays the reserve itself, even one below the support, whenever it buys
        with np.errstate(invalid="ignore"):
            rev = np.where(p_sale > 0, reserves * p_sale, 0.0)
            sd = np.where(p_sale > 0, np.abs(reserves) * np.sqrt(p_sale * (1.0 - p_sale)), 0.0)
        for key in ("second", "first", "all_pay"):
            out[key] = (rev, sd, rev)
        out["e1"] = _weigh(W, dens * v)
        gains = _gains(model, q, dens, W, s_r, 1.0, v0, lone_floor=floor)
        if gains is not None and gains[0] is not None:  # E[X - floor; sale] and what a reserve below the support adds
            gains = (gains[0] + (floor - reserves) * p_sale, *gains[1:])
        out["gains"] = gains
        return out
    out["second"], loose = _second_price_block(model, count, floor, binds, s_r, p_sale)
    auc = ForwardAuction(model, count, None, v0)
    q1 = auc.bids.inner_quadrature()
    W1 = q1.cut_weights(_t_of(s_r, count.rivals))
    bids, loose_bid = _bid_block(auc, W1, floor, binds, s_r, p_sale)
    out.update(bids)
    out["gains"] = _gains(model, q1, auc.bids.nodes().first_rule(auc.bids.nodes().top), W1, s_r, count.rivals, v0)
    far = binds & (s_r < FAR_RESERVE)
    for j in np.nonzero((loose | loose_bid | far | _beyond_nodes(q1, binds, s_r, count.rivals)) & (p_sale > 0.0))[0]:
        budget.check()
        _single_scenario(model, n, float(reserves[j]), v0, out, j)
    return out


def _lost(total, *terms, bound=np.inf):
    """Whether a sum lost its digits to cancellation: its terms far exceed it, or far exceed
    ``bound``, a bound on its true size (a sum whose own digits are lost can come out far
    larger than it is)."""
    with np.errstate(over="ignore", invalid="ignore"):
        return sum(np.abs(t) for t in terms) > _CANCELLATION * np.minimum(np.abs(total), bound)


def _beyond_nodes(q, binds, s_r, k):
    """Reserves whose cut lies above the quadrature's highest node (each value beats them with
    chance below about 1e-26): cut weights there are all zero, and the nodes say nothing."""
    return binds & (_t_of(s_r, k) < (q.a[0] if q.panels else np.inf))


def _single_scenario(model, n, reserve, v0, out, j):
    """Cell j of every pricing recomputed with the reserve in place, as /v1/revenue does (by
    the first rule registered with each pricing); its gains are those of /v1/revenue too
    (kept in ``out["cells"]``)."""
    auc = ForwardAuction(model, n, reserve, v0)
    by_pricing = {}
    for name in R.names():
        by_pricing.setdefault(R.get(name).pricing.name, name)
    figures, _ = reports.forward_figures(auc, list(by_pricing.values()), [])
    for key, name in by_pricing.items():
        f = figures[name]
        paid = f["expected_revenue"]
        if key == R.ALL_PAY.name and auc.single_price is None:
            paid = price.all_pay_winner_payment(auc)
        for arr, x in zip(out[key], (f["expected_revenue"], f["revenue_sd"], paid)):
            arr[j] = math.nan if x is None else x
    out.setdefault("cells", {})[j] = {key: figures[name] for key, name in by_pricing.items()}
    got = gains.winner_value(auc)
    out["e1"][j] = math.nan if got is None else got


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


def _conditional_sd(p_sale, mass, centre, first, second, unit):
    """The revenue's sd (price on a sale, 0 otherwise) from the integrals over the sale of
    the price's offset from ``centre`` (``first``) and of its square (``second``), both in
    units of ``unit`` (a power of two, ``orderstats.sd_scale``, so that no square overflows
    or underflows), ``mass`` the sale's chance on the nodes: Var = p Var_sale + p (1 - p)
    mean^2 (law of total variance), the mean's part through hypot. Offsets from a centre in
    the bulk keep the spread's digits wherever the values sit."""
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        safe = np.where(mass > 0, mass, 1.0)
        shift = np.where(mass > 0, first / safe, 0.0)
        sd_sale = np.sqrt(np.maximum(np.where(mass > 0, second / safe - shift**2, 0.0), 0.0))
        return np.sqrt(p_sale) * np.hypot(unit * sd_sale, np.sqrt(np.maximum(1.0 - p_sale, 0.0)) * (centre + unit * shift))


def _second_price_block(model, count, floor, binds, s_r, p_sale):
    """((revenue, sd, the winner's payment), cells that lost their digits) under second
    price: the price is max(X2, r) on a sale. Second moments are taken about the
    second-highest value's mean, from the values' offsets (``RankQuadrature.offsets``)."""
    n, k = count.n, count.rivals
    q2 = os_.filled_rank_quadrature(model, n, 2, fine=True)
    v2, d2, _ = _flat(q2)
    ref, o = q2.offsets()
    c = _finite_sum(q2.w_hi * o[:, :os_.RULE_SPLIT]) / q2.total()  # the centre, as an offset from ref
    o2 = o[:, :os_.RULE_SPLIT].ravel() - c
    W2 = q2.cut_weights(_t_of(s_r, k))
    # a variance that does not exist (a heavy tail) may overflow here; the caller leaves it out
    with np.errstate(over="ignore", invalid="ignore"):
        pr = np.where(binds, n * np.exp(-k * s_r) * -np.expm1(-s_r), 0.0)
        at_floor = np.where(pr > 0, floor - ref - c, 0.0)
        at_reserve, above = pr * np.where(pr > 0, floor, 0.0), _weigh(W2, d2 * v2)
        rev = at_reserve + above
        unit = os_.sd_scale(o2, at_floor)
        o2, at_floor = o2 / unit, at_floor / unit
        first, second = pr * at_floor + _weigh(W2, d2 * o2), pr * at_floor**2 + _weigh(W2, d2 * o2 * o2)
        sd = _conditional_sd(p_sale, pr + _weigh(W2, d2), ref + c, first, second, unit)
    return (rev, sd, rev), _lost(rev, at_reserve, above) | _beyond_nodes(q2, binds, s_r, k)


def _bid_block(auc, W1, floor, binds, s_r, p_sale):
    """({"first": ..., "all_pay": ..., "e1": ...}, cells that lost their digits): first price and
    all-pay, each (revenue, sd, the winner's payment), on the nodes of the highest rival value. With g = G(r)/G(v) = e^(-(n-1)(s_r - s)), b_r = b_0 + g delta,
    delta = r - b_0(r); the terms in g are integrated in closed form or with g's growth folded
    into a smooth integrand, never by interpolating g itself across a cut panel."""
    n, k = auc.n, auc.bidders.rivals
    nb = auc.bids.nodes()
    q1 = auc.bids.inner_quadrature()
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
    base_fp, lift_fp = _weigh(W1, outer * b0), delta * n * g_r * sx
    rev_fp = base_fp + lift_fp
    # second moments from the bids' offsets, about their mean without a reserve
    ref, b_off = auc.bids.offsets()
    b_off = nb.first_rule(b_off)
    # a variance that does not exist (a heavy tail) may overflow here; the caller leaves it out
    with np.errstate(over="ignore", invalid="ignore"):
        c = _finite_sum(nb.first_rule(nb.dt) * outer * b_off)
        unit = os_.sd_scale(b_off - c, delta)
        b_off, du = (b_off - c) / unit, delta / unit
        first = _weigh(W1, outer * b_off) + du * n * g_r * sx
        second = _weigh(W1, outer * b_off**2) + 2.0 * du * g_r * (_weigh(W1, n * single * b_off)) + du**2 * i3
        out = {"first": (rev_fp, _conditional_sd(p_sale, _weigh(W1, outer), ref + c, first, second, unit), rev_fp)}
        a0 = nb.first_rule(nb.rivals) * b0  # a_r(v) = F(v)^(n-1) b_0(v) + G(r) delta
        lift = g_r * delta
        ea0, paid = _weigh(W1, single * a0), _weigh(W1, outer * a0)
        ea = ea0 + lift * sx
        winner_pays = paid + lift * p_sale
        # the sd of one payment from its moments in units of a power of two, so no square under- or overflows
        unit = os_.sd_scale(a0, lift)
        a0u, liftu = a0 / unit, lift / unit
        ea0u = _weigh(W1, single * a0u)
        eau, ea2u = ea0u + liftu * sx, _weigh(W1, single * a0u * a0u) + 2.0 * liftu * ea0u + liftu**2 * sx
        out["all_pay"] = (n * ea, unit * np.sqrt(n * np.maximum(ea2u - eau * eau, 0.0)), winner_pays)
    values = nb.first_rule(nb.values)
    out["e1"] = _weigh(W1, outer * values)
    # floor <= a bid <= the value, so |revenue| <= P(sale) |floor| + E[|X1|; sale], and each
    # of the n all-pay payments alike
    with np.errstate(invalid="ignore"):
        bound = p_sale * np.abs(floor) + _weigh(W1, outer * np.abs(values))
    loose = _lost(rev_fp, base_fp, lift_fp, bound=bound) | _lost(ea, ea0, lift * sx, bound=bound)
    return out, loose | _lost(winner_pays, paid, lift * p_sale, bound=bound)


def _gains(model, q, dens, W_r, s_r, k, v0, lone_floor=None):
    """Per reserve, on the highest value's nodes (weights per dt ``dens``, 24-node rule; ``W_r``
    the cut weights at the reserves, s_r = -log F there, ``k`` the quadrature's n - r + 1):
    the bidders' surplus E[(X1 - max(X2, r)) 1{X1 >= r}] = E[(1 - U) Q'(U); U >= F(r)]
    (see ``orderstats.expected_gap``; None without a precise S / f), and the efficiency's best
    gain E[(X1 - v0)^+] and lost gain, the band between r and v0 integrated as one quantity:
    the difference of two cut-weight rows is the band's own weights. None where E[X1] does
    not exist. A lone bidder's (``lone_floor``: the floor at each reserve) is E[X - floor; sale]
    from the value offsets, as in ``gains._second_price_surplus``."""
    if not model.upper_tail_index > 1.0:
        return None
    first = lambda a: a[:, :os_.RULE_SPLIT].ravel()  # noqa: E731
    if lone_floor is not None:
        ref, o = q.offsets()
        with np.errstate(invalid="ignore", over="ignore"):
            surplus = _weigh(W_r, dens * first(o)) - (lone_floor - ref) * _weigh(W_r, dens)
    else:
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
    k = auc.bidders.rivals
    out = floor.copy()
    tail = auc.bids.tail()
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
        out[inside] = auc.bids.origin + auc.bids.sub_integral(tq, q.b[p]) + shrink * d[p + 1]
    # Beyond where the nodes reach, the standalone route; where G(r) = e^-(n-1)s_r is
    # below e^-40 the shading only enters multiplied by G(r), so it is left at 0.
    rest = binds & ~inside & (k * s_r < 40.0)
    if np.any(rest):
        out[rest] = auc.bids.at_s(s_r[rest])
    return np.minimum(out, floor)  # a bid never exceeds the value


def _cells(blk, j, rule, has_var, v0, sign):
    """One row's figures from its bidder count's block: reserve j, ``rule``. The surpluses
    and the efficiency come from the gains integrated directly (``_gains``); a figure that
    does not exist is None."""
    route = R.get(rule).pricing.name
    rev, sd, winner_pays = (x[j] for x in blk[route])
    p_sale, gains = blk["p_sale"][j], blk["gains"]
    has_var = has_var or p_sale == 0.0
    bidders = winner = efficiency = None
    recomputed = blk.get("cells", {}).get(j)
    if recomputed is not None:  # the single-scenario route's own gains (see ``_single_scenario``)
        f = recomputed[route]
        winner, bidders, efficiency = f["expected_winner_surplus"], f["expected_bidder_surplus"], f["efficiency"]
    elif gains is not None:
        surplus, best, lost = gains
        # without a precise S / f, E[X1; sale] less the revenue
        bidders = surplus[j] if surplus is not None else blk["e1"][j] - rev
        winner = bidders if R.get(rule).pricing is not R.ALL_PAY or blk["lone"] else blk["e1"][j] - winner_pays
        efficiency = None if best is None or not best > 0 else 1.0 - lost[j] / best
    return {
        "expected_revenue": sign * rev,
        "revenue_sd": sd if has_var else None,
        "probability_of_sale": p_sale,
        "expected_winner_surplus": winner,
        "expected_bidder_surplus": bidders,
        "efficiency": efficiency,
        # Seller: revenue plus the kept item's value; buyer: the award's value less the payment.
        "expected_payoff": None if v0 is None else (rev + v0 * (1.0 - p_sale) if sign > 0 else rev - v0 * p_sale),
    }


def sweep(model, direction, bidders, reserves, rules, metrics, own_value=None):
    """A long table: one row per (bidders, reserve, rule), one column per metric (``METRICS``),
    figures in the caller's sign."""
    fmodel, _, v0 = forward_case(model, direction, None, own_value)
    if direction == "forward" and v0 is None:
        v0 = 0.0
    if model.discrete:
        raise ParameterError("smoothing", "equilibrium bidding needs a continuous value model; use smoothing: kernel")
    for i, m in enumerate(metrics):
        if m not in METRICS:
            raise ParameterError(f"metrics.{i}", f"one of {', '.join(METRICS)}")
    for n in sorted({n for n in bidders if isinstance(n, int)}):  # every row comes from the bids without a reserve, which must exist
        check_price_exists(fmodel, n)
    res = np.asarray(reserves, float)
    fres = res if direction == "forward" else -res
    sign = 1.0 if direction == "forward" else -1.0
    rows, warnings, groups, lone = [], [], [], []
    for i, n in enumerate(bidders):
        budget.check()
        if not isinstance(n, int):  # a distribution over the count: each reserve by the single-scenario route
            for row in _count_rows(fmodel, n, res, fres, rules, metrics, v0, sign, warnings):
                rows.append(row)
                groups.append(-1.0 - i)
                lone.append(row[-1])
                row.pop()
            continue
        groups += [float(n)] * (len(res) * len(rules))
        lone += [n == 1] * (len(res) * len(rules))
        blk = _block(fmodel, n, fres, v0)
        # a finite floor (the reserve, or the bottom of the support) is all the sd's existence asks of a row
        has_var = {(rule, f): price_moment_exists(fmodel, n, rule, 2, 0.0 if f else -math.inf) for rule in rules for f in (0, 1)}
        for j, r in enumerate(res.tolist()):
            floor_finite = int(math.isfinite(max(fres[j], fmodel.lower)))
            for rule in rules:
                cells = _cells(blk, j, rule, has_var[rule, floor_finite], v0, sign)
                rows.append([n, r, rule, *[finite(cells[m]) for m in metrics]])
        _note_nulls(blk, has_var, rules, n, warnings)
    table = {"direction": direction, "columns": ["bidders", "reserve", "rule", *metrics], "rows": rows, "warnings": warnings}
    return audit.sweep(table, model, own_value if own_value is not None or direction == "reverse" else 0.0,
                       groups=np.array(groups), lone=np.array(lone, bool))


def _count_rows(fmodel, count, res, fres, rules, metrics, v0, sign, warnings):
    """The rows of one uncertain count (``Bidders``, or costly entry, solved at each reserve):
    every reserve computed as /v1/revenue computes it, each row ending with whether a lone
    bidder can take part (for the audit; the caller takes it off)."""
    out = []
    for r, fr in zip(res.tolist(), fres.tolist()):
        budget.check()
        reserve = None if not math.isfinite(fr) else fr
        c = mixing.resolve(count, fmodel, reserve)
        check_price_exists(fmodel, c, max(fr, fmodel.lower))
        auc = ForwardAuction(fmodel, c, reserve, v0) if c.certain else mixing.MixedAuction(fmodel, c, reserve, v0)
        figures, notes = (reports.forward_figures if c.certain else mixing.mixed_figures)(auc, list(rules), [])
        warnings += [f"{c.to_params()}: {w}" for w in notes if isinstance(w, str) and f"{c.to_params()}: {w}" not in warnings]
        for rule in rules:
            f = figures[rule]
            rev, p = f["expected_revenue"], f["probability_of_sale"]
            cells = {**f, "expected_revenue": None if rev is None else sign * rev,
                     "expected_payoff": None if v0 is None or rev is None else (rev + v0 * (1.0 - p) if sign > 0 else rev - v0 * p)}
            out.append([c.to_params(), r, rule, *[finite(cells[m]) for m in metrics], c.may_be_lone])
    return out


def _note_nulls(blk, has_var, rules, n, warnings):
    """Say why figures of this bidder count are null where the mathematics has them."""
    if not all(has_var.values()):
        warnings.append(f"{n} bidders: some sds are null (the price's variance does not exist: the value model's tail is too heavy)")
    if any(not np.all(np.isfinite(blk[R.get(rule).pricing.name][1])) for rule in rules if has_var[rule, 1]):
        warnings.append(f"{n} bidders: some sds are null (beyond double precision, about 1e308)")
    far = (blk["p_sale"] > 0.0) & (blk["p_sale"] < n * FAR_RESERVE)
    if np.any(far & ~np.isfinite(blk["e1"])):
        warnings.append(f"{n} bidders: at reserves that each value beats with chance below {FAR_RESERVE:g} the price "
                        "is the reserve under every rule, but the winner's value is beyond reach: the surpluses and efficiency are null")
