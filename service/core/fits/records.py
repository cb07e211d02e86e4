"""Past auctions as arrays, in the forward vocabulary.

A reverse auction's records (costs, the lowest wins, a maximum price) are reflected once
here, x -> -x, into their forward twin: the price is then the second-highest twin value
and the reserve a floor, and a cost model C is fitted as the forward model of -C
(``models.Reflected``), exactly as every other report reflects a reverse case.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cached_property

import numpy as np

from ..errors import ParameterError

#: The rules whose records can be inverted, and what each record must hold.
PRICE_RULES = ("second_price", "ascending")
BID_RULES = ("first_price",)


@dataclass(frozen=True)
class PriceRecords:
    """Prices of second-price or ascending auctions (forward twin): per auction the count n,
    the reserve r (-inf where none), and the price: above the floor (``above``), at the
    reserve (one bidder cleared it), or none (unsold)."""

    n: np.ndarray
    reserve: np.ndarray
    price: np.ndarray  # nan where unsold
    above: np.ndarray  # sold at a price above the reserve (the second-highest value)
    at_reserve: np.ndarray  # sold at the reserve (one bidder above it)
    unsold: np.ndarray

    def take(self, idx):
        """The records at positions ``idx`` (a bootstrap resample of whole auctions)."""
        return PriceRecords(*(a[idx] for a in (self.n, self.reserve, self.price, self.above, self.at_reserve, self.unsold)))

    @property
    def observed(self):
        """Every price that was paid, as a flat array (forward twin)."""
        return self.price[~self.unsold]

    @property
    def start_values(self):
        """The values a fit starts from and pins a support's end to: the prices themselves."""
        return self.observed


@dataclass(frozen=True)
class BidRecords:
    """First-price auctions (forward twin): per auction the count n, the reserve (-inf where
    none) and its bids (every bid, or only the winner's)."""

    n: np.ndarray
    reserve: np.ndarray
    bids: tuple  # one array per auction
    winners_only: bool
    alpha: float = 1.0  # 1 - rho, the bidders' constant relative risk aversion rho as the user gives it

    def take(self, idx):
        return BidRecords(self.n[idx], self.reserve[idx], tuple(self.bids[i] for i in idx), self.winners_only, self.alpha)

    @property
    def observed(self):
        return np.concatenate(self.bids) if self.bids else np.empty(0)

    @cached_property
    def by_group(self):
        """{(n, r): (every bid of those auctions, flat; how many did not bid)}: what the likelihood
        takes per bidder count and reserve. Those who did not bid are the bidders without a bid
        (every bid), or the unsold auctions (winning bids alone)."""
        out = {}
        for key in sorted(set(zip(self.n.tolist(), self.reserve.tolist()))):
            mine = [b for b, n, r in zip(self.bids, self.n, self.reserve) if (n, r) == key]
            absent = sum(len(b) == 0 for b in mine) if self.winners_only else sum(key[0] - len(b) for b in mine)
            out[key] = (np.concatenate(mine), int(absent))
        return out

    @property
    def start_values(self):
        """The values the bids would come from if values were uniform from the lowest bid up,
        v = lo + n (b - lo) / (n - 1) (Krishna, Auction Theory, 2009, ch. 2): where a fit starts,
        and the ends a support parameter is pinned to (the lowest bid, and for uniform values the
        top value that the highest bid needs)."""
        lo = float(np.min(self.observed))
        return np.concatenate([lo + n * (b - lo) / (n - 1.0) for b, n in zip(self.bids, self.n)])


def _kind(rule, auctions):
    """Which observation every record holds: price, bids or winning_bid (one kind per request)."""
    allowed = ("price",) if rule in PRICE_RULES else ("bids", "winning_bid")
    kinds = set()
    for i, a in enumerate(auctions):
        given = [k for k in ("price", "bids", "winning_bid") if a.get(k) is not None]
        if len(given) > 1:
            raise ParameterError(f"auctions.{i}.{given[1]}", f"give one of {', '.join(allowed)}, not both")
        if not a.get("sold", True):
            if given:
                raise ParameterError(f"auctions.{i}.{given[0]}", "an unsold auction has no price or bids")
            continue
        if not given:
            raise ParameterError(f"auctions.{i}.{allowed[0]}", f"required for a sold auction under {rule}: one of {', '.join(allowed)}")
        if given[0] not in allowed:
            raise ParameterError(f"auctions.{i}.{given[0]}", f"not for {rule}: give {' or '.join(allowed)}")
        kinds.add(given[0])
    if len(kinds) > 1:
        raise ParameterError("auctions", "every auction must give the same observation (all bids, or all winning bids)")
    return kinds.pop() if kinds else allowed[0]


def price_records(auctions, direction):
    """``PriceRecords`` from the request's records, checked: a price never below the reserve
    (reverse: above the maximum price), a lone bidder pays the reserve, an unsold auction
    had a reserve."""
    sign = 1.0 if direction == "forward" else -1.0
    n = np.array([a["bidders"] for a in auctions], float)
    reserve = np.array([-math.inf if a.get("reserve") is None else sign * a["reserve"] for a in auctions])
    price = np.array([math.nan if a.get("price") is None else sign * a["price"] for a in auctions])
    unsold = np.array([not a.get("sold", True) for a in auctions])
    word = "reserve" if direction == "forward" else "maximum price"
    for i, a in enumerate(auctions):
        if unsold[i] and a.get("reserve") is None:
            raise ParameterError(f"auctions.{i}.sold", "an auction without a reserve always sells: give its reserve")
        if not unsold[i] and price[i] < reserve[i]:
            raise ParameterError(f"auctions.{i}.price", f"lies {'below the reserve' if sign > 0 else 'above the maximum price'}")
        if not unsold[i] and n[i] == 1 and not price[i] == reserve[i]:
            raise ParameterError(f"auctions.{i}.price", f"a lone bidder pays the {word} itself: give the {word} as the price")
    at_reserve = ~unsold & (price == reserve)
    if np.count_nonzero(~unsold) < 2:
        raise ParameterError("auctions", "at least 2 sold auctions are needed: unsold ones say only that no value beat the reserve")
    return PriceRecords(n, reserve, price, ~unsold & ~at_reserve, at_reserve, unsold)


def bid_records(auctions, direction, kind, alpha=1.0):
    """``BidRecords`` from the request's records: every bid (a list as long as ``bidders``) or
    the winner's alone, at or above the reserve (reverse: at or below the maximum price). Under a
    reserve ``bidders`` counts those who could bid, and ``bids`` holds the bids made: the others'
    values lay below the reserve; an unsold auction (no bid) says that all of them did."""
    sign = 1.0 if direction == "forward" else -1.0
    bids, n, reserve = [], [], []
    word = "reserve" if sign > 0 else "maximum price"
    for i, a in enumerate(auctions):
        r = -math.inf if a.get("reserve") is None else sign * a["reserve"]
        if a["bidders"] < 2:
            raise ParameterError(f"auctions.{i}.bidders", "a first-price bid says nothing of values without a rival: at least 2")
        if not a.get("sold", True):
            if a.get("reserve") is None:
                raise ParameterError(f"auctions.{i}.sold", "an auction without a reserve always sells: give its reserve")
            b = np.empty(0)
        else:
            b = sign * np.asarray(a["bids"] if kind == "bids" else [a["winning_bid"]], float)
        if kind == "bids" and a.get("sold", True) and a.get("reserve") is None and len(b) != a["bidders"]:
            raise ParameterError(f"auctions.{i}.bids", f"has {len(b)} bids; bidders says {a['bidders']} (without a "
                                                       f"{word}, every bidder bids)")
        if kind == "bids" and len(b) > a["bidders"]:
            raise ParameterError(f"auctions.{i}.bids", f"has {len(b)} bids; bidders says {a['bidders']}")
        if np.any(b < r):
            raise ParameterError(f"auctions.{i}.{kind}", "a bid lies " + ("below the reserve" if sign > 0 else "above the maximum price"))
        bids.append(b)
        n.append(float(a["bidders"]))
        reserve.append(r)
    if sum(len(b) > 0 for b in bids) < 2:
        raise ParameterError("auctions", "at least 2 sold auctions are needed")
    return BidRecords(np.array(n), np.array(reserve), tuple(bids), kind == "winning_bid", alpha)


def records(rule, direction, auctions, risk_aversion=0.0):
    """The request's auctions as ``PriceRecords`` or ``BidRecords`` (forward twin); first-price
    bids carry the bidders' risk aversion as given (it is not learnt from them)."""
    kind = _kind(rule, auctions)
    if kind == "price":
        return price_records(auctions, direction)
    return bid_records(auctions, direction, kind, 1.0 - risk_aversion)
