"""The log-likelihood of past auctions under a value model (forward twin): prices of
second-price and ascending auctions, and bids of first-price ones; with their probability
integral transforms for the fit check.

With n independent values from F, the price is the second-highest value X(n-1:n) when it
is above the reserve r: density n(n-1) F^(n-2) (1 - F) f; it is r itself when one value
alone clears it: probability n F(r)^(n-1) (1 - F(r)); nothing sells with probability F(r)^n
(David and Nagaraja, Order Statistics, 3rd ed., 2003, section 2.1; Athey and Haile,
Identification of standard auction models, Econometrica 70(6), 2002, section 3).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import interpolate, special as sp

from ..auction import ForwardAuction, neg_log_cdf
from .records import BidRecords


def _times(k, log_p):
    """k log p with 0 log 0 = 0 (a count of 0 contributes nothing, even where p = 0)."""
    return np.where(k > 0, k * np.where(k > 0, log_p, 0.0), 0.0)


def price_log_likelihood(model, rec):
    """Sum over the records of the log probability (density) of what each saw; -inf where a
    record is impossible under the model (a price outside its support)."""
    total = 0.0
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        if rec.above.any():
            n, p = rec.n[rec.above], rec.price[rec.above]
            log_f = np.log(model.pdf(p))
            total += float(np.sum(np.log(n * (n - 1.0)) + _times(n - 2.0, model.logcdf(p)) + model.logsf(p) + log_f))
        if rec.at_reserve.any():
            n, r = rec.n[rec.at_reserve], rec.reserve[rec.at_reserve]
            total += float(np.sum(np.log(n) + _times(n - 1.0, model.logcdf(r)) + model.logsf(r)))
        if rec.unsold.any():
            total += float(np.sum(_times(rec.n[rec.unsold], model.logcdf(rec.reserve[rec.unsold]))))
    return total if math.isfinite(total) else -math.inf


def second_highest_cdf(model, n, x):
    """P(X(n-1:n) <= x) = I_F(x)(n - 1, 2): at least n - 1 of the n values at or below x."""
    return sp.betainc(n - 1.0, 2.0, np.clip(model.cdf(x), 0.0, 1.0))


def price_transforms(model, rec):
    """Each price paid above its reserve, through the distribution the model implies for it
    given that it is above the reserve: uniform on [0, 1] when the model is right."""
    n, p, r = rec.n[rec.above], rec.price[rec.above], rec.reserve[rec.above]
    h_p, h_r = second_highest_cdf(model, n, p), second_highest_cdf(model, n, r)
    with np.errstate(divide="ignore", invalid="ignore"):
        u = (h_p - h_r) / (1.0 - h_r)
    return np.clip(np.where(np.isfinite(u), u, 1.0), 0.0, 1.0)


# First-price bids. The symmetric equilibrium bid b = beta(v) solves the first-order condition
# beta'(v) = (n - 1) (f(v) / F(v)) (v - beta(v)) (Krishna, Auction Theory, 2nd ed., 2009, ch. 2), so
# a bid's density g(b) = f(v) / beta'(v) = F(v) / ((n - 1) (v - beta(v))) at v = beta^-1(b): the
# likelihood of the bids through the bid function (Donald and Paarsch, Piecewise pseudo-maximum
# likelihood estimation in empirical models of auctions, International Economic Review 34(1), 1993).
# It is zero for a bid above the top bid beta(upper): the bids' support moves with the parameters.

#: Points of the fine grid of exact bids that the spline runs through.
_GRID = 160
#: The grid stops where F = e^-700: below that no double bid is told apart from the bottom of the support.
_S_FLOOR = 700.0
#: Points of the coarse grid that finds where the bids' values lie.
_COARSE = 24


@dataclass(frozen=True)
class BidInverse:
    """Where bids of an n-bidder first-price auction sit under a model: s = -log F(v) at
    v = beta^-1(b), and each bid's log density log g(b) (nan and -inf where no value bids b)."""

    s: np.ndarray
    log_density: np.ndarray


def _abscissa(auc, b):
    """The splines' abscissa and d(abscissa)/db: the bid itself, or log(b - r) above a binding
    reserve r, near which b - r grows as (v - r)^2 and the density as (b - r)^(-1/2), so that
    log g is nearly linear in log(b - r) where it is not in b."""
    if not auc.reserve_binds:
        return b, np.ones_like(b)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.log(b - auc.floor), 1.0 / (b - auc.floor)


def _bid_curves(auc, n, s_grid):
    """(log s, log g) as functions of the bid (``_abscissa``), through the exact equilibrium bids
    at ``s_grid`` (descending, so bids rise): cubic Hermite splines with the first-order
    condition's slopes, v' = dv/db = F / ((n - 1) f (v - beta)),
    d log s / db = -f v' / (F s) = -1 / ((n - 1) s (v - beta)) and d log g / db = (n / (n - 1) - v') / (v - beta);
    with the abscissa there. None with fewer than 2 points."""
    beta = auc.bids.at_s(s_grid)
    v = auc.model.value_at(np.exp(-s_grid), -np.expm1(-s_grid))
    x, dx = _abscissa(auc, beta)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        shade = v - beta
        dv = np.exp(-s_grid - np.log(auc.model.pdf(v))) / ((n - 1.0) * shade)
        d_log_s = -1.0 / ((n - 1.0) * s_grid * shade) / dx
        log_g = -s_grid - math.log(n - 1.0) - np.log(shade)
        d_log_g = (n / (n - 1.0) - dv) / shade / dx
    ok = np.isfinite(x) & np.isfinite(d_log_s) & np.isfinite(log_g) & np.isfinite(d_log_g) & (shade > 0)
    x = x[ok]
    rising = x > np.concatenate(([-math.inf], np.maximum.accumulate(x)[:-1]))
    if np.count_nonzero(rising) < 2:
        return None
    at = np.nonzero(ok)[0][rising]
    return (interpolate.CubicHermiteSpline(x[rising], np.log(s_grid[at]), d_log_s[at], extrapolate=False),
            interpolate.CubicHermiteSpline(x[rising], log_g[at], d_log_g[at], extrapolate=False), x[rising])


def _stretch(model, auc, b):
    """(s_top, s_low): a stretch of s = -log F that holds every bid's value, each end a continuous
    function of the parameters (so the likelihood moves smoothly with them): s_low = -log F at
    the lowest bid (its value lies above it), capped at _S_FLOOR and at the reserve's s_r; s_top
    a quarter of the highest bid's s read off a coarse grid of exact bids (1e-14 where that bid
    is beyond the grid)."""
    lowest, highest = float(np.min(b)), float(np.max(b))
    s_low = min(_S_FLOOR, neg_log_cdf(model, lowest)) if lowest > model.lower else _S_FLOOR
    s_low = max(min(s_low, auc.s_r), 1e-12)
    coarse = np.geomspace(s_low, 1e-14, _COARSE)
    beta = auc.bids.at_s(coarse)
    if not highest < beta[-1]:
        return 1e-14, s_low
    return max(0.25 * math.exp(float(np.interp(highest, beta, np.log(coarse)))), 1e-14), s_low


def _grid(auc, b):
    """The s of the exact bids the splines run through: even in log s where F is near 1, even in s
    where it is not, over ``_stretch``; above a binding reserve, also closing in on its s_r
    geometrically down to a quarter of the lowest bid's distance from it (in s)."""
    s_top, s_low = _stretch(auc.model, auc, b)
    grid = [np.geomspace(s_top, s_low, _GRID), np.linspace(s_top, s_low, _GRID)]
    if auc.reserve_binds:
        over = b[b > auc.floor]
        gap = auc.s_r - (min(_S_FLOOR, neg_log_cdf(auc.model, float(np.min(over)))) if len(over) else auc.s_r)
        near = max(0.25 * gap, 1e-12 * auc.s_r)
        grid.append(auc.s_r - np.geomspace(near, max(auc.s_r - s_top, 2.0 * near), _GRID))
    grid = np.unique(np.concatenate(grid))[::-1]
    return np.append(grid, 0.0) if s_top == 1e-14 else grid


def invert_bids(model, n, b, reserve=None):
    """``BidInverse`` of bids b (forward twin) with n >= 2 bidders and an optional reserve. Exact
    equilibrium bids on a grid over the bids' values (``_grid``) carry cubic Hermite splines of
    log s and log g in the bid (``_bid_curves``), so the cost does not grow with the bids. A bid
    above the top bid beta(upper), or below the bottom of the values, has no value. At the bottom
    of a bounded support beta'(low) = (n - 1) / n, so g(low) = n f(low) / (n - 1); a bid at a
    binding reserve itself, where the density has no finite value, counts as a value at or above
    it: log g is there log(1 - F(r)), and s = s_r."""
    auc = ForwardAuction(model, int(n), reserve)
    s = np.full(b.shape, math.nan)
    log_g = np.full(b.shape, -math.inf)
    if len(b) == 0:
        return BidInverse(s, log_g)
    curves = _bid_curves(auc, n, _grid(auc, b))
    bottom = b == model.lower
    at_reserve = (b == auc.floor) & auc.reserve_binds
    s[bottom] = math.inf
    if curves is None:
        return BidInverse(s, log_g)
    log_s, log_density, grid_x = curves
    x = _abscissa(auc, b)[0]
    # a bid within rounding of the grid's ends (a fit whose top bid is the highest bid) is at that end
    reach = 1e-12 * (abs(grid_x[0]) + abs(grid_x[-1]))
    at = np.clip(x, grid_x[0], grid_x[-1])
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        move = ~bottom & ~at_reserve & (x >= grid_x[0] - reach) & (x <= grid_x[-1] + reach)
        s[move] = np.exp(log_s(at[move]))
        log_g[move] = log_density(at[move])
        if bottom.any() and not auc.reserve_binds:
            log_g[bottom] = math.log(n / (n - 1.0)) + math.log(float(model.pdf(np.array(model.lower))))
        s[at_reserve] = auc.s_r
        log_g[at_reserve] = math.log(-math.expm1(-auc.s_r))
    return BidInverse(s, np.where(np.isnan(log_g), -math.inf, log_g))


def bid_log_likelihood(model, rec):
    """Sum over the auctions of the log probability of what each saw: every bid's log g (all
    bids), or the highest bid's log of n G^(n-1) g (winning bids alone); under a reserve r, each
    bidder who did not bid adds log F(r) (winning bids alone: an unsold auction adds n log F(r));
    -inf where a bid has no value."""
    total = 0.0
    for (n, r), (b, absent) in rec.by_group.items():
        inv = invert_bids(model, n, b, None if math.isinf(r) else r)
        logs = inv.log_density
        if rec.winners_only:
            with np.errstate(invalid="ignore"):
                logs = math.log(n) - (n - 1.0) * inv.s + logs
        total += float(np.sum(logs))
        if absent:
            total += absent * (n if rec.winners_only else 1.0) * float(model.logcdf(np.array(r)))
        if not math.isfinite(total):
            return -math.inf
    return total


def bid_transforms(model, rec):
    """Each bid through the distribution the model implies for it given that it was made,
    G(b) = F(beta^-1(b)) above F(r) (the highest bid's G^n for winning bids alone), rescaled to
    [0, 1]: uniform when the model is right."""
    out = []
    for (n, r), (b, _) in rec.by_group.items():
        if len(b) == 0:
            continue
        power = n if rec.winners_only else 1.0
        s = invert_bids(model, n, b, None if math.isinf(r) else r).s
        floor = 0.0 if math.isinf(r) else float(model.cdf(np.array(r))) ** power
        with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
            u = (np.exp(-power * s) - floor) / (1.0 - floor)
        # a bid no value makes (never so at a fitted optimum) sits at the end it lies beyond
        reached = b[~np.isnan(u)]
        out.append(np.where(np.isnan(u), np.where(b > (reached.max() if len(reached) else -math.inf), 1.0, 0.0), u))
    return np.clip(np.concatenate(out), 0.0, 1.0) if out else np.empty(0)


def log_likelihood(model, rec):
    """The records' log-likelihood under a forward-twin model: prices or bids."""
    return bid_log_likelihood(model, rec) if isinstance(rec, BidRecords) else price_log_likelihood(model, rec)


def transforms(model, rec):
    """The records' probability integral transforms under a forward-twin model, for the fit check."""
    return bid_transforms(model, rec) if isinstance(rec, BidRecords) else price_transforms(model, rec)
