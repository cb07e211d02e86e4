"""Past auctions drawn from a value model (forward twin), for the parametric bootstrap of the
fit check: the same bidder counts and reserves as the records, fresh values."""
from __future__ import annotations

import numpy as np

from ..auction import ForwardAuction
from .records import BidRecords, PriceRecords


def draw_values(model, n, rng):
    """n values from ``model`` by its quantile function at uniform draws."""
    u = rng.random(n)
    return model.value_at(u, 1.0 - u)


def price_records_like(model, rec, rng):
    """``PriceRecords`` with rec's counts and reserves and prices from fresh values: the
    second-highest value above the reserve, the reserve when one value alone clears it,
    none when no value does."""
    price = np.full(rec.n.shape, np.nan)
    above = np.zeros(rec.n.shape, bool)
    at_reserve = np.zeros(rec.n.shape, bool)
    for n in np.unique(rec.n):
        rows = np.nonzero(rec.n == n)[0]
        k = int(n)
        v = np.sort(draw_values(model, len(rows) * k, rng).reshape(len(rows), k), axis=1)
        top, second = v[:, -1], (v[:, -2] if k > 1 else np.full(len(rows), -np.inf))
        r = rec.reserve[rows]
        sold = top >= r
        over = sold & (second > r)
        price[rows] = np.where(over, second, np.where(sold, r, np.nan))
        above[rows], at_reserve[rows] = over, sold & ~over
    return PriceRecords(rec.n, rec.reserve, price, above, at_reserve, ~(above | at_reserve))


def bid_records_like(model, rec, rng):
    """``BidRecords`` with rec's counts and reserves and fresh values bid at the symmetric
    first-price equilibrium (every bid, or the winner's alone, as rec holds); under a reserve only
    the values at or above it bid, and an auction where none is goes unsold."""
    bids = [None] * len(rec.n)
    for n, r in set(zip(rec.n.tolist(), rec.reserve.tolist())):
        rows = np.nonzero((rec.n == n) & (rec.reserve == r))[0]
        k = int(n)
        v = draw_values(model, len(rows) * k, rng).reshape(len(rows), k)
        b = ForwardAuction(model, k, None if np.isinf(r) else r).bids.at_s(model.neg_log_cdf(v))
        for i, row in enumerate(rows):
            made = b[i][v[i] >= r]
            bids[row] = made.max(keepdims=True) if rec.winners_only and len(made) else made
    return BidRecords(rec.n, rec.reserve, tuple(bids), rec.winners_only)


def records_like(model, rec, rng):
    """Records like rec (prices or bids) from fresh values under a forward-twin model."""
    return bid_records_like(model, rec, rng) if isinstance(rec, BidRecords) else price_records_like(model, rec, rng)
