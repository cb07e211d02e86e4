"""The optimal reserve (forward) or maximum price (reverse): Myerson (1981), the reserve
where the virtual value equals the auctioneer's own value, or for an irregular model the
best of the expected payoff's local maxima.
"""
from __future__ import annotations

import math

import numpy as np
from scipy import optimize

from . import audit, mixing, revenue
from . import rules as R
from .auction import ForwardAuction, forward_case
from .bidders import Bidders, CostlyEntry
from .errors import ParameterError
from .price import check_price_exists
from .topvalues import finite
from .valuespace import refined_value_integral


def _sp_payoff(model, bidders, r, v0):
    """Seller's expected payoff with reserve r: revenue plus v0 P(no sale); for an uncertain
    count each count's revenue mixed (no bidder: no sale)."""
    count = Bidders.of(bidders)
    if not count.certain:
        parts = [(w, _sp_payoff(model, n, r, v0)) for n, w in zip(count.counts, count.weights) if n >= 1]
        rev, p_sale = sum(w * x[1] for w, x in parts), sum(w * x[2] for w, x in parts)
        return rev + v0 * (1.0 - p_sale), rev, p_sale
    auc = ForwardAuction(model, count, r, v0)
    rev = auc.lone_price * auc.p_sale if auc.bidders.lone else revenue.second_price_revenue(auc)[0]
    return rev + v0 * (1.0 - auc.p_sale), rev, auc.p_sale


_RESERVE_U = np.concatenate(([1e-9, 1e-6, 1e-4], np.linspace(0.002, 0.998, 499), [1 - 1e-4, 1 - 1e-6, 1 - 1e-9]))


def _reserve_grid(model):
    """Values on a grid in quantile space, with the model's kinks and density dips
    inside the support (where the virtual value can jump or turn)."""
    x = model.value_at(_RESERVE_U, 1.0 - _RESERVE_U)
    kinks = [k for k in model.kink_values() if model.lower < k < model.upper]
    return np.unique(np.concatenate((x, kinks)))


def optimal_reserve(model, bidders, v0):
    """(reserve, regular, outcome): Myerson (1981), the reserve where the virtual value
    v - S(v)/f(v) equals v0 (outcome "root", or "none_binds" / "kept" where it lies at an end
    of the support); for an irregular model, the best of the payoff's local maxima
    (:func:`_best_reserve`, outcome "irregular")."""
    if model.discrete:
        raise ParameterError("smoothing", "equilibrium bidding needs a continuous value model; use smoothing: kernel")
    x = _reserve_grid(model)
    with np.errstate(all="ignore"):
        psi = x - model.sf(x) / model.pdf(x)
    good = np.isfinite(psi) & np.isfinite(x)
    if not np.any(good):  # no virtual value can be evaluated: the payoff's slope still can
        good = np.isfinite(x)
        psi = np.full(x.shape, np.nan)
    x, psi = x[good], psi[good]
    if len(x) < 2:
        raise ParameterError("bidder_values", "the value model is too concentrated to search for a reserve")
    scale = max(np.max(np.abs(x)), 1e-300)
    if not x[-1] - x[0] > 8.0 * np.spacing(scale):
        raise ParameterError("bidder_values", f"the values' spread is below the rounding of their size ({scale:g}): a reserve "
                                              "cannot be placed among values that double precision does not tell apart")
    regular = bool(np.all(np.isfinite(psi)) and np.all(np.diff(psi) >= -1e-9 * scale))
    lo = model.lower if math.isfinite(model.lower) else float(x[0])
    hi = model.upper if math.isfinite(model.upper) else float(x[-1])

    def vv(r):
        with np.errstate(all="ignore"):
            return float(r - model.sf(r) / model.pdf(r)) - v0

    outcome = "root"
    if regular:
        if psi[0] >= v0 and v0 <= lo:
            r_star, outcome = lo, "none_binds"
        elif psi[0] >= v0:  # the virtual value is at most the value, so the root lies in [v0, the lowest probe]
            a, b = v0, float(x[0])
            r_star = a if vv(a) >= 0.0 else optimize.brentq(vv, a, b, xtol=1e-15 * max(abs(a), abs(b), 1e-300),
                                                            rtol=1e-15, maxiter=200)
        elif psi[-1] <= v0:
            r_star, outcome = hi, "kept"
        else:
            i = int(np.argmax(psi > v0))
            a, b = float(x[i - 1]), float(x[i])
            r_star = optimize.brentq(vv, a, b, xtol=1e-15 * max(abs(a), abs(b), 1e-300), rtol=1e-15, maxiter=200)
    else:
        r_star = _best_reserve(model, bidders, v0, x, lo, hi, scale)
        # No reserve is always a choice: a guard for a grid the model's quantiles make
        # degenerate (a Beta of shapes near 0, whose quantiles all round to one value).
        if r_star != lo and _sp_payoff(model, bidders, lo, v0)[0] > _sp_payoff(model, bidders, r_star, v0)[0]:
            r_star = lo
        outcome = "irregular"
    return r_star, regular, outcome


def _payoff_slope(model, r, v0):
    """(v0 - r) f(r) + S(r) = f(r) (v0 - virtual value): the seller's payoff's slope in the
    reserve r, divided by n F(r)^(n-1) (Myerson 1981). Finite where f = 0 (a gap
    between clusters of values, where raising the reserve loses no sale)."""
    with np.errstate(all="ignore"):
        return (v0 - r) * model.pdf(r) + model.sf(r)


def _best_reserve(model, bidders, v0, x, lo, hi, scale):
    """The global maximum of the payoff over reserves. Its local maxima are where the
    slope turns from positive to negative between grid points (refined by brentq), and
    the ends where the slope points out of the support. The payoff differences between
    them are integrals of the slope itself, n F^(n-1) ((v0 - r) f + S), in value space."""
    count = Bidders.of(bidders)
    g = _payoff_slope(model, x, v0)
    ok = np.isfinite(g)
    xs, g = x[ok], g[ok]
    if len(xs) < 2:
        raise ParameterError("bidder_values", "the value model is too concentrated to search for a reserve")
    peaks = [lo] if g[0] <= 0.0 else []
    for i in np.nonzero((g[:-1] > 0.0) & (g[1:] <= 0.0))[0]:
        a, b = float(xs[i]), float(xs[i + 1])
        peaks.append(b if g[i + 1] == 0.0 else optimize.brentq(
            lambda r: float(_payoff_slope(model, r, v0)), a, b,
            xtol=1e-15 * max(abs(a), abs(b), 1e-300), rtol=1e-15, maxiter=200))
    if g[-1] > 0.0:
        peaks.append(hi)
    if len(peaks) == 1:
        return peaks[0]

    def slope(r):  # H'(F(r)) = E[N F^(N-1)], n F^(n-1) for a certain count
        with np.errstate(all="ignore"):
            rivals = count.highest_density_s(model.neg_log_cdf(r))
            return np.where(rivals > 0.0, rivals * _payoff_slope(model, r, v0), 0.0)

    gains = [0.0]
    for a, b in zip(peaks[:-1], peaks[1:]):
        edges = np.concatenate(([a], x[(x > a) & (x < b)], [b]))
        flat = np.zeros(len(edges) - 1, bool)
        rise, _ = refined_value_integral(edges[:-1], edges[1:], flat, np.ones(len(flat)), slope, scale)
        gains.append(gains[-1] + rise)
    return peaks[int(np.argmax(gains))]


def _entry_optimum(model, entry, v0):
    """The reserve that maximises the seller's expected payoff when the reserve also sets who
    enters (Levin and Smith 1994): entry re-solved at each reserve (``mixing.entry_count``),
    the payoff scanned on a quantile grid (with v0) and refined by a bounded search between
    the best point's neighbours."""
    grid = _reserve_grid(model)[::25]
    if model.lower < v0 < model.upper:
        grid = np.unique(np.append(grid, v0))
    grid = grid[np.isfinite(grid)]

    def payoff(r):
        return mixing.entry_payoff(model, entry, float(r), v0)

    r_best, best = _scanned_maximum(payoff, grid)
    # Where the payoff is flat within rounding, the reserves theory names are taken: the seller's
    # own value (the optimum when entry is mixed, Levin and Smith 1994) and Myerson's (1981) for
    # all N entering (the optimum when entry stays full).
    myerson = optimal_reserve(model, Bidders.exactly(entry.potential), v0)[0]
    full = mixing.resolve(entry, model, myerson).entry["entry_probability"] == 1.0
    for named in ((myerson, v0) if full else (v0, myerson)):
        if model.lower <= named <= model.upper and payoff(named) >= best - 1e-12 * abs(best):
            return float(named)
    return r_best


def _rule_payoff(model, count, r, v0, rule, risk_aversion):
    """(the auctioneer's payoff, the revenue, P(sale)) under ``rule`` with reserve r (None: none),
    the revenue by the rule's own route."""
    from .reports import forward_figures  # reports builds on this module's neighbours

    auc = ForwardAuction(model, count, r, v0, risk_aversion)
    rev = forward_figures(auc, [rule], [])[0][rule]["expected_revenue"] if auc.p_sale > 0 else 0.0
    return rev + v0 * (1.0 - auc.p_sale), rev, auc.p_sale


def _rule_optimum(model, count, v0, rule, risk_aversion, lo):
    """The reserve maximising the auctioneer's payoff under a bid-priced rule when bidders are
    risk averse (no closed form: the bids themselves move with the reserve): the payoff scanned
    on a quantile grid, no reserve included, and refined by a bounded search between the best
    point's neighbours."""
    grid = _reserve_grid(model)[::25]
    grid = np.unique(np.concatenate((grid[np.isfinite(grid)], [lo] if math.isfinite(lo) else [])))

    def payoff(r):
        return _rule_payoff(model, count, float(r), v0, rule, risk_aversion)[0]

    return _scanned_maximum(payoff, grid)[0]


def _scanned_maximum(payoff, grid):
    """(reserve, payoff) at the payoff's maximum: the best grid point, refined by a bounded
    search between its neighbours (kept only where it does better)."""
    values = [payoff(r) for r in grid]
    i = int(np.argmax(values))
    a, b = float(grid[max(i - 1, 0)]), float(grid[min(i + 1, len(grid) - 1)])
    r_best, best = float(grid[i]), values[i]
    if b > a:
        found = optimize.minimize_scalar(lambda r: -payoff(r), bounds=(a, b), method="bounded",
                                         options={"xatol": 1e-10 * max(abs(a), abs(b), b - a)})
        if -found.fun > best:
            r_best, best = float(found.x), -found.fun
    return r_best, best


def _by_rule(fmodel, count, v0, r_star, risk_aversion, to_payoff, sign):
    """Under risk aversion, each rule's own optimum (``optimal_reserve_by_rule``): Myerson's for
    the rules where bidding one's value stays dominant, a search for the bid-priced ones (once
    per pricing: the descending clock is strategically first price), each rule's figures there
    by its own route."""
    from .reports import risk_averse_rules

    lo = fmodel.lower
    out, by_pricing = {}, {}  # rules that price alike (first price, the descending clock) share their optimum
    for rule in risk_averse_rules(None, risk_aversion):
        pricing = R.get(rule).pricing
        if pricing.truthful or count.lone:
            r = r_star
        else:
            if pricing.name not in by_pricing:
                by_pricing[pricing.name] = _rule_optimum(fmodel, count, v0, rule, risk_aversion, lo)
            r = by_pricing[pricing.name]
        payoff, rev, p_sale = _rule_payoff(fmodel, count, r, v0, rule, risk_aversion)
        out[rule] = {"optimal_reserve": finite(sign * r), "expected_revenue_at_optimum": finite(sign * rev),
                     "probability_of_sale_at_optimum": finite(p_sale), "expected_payoff_at_optimum": finite(to_payoff(payoff))}
    return out


def reserve_report(model, direction, bidders, own_value, risk_aversion=0.0):
    """The reserve (forward) or maximum price (reverse) that maximises the seller's (buyer's)
    expected payoff, in the caller's sign under the core's names; ``outcome`` says how the
    optimum was found (see :func:`optimal_reserve`), for the web layer's note."""
    fmodel, _, v0 = forward_case(model, direction, None, own_value)
    if isinstance(bidders, CostlyEntry):
        count0 = mixing.resolve(bidders, fmodel, None)
        regular = optimal_reserve(fmodel, count0, v0)[1]  # a property of the value model alone
        r_star, outcome = _entry_optimum(fmodel, bidders, v0), "entry"
        count = mixing.resolve(bidders, fmodel, r_star)
    else:
        count = count0 = Bidders.of(bidders)
        r_star, regular, outcome = optimal_reserve(fmodel, count, v0)
    check_price_exists(fmodel, count)
    payoff, rev, p_sale = _sp_payoff(fmodel, count, r_star, v0)
    payoff0, rev0, _ = _sp_payoff(fmodel, count0, None, v0) if (not count0.may_be_lone or math.isfinite(fmodel.lower)) \
        else (None, None, None)
    # the buyer's payoff, own_value P(award) - payment, from the forward twin's revenue + v0 P(no sale)
    to_payoff = (lambda x: x) if direction == "forward" else (lambda x: x + own_value)
    sign = 1.0 if direction == "forward" else -1.0
    out = {
        "direction": direction,
        "bidders": count.to_params(),
        **({} if count.certain and count.entry is None else {"expected_bidders": finite(count.mean)}),
        **({} if count.entry is None else {"entry_probability": finite(count.entry["entry_probability"])}),
        "optimal_reserve": finite(sign * r_star),
        "expected_revenue_at_optimum": finite(sign * rev),
        "expected_revenue_without_reserve": finite(None if rev0 is None else sign * rev0),
        "probability_of_sale_at_optimum": finite(p_sale),
        "expected_payoff_at_optimum": finite(to_payoff(payoff)),
        "expected_payoff_without_reserve": finite(None if payoff0 is None else to_payoff(payoff0)),
        "regular": regular,
        "outcome": outcome,
        "warnings": [],
    }
    if risk_aversion:
        if not count.certain:
            raise ParameterError("risk_aversion", "risk aversion with an uncertain number of bidders is not offered yet; "
                                                  "give an integer bidders, or risk_aversion 0")
        out["risk_aversion"] = {"crra": risk_aversion}
        out["optimal_reserve_by_rule"] = _by_rule(fmodel, count, v0, r_star, risk_aversion, to_payoff, sign)
    return audit.reserve_price(out, model, own_value)
