"""The price's distribution under each pricing: the revenue's sd and quantiles (the
revenue is the price on a sale, 0 otherwise), and whether the price's moments exist.

Second price: max(X2, r) on a sale, atoms at no sale and at the reserve. First price
(and the descending clock): b(X1), increasing in X1. All-pay: the sum of n independent
bids F(X)^(n-1) b(X). Spreads are taken from offsets to a reference anchor, and squares
are scaled by a power of two, so that no digit is lost to the values' size and no square
overflows.
"""
from __future__ import annotations

import math

import numpy as np

from . import orderstats as os_
from . import rules as R
from .bidders import Bidders
from .errors import ParameterError


def _revenue_sd(p_sale, price_mean, price_sd):
    """sd of revenue = the price on a sale (chance p_sale), 0 otherwise, from the price's
    mean and sd given a sale: Var = p Var_sale + p (1 - p) mean^2 (law of total variance),
    taken through hypot so that no square overflows (a mean of 1e200)."""
    return math.sqrt(p_sale) * math.hypot(price_sd, math.sqrt(max(1.0 - p_sale, 0.0)) * price_mean)


def _sd_error(sd, c, var_err):
    """The error of sd = c sqrt(V) from the error ``var_err`` of V, a variance in units of c^2."""
    x = sd / c
    return c * (var_err / (2.0 * x) if x > 0 else math.sqrt(var_err))


def _price_stats_second(auc):
    """(sd, its error) of the revenue under second price: max(X2, r) on a sale, 0 otherwise.
    The price's spread is taken from its offsets from the quadrature's reference anchor
    (``RankQuadrature.offsets``), so it keeps its digits wherever the values sit, and its
    squares are scaled by a power of two (``orderstats.sd_scale``), so none overflows."""
    closed = auc.closed_moments(2)
    if closed is not None and closed[1] is not None:
        sd = math.sqrt(max(closed[1], 0.0))
        return sd, os_.closed_form_error(auc.model, auc.n, closed[0], sd)
    _, pr = auc.sale_atoms()
    q = auc.quadrature(2)
    ref, o = q.offsets() if q.panels else (auc.floor, None)
    at_floor = auc.floor - ref if pr else 0.0
    mass = pr + (q.total() if q.panels else 0.0)
    if not mass > 0:
        return 0.0, 0.0
    with np.errstate(over="ignore", invalid="ignore"):
        shift = (pr * at_floor + (q.integrate_nodes(o)[0] if q.panels else 0.0)) / mass
        c = os_.sd_scale(at_floor - shift, o - shift if q.panels else 0.0)
        spread, err = q.integrate_nodes(((o - shift) / c) ** 2) if q.panels else (0.0, 0.0)
    price_sd = c * math.sqrt(max((spread + pr * ((at_floor - shift) / c) ** 2) / mass, 0.0))
    sd = _revenue_sd(auc.p_sale, ref + shift, price_sd)
    return sd, _sd_error(sd, c, auc.p_sale * err / mass + os_.ROUNDING * (sd / c) ** 2)


def with_no_sale(auc, ps, sale_quantile, sale_cdf_at_zero):
    """Quantiles of revenue = price on a sale, 0 when unsold (prob p0).

    ``sale_quantile(q)`` is the price at cumulative sale mass q in (0, P(sale)];
    the atom at zero sits after the sale prices below zero, whose mass is
    ``sale_cdf_at_zero()`` (only asked when prices of both signs can occur)."""
    ps = np.asarray(ps, float)
    p0 = 1.0 - auc.p_sale
    if auc.floor >= 0.0:
        below = 0.0
    elif auc.model.upper <= 0.0:
        below = auc.p_sale
    else:
        below = sale_cdf_at_zero()
    out = np.zeros(ps.shape)
    lo = ps <= below
    hi = ps > below + p0
    if lo.any():
        out[lo] = sale_quantile(ps[lo])
    if hi.any():
        out[hi] = sale_quantile(np.minimum(ps[hi] - p0, auc.p_sale))
    return out


def _price_quantiles_second(auc, ps):
    p0, pr = auc.sale_atoms()
    n, m = auc.n, auc.model

    def sale_quantile(q):
        # P(sale, price <= x) = P(X2 <= x) - p0 above the floor, with an atom pr at the floor.
        x2 = os_.rank_quantiles(m, n, 2, np.minimum(q + p0, 1.0))
        return np.where(q <= pr, auc.floor, x2)

    def sale_cdf_at_zero():
        return float(os_.rank_cdf(m, n, 2, np.array(0.0))) - p0

    return with_no_sale(auc, ps, sale_quantile, sale_cdf_at_zero)


def _bid_price_stats(auc):
    """(sd, its error) of the revenue b(X1) 1{sale}, shared by first-price and descending.
    The price's spread comes from the bids' offsets from a reference anchor
    (``EquilibriumBids.offsets``), so it keeps its digits wherever the values sit;
    its squares are scaled by a power of two (``orderstats.sd_scale``)."""
    ref, bid_off = auc.bids.offsets()
    nb = auc.bids.nodes()
    with np.errstate(over="ignore", invalid="ignore"):
        mass, first = (np.stack((nb.top.reshape(-1), (nb.top * bid_off).reshape(-1))) @ nb.rule_dt[:, 0]).tolist()
        if not mass > 0:
            return 0.0, 0.0
        shift = first / mass
        c = os_.sd_scale(bid_off - shift)
        spread, err = auc.bids.expect(lambda nb: nb.top * ((bid_off - shift) / c) ** 2)
    sd = _revenue_sd(auc.p_sale, ref + shift, c * math.sqrt(max(spread / mass, 0.0)))
    return sd, _sd_error(sd, c, auc.p_sale * err / mass + os_.ROUNDING * (sd / c) ** 2)


def bid_price_quantiles(auc, ps):
    n, p0 = auc.n, 1.0 - auc.p_sale

    def sale_quantile(q):
        # The price b(X1) is increasing in X1, and P(sale, X1 <= v) = F(v)^n - p0.
        s_q = -np.log(np.minimum(q + p0, 1.0)) / n
        return auc.bids.at_s(np.minimum(s_q, auc.s_r))

    return with_no_sale(auc, ps, sale_quantile, lambda: sale_mass_below_zero(auc.p_sale, sale_quantile))


def sale_mass_below_zero(p_sale, sale_quantile):
    """The sale mass below a price of 0, by bisection on the increasing sale quantile over (0, p_sale]."""
    lo, hi = 0.0, p_sale
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        lo, hi = (mid, hi) if float(sale_quantile(np.array([mid]))[0]) < 0.0 else (lo, mid)
    return lo


def all_pay_stats(auc):
    """(sd, its error) of the all-pay revenue, the sum of n independent bids
    a(X) = F(X)^(n-1) b(X) 1{X >= r}, each bid's variance taken about its mean and its
    squares scaled (``orderstats.sd_scale``). Below the nodes (below the floor, or where
    F^(n-1) is negligible) a bidder bids 0."""
    nb = auc.bids.nodes()
    mass, ea = (np.stack((nb.one.reshape(-1), (nb.one * nb.rivals * nb.bids).reshape(-1))) @ nb.rule_dt[:, 0]).tolist()
    below = 1.0 - mass
    with np.errstate(over="ignore", invalid="ignore"):
        c = os_.sd_scale(ea, nb.rivals * nb.bids - ea)
        spread, err = auc.bids.expect(lambda nb: nb.one * ((nb.rivals * nb.bids - ea) / c) ** 2)
    scaled_var = auc.n * (spread + below * (ea / c) ** 2)
    sd = c * math.sqrt(max(scaled_var, 0.0))
    return sd, _sd_error(sd, c, auc.n * err + os_.ROUNDING * abs(scaled_var))


def all_pay_winner_payment(auc):
    """E[a(X1) 1{sale}]: what the winner alone pays under all-pay."""
    return auc.bids.expect(lambda nb: nb.top * nb.rivals * nb.bids)[0]


#: Each winner-pays pricing's (sd and its error, quantiles) of the revenue.
PRICE_DISTRIBUTION = {"second": (_price_stats_second, _price_quantiles_second), "first": (_bid_price_stats, bid_price_quantiles)}


def single_price_stats(auc, quantiles):
    """(mean, its error, sd, the sd's error, quantiles) when the price is ``auc.single_price``
    on a sale: a lone bidder pays the reserve under every rule (no rival to beat), even a
    reserve below the support (without a reserve, the bottom of the support); so does the
    one bidder above a far reserve (``FAR_RESERVE``)."""
    price, p = auc.single_price, auc.p_sale
    ps = np.asarray(quantiles, float)
    # Revenue is 0 with chance 1 - p and the price with chance p, in increasing order.
    qs = np.where(ps <= 1.0 - p, 0.0, price) if price >= 0.0 else np.where(ps <= p, price, 0.0)
    mean, sd = price * p, abs(price) * math.sqrt(p * (1.0 - p))
    return mean, os_.ROUNDING * abs(mean), sd, os_.ROUNDING * sd, qs


def price_moment_exists(model, bidders, rule, p, floor=-math.inf):
    """Whether E|price|^p is finite under ``rule`` with n bidders (``bidders``: a count or :class:`Bidders`) and the given floor (the
    reserve or the bottom of the support), from the tail index of the price itself.

    Upper tail, P(X > x) ~ x^-a: the second-price price max(X2, r) has index 2a (David and
    Nagaraja 2003, section 2.1: rank k from the top has index k a). The first-price price
    b(X1), b(v) = E[max(Y, r) | Y < v] with Y the highest of n - 1 rival values (Krishna 2009,
    ch. 2): for a > 1 b is bounded by E[max(Y, r)]; for a < 1 the part of E[Y] below v grows
    as v^(1 - a), so b(v) ~ c v^(1 - a) and P(b(X1) > y) ~ P(X1 > (y/c)^(1/(1 - a))) ~
    y^(-a/(1 - a)): index a/(1 - a) (derived here); at a = 1, b grows as log v and every
    moment exists. An all-pay bid F(v)^(n-1) b(v) has the same tail. Lower tail, index
    a_low, none where the floor is finite: rank k has (n - k + 1) a_low, b(X1) follows X1,
    and an all-pay bid vanishes there once the bids exist ((n - 1) a_low > 1).
    """
    count = Bidders.of(bidders)
    if not count.certain:
        return all(price_moment_exists(model, n, rule, p, floor) for n in count.counts if n >= 1)
    if count.lone:
        return math.isfinite(floor)
    n, a, a_low = count.n, model.upper_tail_index, model.lower_tail_index
    pricing = R.get(rule).pricing
    if pricing is R.SECOND:
        upper, lower = 2.0 * a > p, count.rivals * a_low > p
    else:
        upper, lower = a >= 1.0 or a / (1.0 - a) > p, pricing is R.ALL_PAY or n * a_low > p
    return upper and (lower or math.isfinite(floor))


def check_price_exists(fmodel, bidders, floor=-math.inf):
    """The expected price, under every rule alike (revenue equivalence), is the expected
    max(X2, r): with rivals it needs the second-highest value's mean, upper tail 2a > 1, and,
    unless the floor is finite, lower tail (n - 1) a_low > 1 (see ``price_moment_exists``)."""
    count = Bidders.of(bidders)
    if not count.certain:
        for n in count.counts:
            if n >= 2:
                check_price_exists(fmodel, n, floor)
        return
    if not count.lone and not (2.0 * fmodel.upper_tail_index > 1.0
                               and (count.rivals * fmodel.lower_tail_index > 1.0 or math.isfinite(floor))):
        raise ParameterError("bidders", "the expected price does not exist: the value model's tail is too heavy")
