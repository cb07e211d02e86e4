"""The reports the endpoints return: each rule's revenue figures, the equilibrium bids on
a grid, computed on the forward twin of the caller's auction (:func:`auction.forward_case`).
Figures come back in the caller's sign under the core's names (revenue, sale, values);
the web layer names them for the caller's direction and writes the notes
(service/web/wording.py).
"""
from __future__ import annotations

import math

import numpy as np

from . import audit, bids, gains, mixing, price, simulation
from . import rules as R
from .auction import ForwardAuction, forward_case
from .errors import ParameterError
from .notes import Note
from .topvalues import finite


#: A bid route's figure whose integrand has more than this share beyond the nodes is null.
_UNREACHED = 1e-12


def _no_sale_note(auc):
    """Say so (``Note("no_sale")``) when the reserve lies where no value reaches it."""
    return [] if auc.p_sale > 0.0 else [Note("no_sale")]


def forward_figures(auc, rules, quantiles):
    """Each rule's forward figures: the expected revenue by the rule's own route; the sd,
    the surpluses and the efficiency each integrated as one quantity, never as a
    difference of two large figures; a figure that does not exist is None, with a warning."""
    if auc.bidders.lone and auc.p_sale > 0.0 and not math.isfinite(auc.lone_price):
        raise ParameterError("reserve", "with one bidder and no reserve the price is the bottom of an unbounded value model; give a reserve")
    warnings = []
    sp_surplus, eff = gains.top_gains(auc, warnings)
    out, shared = {}, {}
    for rule in rules:
        mean, err, sd, sd_err, qs = _price_figures(auc, rule, quantiles, shared, warnings)
        if sd is not None and not math.isfinite(sd):
            sd = None
            warnings.append(f"{rule}: the sd is null (it is beyond double precision, about 1e308)")
        winner, bidder = (None, None) if sp_surplus is None else gains.winner_gains(auc, rule, sp_surplus)
        out[rule] = {
            "rule": rule,
            "expected_revenue": mean,
            "revenue_sd": sd,
            "revenue_quantiles": None if qs is None else np.asarray(qs, float).tolist(),  # at ``quantiles``
            "probability_of_sale": auc.p_sale,
            "expected_winner_surplus": None if winner is None else winner[0],
            "expected_bidder_surplus": None if bidder is None else bidder[0],
            "efficiency": None if eff is None else eff[0],
            "_err": max([err, sd_err] + [g[1] for g in (winner, bidder, eff) if g is not None]),
        }
    for name in rules:
        if R.get(name).pricing is R.ALL_PAY and auc.single_price is None and auc.p_sale > 0:
            warnings.append(f"{name}: the quantiles are null (the sum of n bids has no closed form here); the sd is exact")
    return out, warnings


def _price_figures(auc, rule, quantiles, shared, warnings):
    """(mean, its error, sd or None, the sd's error, quantiles or None) of the revenue.
    The sd and quantiles depend only on the price distribution, which the two rules of each
    pair share, so they are computed once per pair."""
    has_var = auc.p_sale == 0.0 or price.price_moment_exists(auc.model, auc.bidders, rule, 2, auc.floor)
    if not has_var:
        note = f"{rule}: the sd is null (the price's variance does not exist: the value model's tail is too heavy)"
        if note not in warnings:
            warnings.append(note)
    if auc.p_sale == 0.0:
        return 0.0, 0.0, 0.0, 0.0, np.zeros(len(quantiles))
    if auc.single_price is not None:
        return price.single_price_stats(auc, quantiles)
    pricing = R.get(rule).pricing
    if pricing is not R.SECOND:
        if _out_of_reach(auc, rule, 1, warnings):
            return None, 0.0, None, 0.0, (None if pricing is R.ALL_PAY else price.bid_price_quantiles(auc, quantiles))
        has_var = has_var and not _out_of_reach(auc, rule, 2, warnings)
    mean, err = R.get(rule).revenue(auc)
    if pricing is R.ALL_PAY:
        sd, sd_err = price.all_pay_stats(auc) if has_var else (None, 0.0)
        return mean, err, sd, sd_err, None
    if pricing.name not in shared:
        stats, price_quantiles = price.PRICE_DISTRIBUTION[pricing.name]
        shared[pricing.name] = (stats(auc) if has_var else (None, 0.0)), price_quantiles(auc, quantiles)
    (sd, sd_err), qs = shared[pricing.name]
    return mean, err, sd, sd_err, qs


def _out_of_reach(auc, rule, p, warnings):
    """Whether the bid route's p-th moment, which exists, has more than ``_UNREACHED`` of
    it beyond the bid nodes (``EquilibriumBids.share_beyond_reach``); if so it is null, and
    a warning says why."""
    if not auc.bids.share_beyond_reach(p) > _UNREACHED:
        return False
    what = "expected revenue and sd are" if p == 1 else "sd is"
    warnings.append(f"{rule}: the {what} null: the moment exists, but more than {_UNREACHED:g} of it comes from values "
                    f"beyond {bids.TOP_VALUE:g}, out of the double range (a tail index just above the moment's threshold)")
    return True


def risk_averse_rules(rules, risk_aversion, field="rules"):
    """The rules asked (default: every registered rule but all-pay under risk aversion, whose
    equilibrium is not offered); all-pay asked under risk aversion is a ParameterError."""
    if not risk_aversion:
        return list(R.names()) if rules is None else list(rules)
    if rules is None:
        return [r for r in R.names() if R.get(r).pricing is not R.ALL_PAY]
    for i, r in enumerate(rules):
        if R.get(r).pricing is R.ALL_PAY:
            raise ParameterError(f"{field}.{i}" if field == "rules" else field,
                                 "all-pay under risk aversion is not offered; drop it or set risk_aversion to 0")
    return list(rules)


def _auction(fmodel, count, freserve, v0, risk_aversion):
    """The forward auction: one count's, or the mixture's for an uncertain count (risk-neutral only)."""
    if count.certain:
        return ForwardAuction(fmodel, count, freserve, v0, risk_aversion)
    if risk_aversion:
        raise ParameterError("risk_aversion", "risk aversion with an uncertain number of bidders is not offered yet; "
                                              "give an integer bidders, or risk_aversion 0")
    return mixing.MixedAuction(fmodel, count, freserve, v0)


def revenue_report(model, direction, bidders, reserve=None, own_value=None, rules=None,
                   quantiles=(0.05, 0.25, 0.5, 0.75, 0.95), risk_aversion=0.0, monte_carlo=None):
    """Revenue figures for each rule asked (default: every registered rule), in the caller's
    sign (a reverse auction's payments) under the core's names (service/web/wording.py
    names them for the caller). Under risk aversion (``risk_aversion``, CRRA rho) revenue
    equivalence fails: ``rule_comparison`` says which rule does best for the auctioneer."""
    rules = risk_averse_rules(rules, risk_aversion)
    fmodel, freserve, v0 = forward_case(model, direction, reserve, own_value)
    count = mixing.resolve(bidders, fmodel, freserve)
    if direction == "forward" and v0 is None:
        v0 = 0.0
    auc = _auction(fmodel, count, freserve, v0, risk_aversion)
    price.check_price_exists(fmodel, count, auc.floor)
    # Payment quantile p is minus the forward revenue quantile 1 - p.
    fq = list(quantiles) if direction == "forward" else [1.0 - p for p in quantiles]
    figures, warnings = (forward_figures if count.certain else mixing.mixed_figures)(auc, list(rules), fq)
    warnings += _no_sale_note(auc)
    sign = 1.0 if direction == "forward" else -1.0
    results, err = [], 0.0
    for rule in rules:
        f = figures[rule]
        err = max(err, f["_err"])
        qs = f["revenue_quantiles"]
        results.append({
            "rule": rule,
            "expected_revenue": finite(None if f["expected_revenue"] is None else sign * f["expected_revenue"]),
            "revenue_sd": finite(f["revenue_sd"]),
            "revenue_quantiles": None if qs is None else [{"p": float(p), "value": finite(sign * x)} for p, x in zip(quantiles, qs)],
            "probability_of_sale": finite(f["probability_of_sale"]),
            "expected_winner_surplus": finite(f["expected_winner_surplus"]),
            "expected_bidder_surplus": finite(f["expected_bidder_surplus"]),
            "efficiency": finite(f["efficiency"]),
        })
    means = [r["expected_revenue"] for r in results]
    spread = (max(means) - min(means)) if len(means) > 1 and None not in means else None
    extra = {"risk_aversion": {"crra": risk_aversion}, "rule_comparison": _comparison(results, direction)} if risk_aversion else {}
    if monte_carlo:
        sims, notes = simulation.revenue_check(auc, list(rules), monte_carlo["draws"], monte_carlo["seed"],
                                               {r["rule"]: r for r in results}, sign)
        extra["monte_carlo"] = {"draws": monte_carlo["draws"], "seed": monte_carlo["seed"], "method": simulation.METHOD,
                                "results": sims, "notes": notes}
    return audit.revenue({
        "direction": direction,
        "bidders": count.to_params(),
        "reserve": reserve,
        "results": results,
        "revenue_equivalence": None if risk_aversion else finite(spread),
        **extra,
        **_count_fields(count),
        "numerics": _numerics(count, "quantile_gauss_legendre+spectral_bid_integration", err),
        "warnings": warnings,
    }, model, reserve, own_value if own_value is not None or direction == "reverse" else 0.0, count.may_be_lone,
        equivalent=not risk_aversion)


def _comparison(results, direction):
    """Under risk aversion: the rule that does best for the auctioneer (the highest revenue, or
    the lowest payment), the one that does worst, and by how much (None where a figure is)."""
    live = [(r["expected_revenue"], r["rule"]) for r in results if r["expected_revenue"] is not None]
    if len(live) < 2:
        return None
    live.sort(reverse=direction == "forward")
    (best, best_rule), (worst, worst_rule) = live[0], live[-1]
    return {"best_for_auctioneer": best_rule, "worst_for_auctioneer": worst_rule, "difference": finite(abs(best - worst))}


def _numerics(count, method, err):
    """The method and error estimate, and for an uncertain count the counts summed over."""
    out = {"method": method if count.certain else method + "+count_mixture", "abs_error": finite(err)}
    if not count.certain:
        out["bidder_counts"] = count.numerics()
    return out


def _count_fields(count):
    """What a report says of an uncertain count beyond its JSON: the expected number of
    bidders and, for costly entry, the entry probability found."""
    if count.certain and count.entry is None:
        return {}
    out = {"expected_bidders": finite(count.mean)}
    if count.entry is not None:
        out["entry_probability"] = finite(count.entry["entry_probability"])
    return out


def _grid(model, points):
    lo = model.lower if math.isfinite(model.lower) else float(model.ppf(1e-3))
    hi = model.upper if math.isfinite(model.upper) else float(model.isf(1e-3))
    return np.linspace(lo, hi, points)


def bid_strategy(model, direction, bidders, reserve=None, rule="first_price", points=51, at=None, risk_aversion=0.0):
    """Equilibrium bids on a grid of values (forward) or costs (reverse: asks), the grid under
    the key ``values`` either way; where none is given, ``points`` values across the support."""
    risk_averse_rules([rule], risk_aversion, field="rule")
    fmodel, freserve, _ = forward_case(model, direction, reserve, None)
    count = mixing.resolve(bidders, fmodel, freserve)
    auc = _auction(fmodel, count, freserve, 0.0, risk_aversion)
    pricing = R.get(rule).pricing
    least_rivals = min([n - 1.0 for n in count.counts if n >= 2], default=0.0)
    if not pricing.truthful and least_rivals and not auc.reserve_binds \
            and not least_rivals * fmodel.lower_tail_index > 1.0:  # b(v) needs E[Y; Y < v]: the lower tail alone
        raise ParameterError("bidders", "the equilibrium bids do not exist: the expected best rival value diverges "
                                        "(the value model's tail is too heavy); give a reserve")
    grid = np.asarray(at, float) if at is not None else _grid(model, points)
    v = grid if direction == "forward" else -grid
    inside = (v >= fmodel.lower) & (v <= fmodel.upper)
    takes_part = inside & (v >= auc.floor)
    bids = v.copy() if pricing.truthful else _equilibrium_bids(auc, pricing, v) if count.certain \
        else mixing.mixed_bids(auc, pricing, v)
    if direction == "reverse":
        bids = -bids
    out_bids = [finite(b) if ok else None for b, ok in zip(bids.tolist(), takes_part.tolist())]
    warnings = []
    if not all(inside):
        warnings.append(Note("outside_support"))
    if not all(takes_part[inside]):
        warnings.append(Note("not_taking_part"))
    warnings += _no_sale_note(auc)
    extra = {"risk_aversion": {"crra": risk_aversion}} if risk_aversion else {}
    return audit.bids({"direction": direction, "rule": rule, "bidders": count.to_params(), **_count_fields(count), **extra,
                       "values": [finite(x) for x in grid.tolist()], "bids": out_bids, "warnings": warnings}, model, reserve,
                      count.may_be_lone)


def _equilibrium_bids(auc, pricing, v):
    """The forward bids at values v under a pricing that is not truthful: b(v), or the all-pay
    a(v) = F(v)^(n-1) b(v)."""
    count = auc.bidders
    s_q = np.minimum(auc.model.neg_log_cdf(v), auc.s_r)
    b = np.full(v.shape, auc.lone_price if count.lone else auc.floor)
    live = np.isfinite(s_q)  # at the bottom of the support the bid is that value itself
    b[live] = auc.bids.at_s(s_q[live])
    if pricing is not R.ALL_PAY:
        return b
    # F^0 = 1 for a lone bidder, F = 0 at the bottom of the support.
    win = np.ones(v.shape) if count.lone else np.where(live, np.exp(-count.rivals * np.where(live, s_q, 0.0)), 0.0)
    with np.errstate(invalid="ignore"):  # F^(n-1) b -> 0 at the bottom of an unbounded support
        return np.where(win > 0.0, win * b, 0.0)
