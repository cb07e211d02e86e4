"""Nonparametric inversions of prices and bids into values (forward twin).

* Prices of second-price and ascending auctions: the price is the second-highest value,
  whose distribution for n bidders is H_n(p) = I_F(p)(n - 1, 2), a regularised incomplete
  beta in F; so F(p) = I^-1(H_n(p); n - 1, 2) point by point, pooled across bidder counts by
  their numbers of records (Athey and Haile, Identification of standard auction models,
  Econometrica 70(6), 2002, section 3).
* Every bid of first-price auctions: the equilibrium's first-order condition gives each
  bid's value, xi = b + G(b) / ((n - 1) g(b)), from the bids' distribution G and density g
  (Guerre, Perrigne and Vuong, Optimal nonparametric estimation of first-price auctions,
  Econometrica 68(3), 2000, section 3), with G the empirical cdf and g a Gaussian kernel
  density, bandwidth by Silverman's rule (Silverman, Density Estimation, 1986, eq. 3.31),
  made consistent at the ends of the bids' range by reflection (Schuster, Incorporating
  support constraints into nonparametric estimators of densities, Communications in
  Statistics 14(5), 1985), so no bid is set aside.
* Winning bids alone: the highest bid's cdf is G_win = G^n, so G / ((n - 1) g) =
  n G_win / ((n - 1) g_win), the same inversion on the winners' distribution; it gives the
  winners' values, the highest of n, whose cdf F^n is then taken to the power 1/n.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import special as sp

from ..models import silverman_bandwidth

#: The most points a recovered model keeps (order statistics at evenly spaced ranks), so
#: that it is a model every other endpoint takes at once.
MAX_POINTS = 400
_SQRT_2PI = math.sqrt(2.0 * math.pi)


@dataclass(frozen=True)
class Inversion:
    values: np.ndarray  # recovered values (pseudo-values)
    bandwidth: float | None
    not_increasing: int  # pseudo-values that fall where their bids rise (a warning)
    method: str
    cdf: tuple | None = None  # (values, F at them) where a reserve binds: F below it is its share alone


def prices_to_cdf(rec):
    """(prices, F at them): F recovered at each distinct price paid above its reserve, pooled
    over the bidder counts (Athey and Haile 2002) by how many auctions of each count tell.

    H_n(x) = P(second-highest <= x) is read only off the auctions whose reserve is at most x:
    there a price above the reserve is the second-highest value, and an unsold or at-reserve
    auction's second-highest lies below its reserve, so below x. Of those auctions, the ones
    with second-highest at most x are those whose max(price, reserve) is at most x; so
    H_n(x) = #(max(price, reserve) <= x) / #(reserve <= x), two sorted counts."""
    xs = np.unique(rec.price[rec.above])
    total, weight = np.zeros(xs.shape), np.zeros(xs.shape)
    for n in np.unique(rec.n[rec.n >= 2]):
        mine = rec.n == n
        reserve = rec.reserve[mine]
        top = np.sort(np.where(rec.above[mine], rec.price[mine], reserve))  # max(price, reserve) by record
        told = np.searchsorted(np.sort(reserve), xs, side="right").astype(float)  # auctions with reserve <= x
        with np.errstate(invalid="ignore", divide="ignore"):
            h = np.searchsorted(top, xs, side="right") / told
        f = sp.betaincinv(n - 1.0, 2.0, np.clip(np.where(told > 0, h, 0.0), 0.0, 1.0))
        total += told * f
        weight += told
    with np.errstate(invalid="ignore", divide="ignore"):
        return xs, np.maximum.accumulate(np.where(weight > 0, total / np.maximum(weight, 1.0), 0.0))


def table_points(xs, cdf):
    """At most MAX_POINTS (F, value) points strictly increasing in both, inside (0, 1)."""
    keep = (cdf > 0.0) & (cdf < 1.0)
    xs, cdf = xs[keep], cdf[keep]
    if len(xs) == 0:
        return xs, cdf
    if len(xs) > MAX_POINTS:
        pick = np.unique(np.linspace(0, len(xs) - 1, MAX_POINTS).round().astype(int))
        xs, cdf = xs[pick], cdf[pick]
    rising = np.concatenate(([True], np.diff(cdf) > 0))
    return xs[rising], cdf[rising]


#: The reflected kernel density is summed on this many grid points across the bids' range and
#: interpolated between them (a grid step of a few thousandths of the range, far inside a bandwidth).
_GRID = 1024


def _reflected_kde(x, at, h):
    """Gaussian kernel density of ``x`` at ``at``, reflected about both ends of x's range."""
    lo, hi = float(np.min(x)), float(np.max(x))
    grid = np.linspace(lo, hi, _GRID)
    dens = np.zeros(grid.shape)
    for mirror in (x, 2.0 * lo - x, 2.0 * hi - x):
        for start in range(0, len(mirror), 2048):
            z = (grid[:, None] - mirror[None, start:start + 2048]) / h
            dens += np.exp(-0.5 * z * z).sum(axis=1)
    return np.interp(at, grid, dens / (len(x) * h * _SQRT_2PI))


def pseudo_value(b, G, g, n, winners_only=False, alpha=1.0):
    """The value behind bid b from the equilibrium's first-order condition, b + G / ((n - 1) g)
    with G, g the bids' cdf and density at b (GPV 2000, eq. 4); from the highest bid's cdf and
    density, G_win = G^n, the same value is b + n G_win / ((n - 1) g_win). Bidders with constant
    relative risk aversion rho shade by alpha = 1 - rho times as much: b + alpha G / ((n - 1) g)
    (Campo, Guerre, Perrigne and Vuong 2011)."""
    return b + alpha * (n if winners_only else 1.0) * G / ((n - 1.0) * g)


def _pseudo_values(b, n, winners_only, below=0.0, alpha=1.0):
    """Pseudo-values at each bid, G the empirical cdf, g the reflected kernel density. Under a
    binding reserve the bids are those of the values above it, and ``below`` is the chance of a
    value under it (all bids: F(r); winning bids: the auctions that did not sell, F(r)^n), so the
    cdf and density the first-order condition takes are below + (1 - below) G* and
    (1 - below) g* of the bids seen (GPV 2000, section 4)."""
    h = silverman_bandwidth(b) if np.ptp(b) > 0 else 0.0
    if not h > 0:
        return b.copy(), 0.0
    G = np.searchsorted(np.sort(b), b, side="right") / len(b)
    g = _reflected_kde(b, b, h)
    return pseudo_value(b, below + (1.0 - below) * G, (1.0 - below) * g, n, winners_only, alpha), h


def _groups(rec):
    """(n, r, bids seen, share of values below r, auctions) per bidder count and reserve: without a reserve
    that share is 0; with one, every bid is a value above it, so 1 - F(r) = bids / (n times the
    auctions), pooled over the counts with that reserve (winning bids alone: the share of those
    auctions unsold, F(r)^n, per count)."""
    out = []
    for r in np.unique(rec.reserve):
        at_r = rec.reserve == r
        if math.isfinite(r) and not rec.winners_only:
            seen = sum(len(b) for b, here in zip(rec.bids, at_r) if here)
            below = 1.0 - seen / float(np.sum(rec.n[at_r]))
        for n in np.unique(rec.n[at_r]):
            mine = at_r & (rec.n == n)
            bids = np.concatenate([b for b, here in zip(rec.bids, mine) if here])
            if not math.isfinite(r):
                share = 0.0
            elif rec.winners_only:
                share = float(np.mean([len(b) == 0 for b, here in zip(rec.bids, mine) if here]))
            else:
                share = below
            if len(bids):
                out.append((float(n), float(r), bids, share, int(np.count_nonzero(mine))))
    return out


def _pooled_cdf(per_group):
    """F at every recovered value, pooled over groups by how many auctions each holds: a group
    (n, r, sorted values, F(r), auctions, whether the values are winners') speaks of F only at and above its reserve r,
    where F = F(r) + (1 - F(r)) times its values' empirical cdf (winning bids: the same on the
    highest value's cdf, then the n-th root), as Athey and Haile read reserves that differ."""
    xs = np.unique(np.concatenate([x for _, r, x, *_ in per_group] + [[r] for _, r, *_ in per_group if math.isfinite(r)]))
    total, weight = np.zeros(xs.shape), np.zeros(xs.shape)
    for n, r, x, share, w, winners in per_group:
        told = xs >= r
        ecdf = share + (1.0 - share) * np.searchsorted(x, xs, side="right") / len(x)
        total += np.where(told, w * (ecdf ** (1.0 / n) if winners else ecdf), 0.0)
        weight += np.where(told, w, 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        return xs, np.maximum.accumulate(np.where(weight > 0, total / np.maximum(weight, 1.0), 0.0))


def winners_to_cdf(rec):
    """(values, F at them) from winning bids: each auction's pseudo-value is its winner's value,
    the highest of n, whose cdf is F^n; so F = (the winners' cdf)^(1/n), pooled over the bidder
    counts (and reserves) by their numbers of auctions."""
    per_group, width, falls = [], [], 0
    for n, r, bids, share, auctions in _groups(rec):
        xi, h = _pseudo_values(bids, n, True, share, rec.alpha)
        falls += int(np.sum(np.diff(xi[np.argsort(bids, kind="stable")]) < 0))
        per_group.append((n, r, np.sort(xi), share, auctions, True))
        width.append(h)
    xs, cdf = _pooled_cdf(per_group)
    return xs, cdf, float(np.mean(width)), falls


def bids_to_values(rec, thin=True):
    """Pseudo-values from every bid (GPV 2000), per bidder count and reserve; ``thin`` keeps at
    most MAX_POINTS of them (evenly spaced order statistics) for the model. Under a binding
    reserve, ``cdf`` is F at the values pooled over the groups (``_pooled_cdf``): the bids say
    nothing of values below the reserve beyond their share F(r)."""
    out, widths, falls, per_group = [], [], 0, []
    for n, r, bids, share, auctions in _groups(rec):
        xi, h = _pseudo_values(bids, n, False, share, rec.alpha)
        order = np.argsort(bids, kind="stable")
        falls += int(np.sum(np.diff(xi[order]) < 0))
        out.append(xi)
        widths.append(h)
        per_group.append((n, r, np.sort(xi), share, auctions, False))
    values = np.sort(np.concatenate(out))
    cdf = _pooled_cdf(per_group) if np.isfinite(rec.reserve).any() else None
    if thin and len(values) > MAX_POINTS:
        values = values[np.unique(np.linspace(0, len(values) - 1, MAX_POINTS).round().astype(int))]
    return Inversion(values, float(np.mean(widths)), falls, "guerre_perrigne_vuong", cdf)
