"""What the bidders keep and what trade gains: the winner's and the bidders' expected
surplus under each rule, the winner's expected value, and the efficiency (the share of
the largest expected gain from trade that the auction realises).
"""
from __future__ import annotations

import math

import numpy as np

from . import orderstats as os_
from . import revenue
from . import rules as R
from .auction import FAR_RESERVE, neg_log_cdf


def top_gains(auc, warnings):
    """(the second-price winner's surplus, the efficiency), each (value, error) or None: both
    integrals over the highest value's quadrature (``_top_quadrature``). Neither exists
    where the highest value's mean does not, nor can they be integrated above a far reserve
    (``FAR_RESERVE``)."""
    if not auc.model.upper_tail_index > 1.0:
        warnings.append("expected_winner_surplus, expected_bidder_surplus and efficiency are null: the highest "
                        "value's mean does not exist (the value model's tail is too heavy)")
        return None, None
    if 0.0 < auc.s_r < FAR_RESERVE:
        warnings.append(f"each value beats the reserve with chance below {FAR_RESERVE:g}: the price is the reserve under "
                        "every rule, but the winner's value is beyond reach, so the surpluses and efficiency are null")
        return None, None
    q, s0 = _top_quadrature(auc)
    return _second_price_surplus(auc, q), _efficiency(auc, q, s0, warnings)


def _top_quadrature(auc, n=None):
    """(quadrature, s0): the highest value's quadrature (of ``n`` values, default the auction's
    count) over the values at or above the lower of the floor and the seller's own value v0
    (s = -log F up to the larger of s_r and s0), split at the higher of the two, where the
    reserve's gains and losses begin."""
    m = auc.model
    s0 = None if auc.v0 is None else (math.inf if auc.v0 <= m.lower else neg_log_cdf(m, auc.v0))
    s_cut = auc.s_r if s0 is None else max(auc.s_r, s0)
    split = () if s0 is None or s0 == auc.s_r else (min(auc.s_r, s0),)
    up, low = os_.tail_growth(m, 1)
    q = os_.rank_quadrature(auc.n if n is None else n, 1, kinks_u=m.kinks_u(), s_cut=s_cut, splits_s=split, upper_growth=up,
                            lower_growth=low, model=m, power=1, checked=True).fill(m)
    return q, s0


def _panels_above(q, s):
    """The panels of a rank-1 quadrature above the value with -log F = s (an edge or the cut)."""
    if s <= 0.0:
        return np.zeros(q.panels, bool)
    return np.ones(q.panels, bool) if s == math.inf else q.left_of(math.log(q.m * s))


def _second_price_surplus(auc, q):
    """(E[(X1 - max(X2, r)) 1{X1 >= r}], its error): by parts, as for the expected gap
    (``orderstats.expected_gap``), int from F(r) to 1 of n u^(n-1) (1 - u) Q'(u) du; with one
    bidder, E[X - floor; X >= floor] alike, plus (floor - reserve) P(sale) where a reserve
    below the support is what the lone bidder pays. Without a precise S / f, E[X1; sale]
    less the revenue. A lone bidder's surplus is E[X - floor; sale] from the value offsets
    themselves: its S / f has no weight u^(n-1) to damp it at the bottom, where the quadrature
    (whose reach is set by the values) stops short of the part a thin lower tail puts there
    (a gamma of shape 30 lost 7% of it so)."""
    above = _panels_above(q, auc.s_r)
    ih = None if auc.bidders.lone else auc.model.inverse_hazard(q.u, q.v, q.anchor, q.delta)
    below_support = (auc.floor - auc.lone_price) * auc.p_sale if auc.bidders.lone else 0.0
    with np.errstate(invalid="ignore", over="ignore"):
        if ih is not None:
            surplus, err = q.integrate_nodes(ih, above)
            return surplus + below_support, err
        ref, o = q.offsets()
        if auc.bidders.lone:
            surplus, err = q.integrate_nodes(o - (auc.floor - ref), above)
            return surplus + below_support, err
        shift, err = q.integrate_nodes(o, above)
        paid, paid_err = revenue.second_price_revenue(auc)
        return ref * float(q.w_hi[above].sum()) + shift - paid, err + paid_err


def winner_gains(auc, rule, sp_surplus):
    """(winner's surplus, bidders' surplus) under ``rule``, each (value, error). Second price
    (and a lone bidder): ``_second_price_surplus``. First price: E[X1 - b(X1)], the shading
    integrated directly (``EquilibriumBids.shade``). All-pay: every bidder pays its bid,
    so all of them keep E[F(X1)^(n-1) (X1 - b(X1))] summed, that is E[X1 - b(X1)] again, and
    the winner keeps X1 - a(X1) = (X1 - b(X1)) + (1 - F(X1)^(n-1)) b(X1)."""
    if auc.p_sale == 0.0:
        return (0.0, 0.0), (0.0, 0.0)
    pricing = R.get(rule).pricing
    if auc.bidders.lone or pricing is R.SECOND:
        return sp_surplus, sp_surplus
    shade = auc.bids.shade()
    if "bidders_surplus" not in auc.kept:  # every bid rule asks for it
        auc.kept["bidders_surplus"] = auc.bids.expect(lambda nb: nb.top * shade)
    bidders = auc.kept["bidders_surplus"]
    if pricing is not R.ALL_PAY:
        return bidders, bidders
    k = auc.bidders.rivals
    return auc.bids.expect(lambda nb: nb.top * (shade - np.expm1(-k * nb.s) * nb.bids)), bidders


def winner_value(auc):
    """E[X1 1{sale}], the winner's expected value; None above a far reserve (``FAR_RESERVE``)."""
    if auc.p_sale == 0.0:
        return 0.0
    if 0.0 < auc.s_r < FAR_RESERVE:
        return None
    closed_top = auc.closed_moments(1)
    if closed_top is not None:
        return closed_top[0]
    return auc.quadrature(1).integrate(lambda x: x)[0]


def _efficiency(auc, q, s0, warnings, weight=1.0):
    """(1 - lost / best, its error): best = E[(X1 - v0)^+], the largest expected gain from
    trade; lost = the gains a reserve above v0 gives up, E[(X1 - v0) 1{v0 <= X1 < r}], or the
    losses of selling below v0, E[(v0 - X1) 1{r <= X1 < v0}]. Each is one integral of X1 - v0
    (from the value offsets) over its own panels of ``_top_quadrature``, so 0 <= lost <= best
    and the efficiency never exceeds 1."""
    if auc.v0 is None:
        warnings.append("efficiency is null: give buyer_value to measure gains from trade")
        return None
    ref, o = q.offsets()
    gain = (o - (auc.v0 - ref)) * weight  # ``weight``: the highest value's density over the rule's own
    above = _panels_above(q, min(auc.s_r, s0))
    with np.errstate(invalid="ignore", over="ignore"):
        if auc.s_r <= s0:  # the reserve at or above v0
            (best, e_best), (lost, e_lost) = q.integrate_nodes(gain), q.integrate_nodes(gain, ~above)
        else:
            (best, e_best), (lost, e_lost) = q.integrate_nodes(gain, above), q.integrate_nodes(-gain, ~above)
    auc.kept["efficiency_parts"] = (best, lost)  # an uncertain count mixes these, not the ratio
    if not best > 0:
        warnings.append("efficiency is null: no value exceeds the auctioneer's own, so there are no gains from trade")
        return None
    return 1.0 - lost / best, (e_lost + abs(lost) / best * e_best) / best
