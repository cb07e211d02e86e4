"""One auction, computed in the forward vocabulary: n symmetric bidders with values from a
value model, the highest wins, a reserve may bind.

A reverse auction (a buyer, costs C, the lowest wins) is the forward auction of X = -C
with reserve -max_price and seller value -buyer_value: :func:`forward_case` reflects it
once, where a report begins. What every rule's figures share is here: the floor, the
chance of a sale, the price when at most one bidder can beat the floor, the ranks'
quadratures and closed forms. The equilibrium bids are :mod:`bids`; each rule's revenue
route is :mod:`revenue`; the price's spread and quantiles :mod:`price`; surpluses and
efficiency :mod:`gains`.
"""
from __future__ import annotations

import math

import numpy as np

from . import orderstats as os_
from .bidders import Bidders
from .errors import ParameterError
from .models import Reflected

#: Below this chance that one value beats the reserve, the rank quadratures' windows
#: (which stop at s = 1e-300) cannot hold the weight below the cut; the price is then the
#: reserve under every rule, to double precision (the next term is smaller by that chance).
FAR_RESERVE = 1e-250


def neg_log_cdf(model, x):
    """-log F(x) at one value, as a float."""
    return float(model.neg_log_cdf(np.array(x, float)))


def forward_case(model, direction, reserve, own_value):
    """Reflect a reverse case into its forward twin: X = -C (the model, the reserve and the
    auctioneer's own value); a forward case as it is."""
    if direction == "forward":
        return model, reserve, own_value
    return Reflected(model), None if reserve is None else -reserve, None if own_value is None else -own_value


class ForwardAuction:
    """``bidders`` (a count or :class:`Bidders`) symmetric bidders with values from ``model``;
    ``reserve`` may be None; ``seller_value`` is the auctioneer's own value (None: not given);
    ``risk_aversion`` is the bidders' constant relative risk aversion rho (utility x^(1 - rho))."""

    def __init__(self, model, bidders, reserve=None, seller_value=0.0, risk_aversion=0.0):
        if model.discrete:
            raise ParameterError("smoothing", "equilibrium bidding needs a continuous value model; use smoothing: kernel")
        self.bidders = Bidders.of(bidders)
        self.model, self.n = model, self.bidders.n
        self.risk_aversion = float(risk_aversion)
        # The first-price bids' exponent: b' = (n - 1)/alpha (f/F)(v - b), alpha = 1 - rho (the
        # first-order condition of F(z)^(n-1) (v - b(z))^alpha), so b(v) = v - int_r^v (F(x)/F(v))^k dx
        # with k = (n - 1)/alpha: the risk-neutral bid against k rivals (Riley and Samuelson 1981;
        # Maskin and Riley 1984; Krishna 2009, ch. 4).
        self.bid_rivals = self.bidders.rivals / (1.0 - self.risk_aversion) if self.n >= 1 else 0.0
        self.reserve = None if reserve is None else float(reserve)
        self.v0 = seller_value
        # The effective floor: the reserve, or the bottom of the support.
        self.floor = model.lower if reserve is None else max(self.reserve, model.lower)
        # A lone bidder has no rival to beat and pays the reserve itself, even one below
        # the support; without a reserve, the bottom of the support.
        self.lone_price = model.lower if reserve is None else self.reserve
        self.reserve_binds = reserve is not None and self.reserve > model.lower
        self.s_r = neg_log_cdf(model, self.floor) if self.reserve_binds else math.inf
        self.f_r = math.exp(-self.s_r) if self.reserve_binds else 0.0  # F(floor)
        self.p_sale = self.bidders.p_sale(self.s_r)
        # The price under every rule when at most one bidder can be above the floor: a lone
        # bidder, or a reserve so near the top that each value beats it with chance below
        # FAR_RESERVE (two beat it with chance below its square, far below rounding); None otherwise.
        self.single_price = self.lone_price if self.bidders.lone else self.floor if 0.0 < self.s_r < FAR_RESERVE else None
        self._bids = None
        self._quadratures = {}
        self._closed = {}
        self.kept = {}  # figures several rules ask for, computed once per auction

    @property
    def bids(self):
        """The first-price equilibrium bids (:class:`bids.EquilibriumBids`), built on first use."""
        if self._bids is None:
            from .bids import EquilibriumBids  # bids.py builds on this module

            self._bids = EquilibriumBids(self)
        return self._bids

    def power(self, n, r):
        """The power of the values a rank-r-of-n integrand reaches: 2 where the variance exists, else 1."""
        return 2 if os_.moment_exists(self.model, n, r, 2) else 1

    def quadrature(self, rank):
        """The rank-th highest value's filled quadrature over values at or above the floor."""
        if rank not in self._quadratures:
            self._quadratures[rank] = os_.filled_rank_quadrature(self.model, self.n, rank, s_cut=self.s_r,
                                                                 power=self.power(self.n, rank), checked=True)
        return self._quadratures[rank]

    def closed_moments(self, rank):
        """(mean, variance) of the rank-th highest value where the family has them in closed
        form and no reserve binds (the price is then that value itself), else None."""
        if rank not in self._closed:
            self._closed[rank] = None if self.reserve_binds else self.model.closed_rank_moments(self.n, rank)
        return self._closed[rank]

    def win_chance(self, s):
        """F^(n-1) at F = e^-s (array; 1 for a lone bidder): the chance to beat every rival."""
        s = np.asarray(s, float)
        return np.ones(s.shape) if self.n == 1 else np.exp(-self.bidders.rivals * s)

    #: The chance that a lone bidder buys at its own price (``lone_price``), apart from the floor: 0 for a
    #: certain count (a lone bidder's case is ``single_price``'s); an uncertain count's is its own.
    lone_buys = 0.0

    def second_sf(self, x):
        """P(X2 > x), the second-highest value's survival (the ascending clock's price)."""
        return os_.rank_sf(self.model, self.n, 2, x)

    def second_cdf(self, x):
        """P(X2 <= x)."""
        return os_.rank_cdf(self.model, self.n, 2, x)

    def second_quantiles(self, ps):
        """The second-highest value's quantiles."""
        return os_.rank_quantiles(self.model, self.n, 2, ps)

    @property
    def second_lower_index(self):
        """The lower tail index of the second-highest value, (n - 1) a_low."""
        return (self.n - 1.0) * self.model.lower_tail_index

    def sale_atoms(self):
        """The second-price price max(X2, r) on a sale has atoms: P(no sale) and P(price = r)."""
        n, fr = self.n, self.f_r
        above = -math.expm1(-self.s_r) if self.reserve_binds else 0.0  # 1 - F(r), whose digits 1 - fr loses near the top
        return fr**n, n * fr ** (n - 1) * above
