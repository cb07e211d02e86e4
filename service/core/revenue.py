"""Each auction rule's expected revenue by its own route, and the five built-in rules'
registrations.

Each rule's expected revenue comes by its own route, so that their agreement (revenue
equivalence: Myerson 1981; Riley and Samuelson 1981) is a real check:

* second_price: quantile-space integral over the second-highest value.
* ascending: value-space integral of the clock price's survival function.
* first_price: the equilibrium bid b(v) = E[max(Y, r) | Y < v] (Y the highest of the
  other n-1 values; Krishna, Auction Theory, 2nd ed., 2009, ch. 2), integrated over the
  highest value.
* descending: the same bids (strategically first-price), with the clock price integrated
  by parts through the equilibrium equation b' = (n-1)(f/F)(v-b).
* all_pay: each bidder's bid a(v) = F(v)^(n-1) b(v), summed over n bidders.

Every route takes a :class:`auction.ForwardAuction` and answers (mean, abs error).
"""
from __future__ import annotations

import math

import numpy as np

from . import orderstats as os_
from . import rules as R
from .valuespace import refined_value_integral, value_spans, widened


_P_EDGES = np.array([1e-15, 1e-12, 1e-9, 1e-6, 1e-4, 1e-3, 0.01, 0.03, 0.1, 0.2, 0.35, 0.5,
                     0.65, 0.8, 0.9, 0.97, 0.99, 0.999, 1 - 1e-4, 1 - 1e-6, 1 - 1e-9, 1 - 1e-12, 1 - 1e-15])


def second_price_revenue(auc):
    """E[max(X2, r) 1{X1 >= r}]: in closed form where the family has it and no
    reserve binds, else in quantile space over the second-highest."""
    closed = auc.closed_moments(2)
    if closed is not None:
        return closed[0], os_.closed_form_error(auc.model, auc.n, closed[0])
    _, pr = auc.sale_atoms()
    q = auc.quadrature(2)
    above, err = q.integrate(lambda x: x) if q.panels else (0.0, 0.0)
    return (pr * auc.floor if pr else 0.0) + above, err


def ascending_revenue(auc):
    """The open clock stops at the second-highest value (or the reserve):
    E[price] = r P(sale) + integral from r of P(X2 > p) dp, in value space. Where the
    clock price's upper tail beyond the quantile edges still counts (a gamma of tiny shape,
    whose price is 0 but for a sliver of chance, or a lognormal with a large sigma), the
    edges reach on to values that a single draw exceeds with chance down to 1e-300."""
    edges, split = _ascending_edges(auc)
    total, err, above, below = _clock_integral(auc, edges, split, _from_top(auc))
    if max(above, below) > 1e-12 * abs(total):  # a crude bound, loose by the tail's scale
        far = np.concatenate((auc.model.isf(_FAR_SURVIVAL) if above else [], auc.model.ppf(_FAR_SURVIVAL) if below else []))
        far = far[np.isfinite(far) & ((far > edges[-1]) | (far < edges[0]))]
        total, err, _, _ = _clock_integral(auc, widened(np.unique(np.concatenate((edges, far)))), split)
    return total, err


def _from_top(auc):
    """Whether the clock price lies nearer the top of a bounded support than the floor: then
    E[price] = top P(sale) - integral of P(price <= x, sale) up to the top keeps the digits of a
    price just below a top of 0 (the forward twin of costs massed near 0), which the integral
    up from a floor of -1 would take as a difference of two numbers near 1."""
    top, floor = auc.model.upper, auc.floor
    if not (math.isfinite(top) and math.isfinite(floor)):
        return False
    mid = float(auc.second_quantiles([0.5])[0])
    return abs(top - mid) < abs(mid - floor)


_FAR_SURVIVAL = 10.0 ** -np.array([20.0, 25, 30, 40, 50, 65, 80, 100, 130, 160, 200, 250, 300])


def _clock_integral(auc, edges, split, from_top=False):
    """(the clock price's mean over the edges, its two-rule error, and bounds on what the
    light tails beyond the edges would add: P(X2 > top) |top| above the last edge and,
    where the support is unbounded below, P(X2 <= bottom) |bottom| below the first)."""
    m = auc.model
    sf2, cdf2 = auc.second_sf, auc.second_cdf

    a, b, same_side, log_ratio = value_spans(edges)
    # Panels spanning a wide ratio on one side of zero run in log|x|, where a
    # power-law tail becomes an exponential the rule integrates exactly.
    logp = same_side & (log_ratio > math.log(2.0))
    sgn = np.sign(a + b)
    la = np.where(logp, np.log(np.abs(np.where(logp, a, 1.0))), a)
    lb = np.where(logp, np.log(np.abs(np.where(logp, b, 1.0))), b)

    p0 = 1.0 - auc.p_sale

    def integrand(x):
        if from_top:  # P(price <= x, sale) = P(X2 <= x) - P(X1 < r) above the floor
            return p0 - cdf2(x)
        if split is None:
            return sf2(x)
        up = x >= split
        out = np.empty(x.shape)
        out[up], out[~up] = sf2(x[up]), -cdf2(x[~up])
        return out

    base = auc.model.upper * auc.p_sale if from_top else auc.floor * auc.p_sale if split is None else split
    if auc.lone_buys:  # a lone bidder who pays a reserve below the support
        base -= auc.lone_buys * (auc.floor - auc.lone_price)
    totals = [base + s for s in refined_value_integral(la, lb, logp, sgn, integrand, abs(base))]
    tail = _power_tails(m, auc.second_lower_index, edges, sf2, cdf2, split is not None)
    above = below = 0.0  # light tails beyond the end edges: bounds on what they would add
    if not (math.isfinite(m.upper) or math.isfinite(m.upper_tail_index)):
        above = float(sf2(np.array(edges[-1]))) * abs(edges[-1])
    if split is not None and not math.isfinite(m.lower_tail_index):
        below = float(cdf2(np.array(edges[0]))) * abs(edges[0])
    err = abs(totals[0] - totals[1]) + os_.ROUNDING * (abs(base) + abs(totals[0] - base) + abs(tail))
    return totals[0] + tail, err, above, below


def _power_tails(m, lower_index, edges, sf2, cdf2, lower):
    """The clock price's power-law tails beyond the last edges (and, with ``lower``, below
    the first), integrated in closed form: int_T^inf P(X2 > x) dx = T P(X2 > T) / (2a - 1)
    for P(X2 > x) ~ x^-2a, and alike below with the second-highest's index (n - 1) a_low."""
    tail = 0.0
    if math.isfinite(m.upper_tail_index) and not math.isfinite(m.upper):
        top = edges[-1]
        tail += top * float(sf2(np.array(top))) / (2.0 * m.upper_tail_index - 1.0)
    if lower and math.isfinite(m.lower_tail_index):
        bot = edges[0]
        tail -= abs(bot) * float(cdf2(np.array(bot))) / (lower_index - 1.0)
    return tail


def _tail_edges(end, index):
    """Edges beyond ``end``, the last edge before a power-law tail in which the clock price's
    tail probability falls as |x|^-index: every factor e^3 in |x|, out to where that
    probability has fallen by another 1e-30 (within the double range). The closed-form tail
    beyond them assumes an exact power law; what it leaves out is of the order of one value's
    own tail probability there, so it has to start far out where the slow tails (an index
    near 1) still carry much of the price."""
    if not math.isfinite(index) or end == 0.0:
        return np.empty(0)
    x = end * np.exp(3.0 * np.arange(1, min(math.ceil(69.0 / (3.0 * index)), 400) + 1))
    return x[np.abs(x) < 1e300]


def _ascending_edges(auc):
    """Value-space panel edges for the clock price from the floor up (the second-highest
    value's quantiles, the kinks, the ends, and every factor e^3 into a power-law tail,
    ``_tail_edges``), and the split point below which the cdf is integrated instead of the
    survival function (None when the floor is finite). A panel spanning many decades on one
    side of zero (a floor of 1e-300, say) is cut into pieces of at most e^3, which the log-|x|
    rule integrates exactly (``_widened``)."""
    m, lo_end = auc.model, auc.floor
    xs = auc.second_quantiles(_P_EDGES)
    edges = np.concatenate((xs, list(m.kink_values()), [lo_end] if math.isfinite(lo_end) else []))
    if math.isfinite(m.upper):
        edges = np.append(edges, m.upper)
    if math.isfinite(lo_end):
        edges = edges[edges >= lo_end]
    edges = np.unique(edges[np.isfinite(edges)])
    split = None if math.isfinite(lo_end) else float(auc.second_quantiles([0.5])[0])
    if split is not None:
        edges = np.unique(np.concatenate((edges, [split], _tail_edges(edges[0], auc.second_lower_index))))
    if not math.isfinite(m.upper):
        edges = np.append(edges, _tail_edges(edges[-1], 2.0 * m.upper_tail_index))
    return widened(edges), split


def first_price_revenue(auc):
    """E[b(X1) 1{X1 >= r}]: the winner pays its own equilibrium bid."""
    return auc.bids.expect(lambda nb: nb.top * nb.bids)


def descending_revenue(auc):
    """The descending clock price b(X1), integrated by parts:
    E = b(c) - r F(r)^n + int_c^inf b' (1 - F^n) dv - int_r^c b' F^n dv,
    with b' dv = -k (v - b) ds from the equilibrium equation (k = n - 1, or (n - 1)/alpha
    under constant relative risk aversion)."""
    n, k = auc.n, auc.bid_rivals
    tail, nb = auc.bids.tail(), auc.bids.nodes()
    c, weight = auc.bids.inner_quadrature().kept(("descending", n, k), lambda: _descending_weight(tail.nodes, n, k, n - 1.0))
    # b(c) - r F(r)^n with b(c) = origin + d[c], written (origin - r) + r P(sale) + d[c] so that no term
    # of the reserve's size is taken from another.
    at_floor = (auc.bids.origin - auc.floor) + auc.floor * auc.p_sale if math.isfinite(auc.floor) else auc.bids.origin
    at_c = auc.bids.bid_at_edge(c)
    hi, lo = (at_c + at_floor + nb.integrals((nb.values - nb.bids) * weight)).tolist()
    # v - b(v) at a node is as precise as v itself
    rounding = abs(at_c[0]) + abs(auc.bids.origin) + abs(auc.floor * auc.p_sale if math.isfinite(auc.floor) else 0.0) \
        + float(nb.integrals(np.abs(nb.values * weight))[0])
    return hi, abs(hi - lo) + os_.ROUNDING * rounding


def _descending_weight(nodes, n, k, m):
    """The descending route's split edge c (the edge nearest F^n = e^-1) and its node
    weight, k s (1 - F^n) where t < t_c and -k s F^n elsewhere (k = n - 1, or (n - 1)/alpha
    under risk aversion: b' = k (f/F)(v - b)): functions of the nodes, n and k alone (the
    nodes run in t = log(m s), m = n - 1)."""
    c = int(np.argmin(np.abs(nodes.edges - math.log(m / n)))) if len(nodes.edges) else 0
    return c, k * nodes.s * np.where(nodes.t < nodes.edges[c], -np.expm1(-n * nodes.s), -np.exp(-n * nodes.s))


def all_pay_revenue(auc):
    """n E[a(X) 1{X >= r}], a(v) = F(v)^(n-1) b(v): every bidder pays its bid."""
    n = auc.n
    return auc.bids.expect(lambda nb: n * nb.one * nb.rivals * nb.bids)


_BID_NOTES = {
    "forward": "symmetric equilibrium bid b(v) = E[max(Y, r) | Y < v], Y the highest rival value (Krishna 2009, ch. 2)",
    "reverse": "symmetric equilibrium ask b(c) = E[min(Y, p) | Y > c], Y the lowest rival cost, p the maximum price "
               "(the mirror of Krishna 2009, ch. 2)",
}


_TRUTHFUL_NOTES = {
    "forward": "bidding one's own value is a dominant strategy under this rule (Vickrey 1961)",
    "reverse": "bidding one's own cost is a dominant strategy under this rule (Vickrey 1961)",
}


for _rule in (
    R.AuctionRule("first_price", R.FIRST, first_price_revenue, _BID_NOTES),
    R.AuctionRule("second_price", R.SECOND, second_price_revenue, _TRUTHFUL_NOTES),
    R.AuctionRule("ascending", R.SECOND, ascending_revenue, _TRUTHFUL_NOTES),
    R.AuctionRule("descending", R.FIRST, descending_revenue, {
        "forward": _BID_NOTES["forward"] + "; the descending clock is strategically the same as first-price",
        "reverse": _BID_NOTES["reverse"] + "; the rising clock is strategically the same as first-price"}),
    R.AuctionRule("all_pay", R.ALL_PAY, all_pay_revenue, {
        "forward": "all-pay equilibrium bid a(v) = F(v)^(n-1) b(v), b the first-price bid (Krishna 2009, ch. 2)",
        "reverse": "all-pay equilibrium ask a(c) = S(c)^(n-1) b(c), b the first-price ask (the mirror of Krishna 2009, ch. 2)"}),
):
    R.register(_rule)
