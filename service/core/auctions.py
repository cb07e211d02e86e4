"""Auction rules under independent private values: revenue, its risk, the
symmetric-equilibrium bids and the optimal reserve.

Everything is computed for a forward auction (a seller, values X, the highest
bidder wins). A reverse auction (a buyer, costs C, the lowest bidder wins) is
the forward auction of X = -C with reserve -max_price and seller value
-buyer_value; :func:`revenue_report` and friends do that reflection.

Each rule's expected revenue comes by its own route, so that their agreement
(revenue equivalence: Myerson 1981; Riley and Samuelson 1981) is a real check:

* second_price: quantile-space integral over the second-highest value.
* ascending: value-space integral of the clock price's survival function.
* first_price: the equilibrium bid b(v) = E[max(Y, r) | Y < v] (Y the highest
  of the other n-1 values; Krishna, Auction Theory, 2nd ed., 2009, ch. 2),
  integrated over the highest value.
* descending: the same bids (strategically first-price), with the clock price
  integrated by parts through the equilibrium equation b' = (n-1)(f/F)(v-b).
* all_pay: each bidder's bid a(v) = F(v)^(n-1) b(v), summed over n bidders.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import optimize

from . import audit, budget
from . import orderstats as os_
from . import rules as R
from .errors import ParameterError
from .models import Reflected
from .topvalues import finite

_COMMON_ASSUMPTIONS = [
    "symmetric, risk-neutral bidders",
    "symmetric equilibrium play (truthful bidding where it is dominant)",
    "a single indivisible item or contract, no entry costs, no collusion",
]
#: The assumptions under which the figures hold, in the caller's direction.
ASSUMPTIONS = {
    "forward": ["independent private values drawn from the stated value model", *_COMMON_ASSUMPTIONS],
    "reverse": ["independent private costs drawn from the stated cost model", *_COMMON_ASSUMPTIONS],
}
_GL = os_.GAUSS_RULES
#: Below this chance that one value beats the reserve, the rank quadratures' windows
#: (which stop at s = 1e-300) cannot hold the weight below the cut; the price is then the
#: reserve under every rule, to double precision (the next term is smaller by that chance).
FAR_RESERVE = 1e-250


# M[q, j] = integral from node q to the panel end of the j-th Lagrange basis polynomial,
# per rule, laid out transposed as one block-diagonal matrix for both rules side by side.
_TAIL_BOTH = np.zeros((len(os_.BOTH_NODES),) * 2)
for _i, (_x, _) in enumerate(_GL):
    _block = slice(0, os_.RULE_SPLIT) if _i == 0 else slice(os_.RULE_SPLIT, None)
    _TAIL_BOTH[_block, _block] = (os_.partial_panel_weights(1.0, _i) - os_.partial_panel_weights(_x, _i)).T
_P_EDGES = np.array([1e-15, 1e-12, 1e-9, 1e-6, 1e-4, 1e-3, 0.01, 0.03, 0.1, 0.2, 0.35, 0.5,
                     0.65, 0.8, 0.9, 0.97, 0.99, 0.999, 1 - 1e-4, 1 - 1e-6, 1 - 1e-9, 1 - 1e-12, 1 - 1e-15])


def _discounted_tails(panel, w, end):
    """d with d[P] = end and d[i] = e^-(w[i+1] - w[i]) (panel[i] + d[i+1]) for the P
    panels between edges w (increasing): every factor is at most 1, so nothing
    overflows. A plain loop over Python floats: P is a few dozen."""
    shrink, panel = np.exp(w[:-1] - w[1:]).tolist(), panel.tolist()
    d = [0.0] * len(shrink) + [end]
    for i in range(len(shrink) - 1, -1, -1):
        d[i] = shrink[i] * (panel[i] + d[i + 1])
    return np.array(d)


#: Where the highest value has no mean, the bid nodes stop at this value (see ``share_beyond_reach``).
_TOP_VALUE = 1e300
#: A bid route's figure whose integrand has more than this share beyond the nodes is null.
_UNREACHED = 1e-12


def _heavy_tail_edges(a, k, s_top):
    """Panel edges (as s = -log F) every 2a in t = log((n-1) s) from the peak up to s_top,
    for a tail of index a <= 1, whose far panels carry the price's moments. There values grow
    as e^(-t/a), so a panel spans a factor e^2 of them and the partial-panel rules behind the
    bids at the nodes (polynomial interpolation, far less exact than a whole panel's Gauss
    sum) keep their digits."""
    t_end = math.log(k * max(s_top, 1e-300))
    return tuple(np.exp(np.arange(-2.0 * a, t_end, -2.0 * a)) / k)


def _neg_log_cdf(model, x):
    return float(model.neg_log_cdf(np.array(x, float)))


class ForwardAuction:
    """n symmetric bidders with values from ``model``; ``reserve`` may be None."""

    def __init__(self, model, bidders, reserve=None, seller_value=0.0):
        if model.discrete:
            raise ParameterError("smoothing", "equilibrium bidding needs a continuous value model; use smoothing: kernel")
        self.model, self.n = model, int(bidders)
        self.reserve = None if reserve is None else float(reserve)
        self.v0 = seller_value
        # The effective floor: the reserve, or the bottom of the support.
        self.floor = model.lower if reserve is None else max(self.reserve, model.lower)
        # A lone bidder has no rival to beat and pays the reserve itself, even one below
        # the support; without a reserve, the bottom of the support.
        self.lone_price = model.lower if reserve is None else self.reserve
        self.origin = self._origin()
        self.reserve_binds = reserve is not None and self.reserve > model.lower
        self.s_r = _neg_log_cdf(model, self.floor) if self.reserve_binds else math.inf
        self.f_r = math.exp(-self.s_r) if self.reserve_binds else 0.0  # F(floor)
        self.p_sale = -math.expm1(-self.n * self.s_r) if math.isfinite(self.s_r) else 1.0
        # The price under every rule when at most one bidder can be above the floor: a lone
        # bidder, or a reserve so near the top that each value beats it with chance below
        # FAR_RESERVE (two beat it with chance below its square, far below rounding); None otherwise.
        self.single_price = self.lone_price if self.n == 1 else self.floor if 0.0 < self.s_r < FAR_RESERVE else None
        self._bid_nodes = None
        self._bid_tails = None
        self._sp_quad = None
        self._node_bid_cache = None
        self._shade = None
        self._bidders_surplus = None
        self._closed = {}

    def _origin(self):
        """Bids are integrated as b(v) - origin, b(v) - o = E[max(Y, r) - o | Y < v]. The origin is
        whichever of the floor, the top of the support and 0 lies nearest the highest rival's
        median, so that bids keep their digits where the rivals' values are: a bid barely above
        a reserve far from zero, or bids just below a top of 0 (the forward twin of costs massed
        near 0)."""
        ends = [x for x in (self.floor, self.model.upper, 0.0) if math.isfinite(x)]
        if self.n == 1:
            return ends[0]
        s = math.log(2.0) / (self.n - 1.0)  # F(y)^(n-1) = 1/2
        mid = float(self.model.value_at(np.array([math.exp(-s)]), np.array([-math.expm1(-s)]))[0])
        if math.isfinite(self.floor):
            mid = max(mid, self.floor)  # only bids above the floor are asked for
        return min(ends, key=lambda x: abs(x - mid)) if math.isfinite(mid) else ends[0]

    def _reserve_mass(self, s_from):
        """(floor - origin) e^(-(n-1)(s_r - s)): the reserve's part of the bid at s, from the origin."""
        if not (math.isfinite(self.s_r) and math.isfinite(self.floor)) or self.floor == self.origin:
            return 0.0
        return (self.floor - self.origin) * math.exp(-(self.n - 1.0) * (self.s_r - s_from))

    # ---- shared pieces -----------------------------------------------------
    def _power(self, n, r):
        """The power of the values a rank-r-of-n integrand reaches: 2 where the variance exists, else 1."""
        return 2 if os_.moment_exists(self.model, n, r, 2) else 1

    def _growth(self, n, r):
        """Tail reach for a rank-r-of-n integrand: x^2 where the variance exists, else x."""
        return os_.tail_growth(self.model, self._power(n, r))

    def _bid_growth(self):
        """Tail reach for the bid nodes' integrands: that of the highest value where its
        mean exists; otherwise that of the price b^p, b growing as v^(1 - a) (see
        ``price_moment_exists``)."""
        up, low = self._growth(self.n - 1, 1)
        a = self.model.upper_tail_index
        if a <= 1.0:
            up = (2.0 if price_moment_exists(self.model, self.n, "first_price", 2, self.floor) else 1.0) * (1.0 - a) / a
        return up, low

    # ---- first-price bids ----------------------------------------------------
    def _inner_quadrature(self):
        """Panels for the highest of the other n-1 values, cut at the reserve."""
        if self._bid_nodes is None:
            up, low = self._bid_growth()
            # where the highest value has no mean, the panels reach no further than values of 1e300
            a, k = self.model.upper_tail_index, self.n - 1.0
            s_top, splits = 0.0, ()
            if a <= 1.0:  # the bids' own tail matters: see ``_heavy_tail_edges``
                s_top = _neg_log_cdf(self.model, _TOP_VALUE)
                splits = _heavy_tail_edges(a, k, s_top)
            q = os_.rank_quadrature(self.n - 1, 1, kinks_u=self.model.kinks_u(), s_cut=self.s_r, upper_growth=up,
                                    lower_growth=low, fine=True, s_top=s_top, splits_s=splits, model=self.model,
                                    power=self._power(self.n - 1, 1), checked=True)
            q.fill(self.model, conditional=True, floor=0.0 if a <= 1.0 else 1e-12)
            self._bid_nodes = q
        return self._bid_nodes

    def share_beyond_reach(self, p):
        """An estimate of the share of E[|b(X1)|^p] from values above the bid nodes' top edge
        x_T: 0 where the highest value has a mean (the panels reach as far as its integrand
        needs); else, with b(v) ~ c v^(1 - a) there (see ``price_moment_exists``) and
        P(X1 > x) ~ n S(x), |b(x_T)|^p P(X1 > x_T) a / (a - p (1 - a)), over the nodes'
        integral. Near a moment's threshold the tail beyond 1e300 carries a real share."""
        a = self.model.upper_tail_index
        if a > 1.0 or self.node_bids().bids.size == 0:
            return 0.0
        nb = self.node_bids()
        if p * (1.0 - a) >= a:
            return math.inf
        top_mass = -math.expm1(-self.n * self._bid_tail().nodes.se[0])
        tail = abs(nb.bids[0, 0]) ** p * top_mass * a / (a - p * (1.0 - a))
        return tail / float(nb.integrals(nb.top * np.abs(nb.bids) ** p)[0])

    def _bid_tail(self):
        """The inner quadrature's nodes with the pieces of the bid integral, as
        :class:`BidTail`. Computed once per auction."""
        if self._bid_tails is not None:
            return self._bid_tails
        q = self._inner_quadrature()
        nodes = q.kept(("bid_nodes", self.n), lambda: _bid_nodes(q, self.n))
        d, g = self._conditional_tails(nodes, q.values - self.origin, self.floor - self.origin)
        self._bid_tails = BidTail(nodes, q.values, d, g)
        return self._bid_tails

    def _conditional_tails(self, nodes, h, end_value):
        """For node values h of a function of s: per rule, d[k] = the integral of
        h (n-1) e^(-(n-1)(s - s_k)) ds from edge k to the reserve, plus end_value times
        e^(-(n-1)(s_r - s_k)) (the bids: h the values less the origin, end_value the floor less
        it), by the panel recurrence; and the integrand g, shifted to each panel's right edge."""
        k = self.n - 1.0
        g = h * nodes.k_s_growth
        end_mass = 0.0
        if math.isfinite(self.s_r) and math.isfinite(end_value) and end_value != 0.0 and len(nodes.se):
            end_mass = end_value * math.exp(-k * (self.s_r - nodes.se[-1]))
        panels = (nodes.dt * g) @ os_.RULE_COLUMNS
        return np.array([_discounted_tails(panels[:, i], k * nodes.se, end_mass) for i in (0, 1)]), g

    def _partial(self, s_q, s_end):
        """Integral of (v - origin) (n-1) e^(-(n-1)(s - s_q)) ds over [s_q, s_end], standalone."""
        k = self.n - 1.0
        w_end = min(k * (s_end - s_q), 80.0)
        if not w_end > 0:
            return 0.0
        m = self.model
        edges = [0.0, *[x for x in (0.5, 1.5, 3.0, 5.5, 9.0, 14.0, 21.0, 30.0, 42.0, 58.0, 80.0) if x < w_end], w_end]
        for uk in m.kinks_u():
            wk = k * (-math.log(uk) - s_q)
            if 0.0 < wk < w_end:
                edges.append(wk)
        edges = np.unique(edges)
        (x, w) = _GL[0]
        a, b = edges[:-1], edges[1:]
        half, mid = 0.5 * (b - a), 0.5 * (b + a)
        wp = (mid[:, None] + half[:, None] * x).ravel()
        ww = (half[:, None] * w).ravel() * np.exp(-wp)
        s = s_q + wp / k
        vals = m.value_at(np.exp(-s), -np.expm1(-s))
        return float(np.dot(ww, vals - self.origin))

    def bids_at_s(self, s_q):
        """First-price equilibrium bids at values with -log F(v) = s_q (array): the floor
        at and below it (b(r) = r), where the value model has no mass above the floor too."""
        s_q = np.asarray(s_q, float)
        if self.n == 1:
            return np.full(s_q.shape, self.lone_price)
        flat = s_q.ravel()
        res = np.full(flat.shape, math.nan)
        res[flat >= self.s_r] = self.floor  # comparisons with NaN are False and do not warn
        above = flat < self.s_r
        if above.any():
            res[above] = self._bids_above_floor(flat[above])
        return res.reshape(s_q.shape)

    def _bids_above_floor(self, flat):
        """Bids at values above the floor, s = -log F(v) < s_r (a flat array)."""
        k = self.n - 1.0
        q = self._inner_quadrature()
        tail = self._bid_tail()
        edges, se, d = tail.nodes.edges, tail.nodes.se, tail.d[0]
        res = np.full(flat.shape, math.nan)
        on_panels = np.zeros(flat.shape, bool)
        if q.panels:
            # The panel recurrence is exact out to the cut when the panels reach it; where they
            # stop short (the weight is negligible there), only bids 36 e-folds inside can use it.
            ends_at_cut = math.isfinite(self.s_r) and se[-1] >= self.s_r * (1.0 - 1e-12)
            reach = math.inf if ends_at_cut else k * se[-1] - 36.0
            on_panels = (se[0] <= flat) & (flat <= se[-1]) & (k * flat <= reach)
        if on_panels.any():
            # Within the panels: the node's partial panel, then the recurrence from its right edge.
            sq = flat[on_panels]
            j = np.minimum(np.searchsorted(se, sq, side="right") - 1, len(se) - 2)
            part = self._sub_integral(np.log(k * sq), edges[j + 1])
            res[on_panels] = self.origin + part + np.exp(-k * (se[j + 1] - sq)) * d[j + 1]
        for i in np.nonzero(~on_panels)[0]:
            sq = flat[i]
            if q.panels and sq < se[0]:
                res[i] = self.origin + self._partial(sq, se[0]) + math.exp(-k * (se[0] - sq)) * d[0]
            else:
                end = self.s_r if math.isfinite(self.s_r) else sq + 80.0 / k
                res[i] = self.origin + self._partial(sq, end) + self._reserve_mass(sq)
        return res

    def _sub_integral(self, t_q, t_end):
        """Integral of (v - origin) (n-1) s e^(-(n-1)(s - s_q)) dt over [t_q, t_end] (arrays),
        each by one 24-node Gauss-Legendre rule."""
        k = self.n - 1.0
        xs, ws = _GL[0]
        hh = 0.5 * (t_end - t_q)
        tt = (0.5 * (t_end + t_q))[..., None] + hh[..., None] * xs
        ss = np.exp(tt) / k
        vv = self.model.value_at(np.exp(-ss), -np.expm1(-ss))
        sq = (np.exp(t_q) / k)[..., None]
        return (hh[..., None] * ws * (vv - self.origin) * k * ss * np.exp(-k * (ss - sq))).sum(axis=-1)

    def node_bids(self):
        """The inner quadrature's nodes with the bids there (bids by the panel
        recurrence plus the node's partial panel), as :class:`NodeBids`."""
        if self._node_bid_cache is not None:
            return self._node_bid_cache
        tail = self._bid_tail()
        nodes = tail.nodes
        bids = self.origin + _at_nodes(nodes, tail.d, tail.g)
        # An equilibrium bid lies between the floor and the value; far out in the
        # tail, where the weights are negligible, rounding could break that.
        vals = tail.values
        bids = np.minimum(np.maximum(bids, self.floor if math.isfinite(self.floor) else np.min(vals)), vals)
        self._node_bid_cache = NodeBids(nodes.t, nodes.dt, vals, nodes.s, bids, nodes.rivals, nodes.one, nodes.top,
                                        nodes.rule_dt)
        return self._node_bid_cache

    def node_shade(self):
        """v - b(v) at the bid nodes, laid out as ``node_bids`` (see ``_shading``)."""
        return self._shading()[0]

    def node_bid_offsets(self):
        """(ref, b(v) - ref) at the bid nodes, ref the inner quadrature's reference anchor
        (``RankQuadrature.offsets``): (v - ref) - (v - b(v)) where the shading is small beside
        v, so that a bid's spread keeps its digits wherever the values sit; b(v) - ref itself
        where it is not (see ``_shading``)."""
        return self._shading()[1]

    def _shading(self):
        """(v - b(v), (ref, b(v) - ref)) at the bid nodes. By parts, b(v) = v - int_r^v G(y) /
        G(v) dy, G = F^(n-1) (Krishna 2009, ch. 2), and in s = -log F the shading is
        int u Q'(u) e^(-(n-1)(s - s_v)) ds from s_v to s_r: the bids' own recurrence with
        u Q'(u) / (n-1) for the values and 0 at the floor. Integrated so, it keeps its digits
        where it is tiny beside v. Where it is not (above 1e-3 of |v| + |b|, where the
        difference keeps all but a few digits), where it is not small on the whole (its
        mean above 1e-3 of the values', so that no figure hangs on its digits), and for a
        model without a precise S / f (``ValueModel.inverse_hazard``), v - b(v) node by node: in a heavy upper tail u Q'(u)
        climbs too steeply across the wide far panels for their polynomial rules."""
        if self._shade is None:
            q, nb = self._inner_quadrature(), self.node_bids()
            ref = q.offsets()[0] if np.ndim(q.anchor) == 0 else None
            ref, o = (ref, None) if ref is not None else q.offsets()
            shade, bid_off = nb.values - nb.bids, nb.bids - ref
            small = shade < 1e-3 * (np.abs(nb.values) + np.abs(nb.bids))
            # only where the shading is small beside the values on the whole do its digits matter
            near = nb.integrals(nb.top * shade)[0] < 1e-3 * nb.integrals(nb.top * np.abs(nb.values))[0]
            ih = self.model.inverse_hazard(q.u, q.v, q.anchor, q.delta) if near else None
            if ih is not None:
                nodes = self._bid_tail().nodes
                with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
                    d, g = self._conditional_tails(nodes, q.u / q.v * ih / (self.n - 1.0), 0.0)
                    direct = np.maximum(_at_nodes(nodes, d, g), 0.0)
                small &= np.isfinite(direct)
                o = q.offsets()[1] if o is None else o
                shade, bid_off = np.where(small, direct, shade), np.where(small, o - direct, bid_off)
            self._shade = shade, (ref, bid_off)
        return self._shade


def _at_nodes(nodes, d, g):
    """The recurrence's integrals at the nodes: g integrated spectrally from every node to
    its panel's right end (no new value evaluations), plus each rule's tail beyond,
    shifted back to the node."""
    return (nodes.half * (g @ _TAIL_BOTH) + d[:, 1:].T @ os_.RULE_COLUMNS.T) / nodes.growth


@dataclass(frozen=True)
class BidNodes:
    """What the bid route needs of the inner quadrature's nodes (both Gauss rules side
    by side, as in ``RankQuadrature.stacked``) that depends on those nodes and n alone,
    never on the model's values; so it is kept with the rule (``RankQuadrature.kept``)."""

    edges: np.ndarray  # t at the panel edges
    se: np.ndarray  # s = -log F at the panel edges
    half: np.ndarray  # (panels, 1): half of each panel's width in t
    t: np.ndarray
    dt: np.ndarray
    s: np.ndarray
    growth: np.ndarray  # e^((n-1)(se_right - s)): the shift of the bid integrand to the panel's right edge
    k_s_growth: np.ndarray  # (n-1) s growth: the bid integrand per unit value
    rivals: np.ndarray  # F^(n-1)
    one: np.ndarray  # one bidder's value density per unit t
    top: np.ndarray  # the highest of n values' density per unit t
    rule_dt: np.ndarray  # (nodes, 2): dt in each rule's column


def _bid_nodes(q, n):
    k = n - 1.0
    edges = np.append(q.a, q.b[-1]) if q.panels else np.empty(0)
    se = np.exp(edges) / k
    t, dt, _ = q.stacked()
    s = np.exp(t) / k
    growth = np.exp(k * (se[1:, None] - s))
    rivals = np.exp(-k * s)
    one = np.exp(-s) * s
    rule_dt = dt.reshape(-1, 1) * np.tile(os_.RULE_COLUMNS, (q.panels, 1))
    return BidNodes(edges, se, 0.5 * (q.b - q.a)[:, None], t, dt, s, growth, k * s * growth, rivals, one, n * rivals * one, rule_dt)


@dataclass(frozen=True)
class BidTail:
    """The inner quadrature's nodes with the model's values there and the panel
    recurrence of the bid integral."""

    nodes: BidNodes
    values: np.ndarray  # the model's values at the nodes
    d: np.ndarray  # (2, panels + 1): per rule, the integral of (v - origin) (n-1) e^(-(n-1)(s - s_k)) ds from edge k to the reserve
    g: np.ndarray  # (v - origin) (n-1) s e^(-(n-1)(s - se_right)): shifted to the panel's right edge, so nothing overflows


@dataclass(frozen=True)
class NodeBids:
    """Both Gauss rules' nodes in t for the highest rival value (side by side, the
    24-node rule first), with what the bid integrals need there; every density is
    per unit t, so each rule's sum of dt * density * h is E[h]."""

    t: np.ndarray
    dt: np.ndarray
    values: np.ndarray
    s: np.ndarray  # -log F at the node's value
    bids: np.ndarray  # the first-price equilibrium bid b(v)
    rivals: np.ndarray  # F(v)^(n-1): the chance that v beats every rival
    one: np.ndarray  # one bidder's value density
    top: np.ndarray  # the highest of the n values' density, n F^(n-1) times one
    rule_dt: np.ndarray  # (nodes, 2): dt in each rule's column

    def integrals(self, h):
        """Sum of dt * h over the nodes, by the 24-node and by the 16-node rule."""
        return h.reshape(-1) @ self.rule_dt

    def first_rule(self, a):
        """The 24-node rule's columns of a node array, flattened."""
        return a[:, :os_.RULE_SPLIT].ravel()


def _quad_cut(auc, rank):
    """Filled rank quadrature over values >= the floor."""
    up, low = auc._growth(auc.n, rank)
    return os_.rank_quadrature(auc.n, rank, kinks_u=auc.model.kinks_u(), s_cut=auc.s_r, upper_growth=up, lower_growth=low,
                               model=auc.model, power=auc._power(auc.n, rank), checked=True).fill(auc.model)


def _closed_moments(auc, rank):
    """(mean, variance) of the rank-th highest value where the family has them in
    closed form and no reserve binds (the price is then that value itself), else None.
    Asked by several rules' figures, so kept on the auction."""
    if rank not in auc._closed:
        closed = getattr(auc.model, "closed_rank_moments", None)
        auc._closed[rank] = None if closed is None or auc.reserve_binds else closed(auc.n, rank)
    return auc._closed[rank]


def _second_price_atoms(auc):
    """The price max(X2, r) on a sale has atoms: P(no sale) and P(price = r)."""
    n, fr = auc.n, auc.f_r
    above = -math.expm1(-auc.s_r) if auc.reserve_binds else 0.0  # 1 - F(r), whose digits 1 - fr loses near the top
    return fr**n, n * fr ** (n - 1) * above


def _second_price_quadrature(auc):
    """The price's continuous part: the second-highest value's quadrature above r."""
    if auc._sp_quad is None:
        auc._sp_quad = _quad_cut(auc, 2)
    return auc._sp_quad


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
    closed = _closed_moments(auc, 2)
    if closed is not None and closed[1] is not None:
        sd = math.sqrt(max(closed[1], 0.0))
        return sd, os_.closed_form_error(auc.model, auc.n, closed[0], sd)
    _, pr = _second_price_atoms(auc)
    q = _second_price_quadrature(auc)
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


def _with_no_sale(auc, ps, sale_quantile, sale_cdf_at_zero):
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
    p0, pr = _second_price_atoms(auc)
    n, m = auc.n, auc.model

    def sale_quantile(q):
        # P(sale, price <= x) = P(X2 <= x) - p0 above the floor, with an atom pr at the floor.
        x2 = os_.rank_quantiles(m, n, 2, np.minimum(q + p0, 1.0))
        return np.where(q <= pr, auc.floor, x2)

    def sale_cdf_at_zero():
        return float(os_.rank_cdf(m, n, 2, np.array(0.0))) - p0

    return _with_no_sale(auc, ps, sale_quantile, sale_cdf_at_zero)


def second_price_revenue(auc):
    """E[max(X2, r) 1{X1 >= r}]: in closed form where the family has it and no
    reserve binds, else in quantile space over the second-highest."""
    closed = _closed_moments(auc, 2)
    if closed is not None:
        return closed[0], os_.closed_form_error(auc.model, auc.n, closed[0])
    _, pr = _second_price_atoms(auc)
    q = _second_price_quadrature(auc)
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
        total, err, _, _ = _clock_integral(auc, _widened(np.unique(np.concatenate((edges, far)))), split)
    return total, err


def _from_top(auc):
    """Whether the clock price lies nearer the top of a bounded support than the floor: then
    E[price] = top P(sale) - integral of P(price <= x, sale) up to the top keeps the digits of a
    price just below a top of 0 (the forward twin of costs massed near 0), which the integral
    up from a floor of -1 would take as a difference of two numbers near 1."""
    top, floor = auc.model.upper, auc.floor
    if not (math.isfinite(top) and math.isfinite(floor)):
        return False
    mid = float(os_.rank_quantiles(auc.model, auc.n, 2, [0.5])[0])
    return abs(top - mid) < abs(mid - floor)


_FAR_SURVIVAL = 10.0 ** -np.array([20.0, 25, 30, 40, 50, 65, 80, 100, 130, 160, 200, 250, 300])


def _clock_integral(auc, edges, split, from_top=False):
    """(the clock price's mean over the edges, its two-rule error, and bounds on what the
    light tails beyond the edges would add: P(X2 > top) |top| above the last edge and,
    where the support is unbounded below, P(X2 <= bottom) |bottom| below the first)."""
    m, n = auc.model, auc.n

    def sf2(x):
        return os_.rank_sf(m, n, 2, x)

    def cdf2(x):
        return os_.rank_cdf(m, n, 2, x)

    a, b, same_side, log_ratio = _value_spans(edges)
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
    totals = [base + s for s in _refined_value_integral(la, lb, logp, sgn, integrand, abs(base))]
    tail = _power_tails(m, n, edges, sf2, cdf2, split is not None)
    above = below = 0.0  # light tails beyond the end edges: bounds on what they would add
    if not (math.isfinite(m.upper) or math.isfinite(m.upper_tail_index)):
        above = float(sf2(np.array(edges[-1]))) * abs(edges[-1])
    if split is not None and not math.isfinite(m.lower_tail_index):
        below = float(cdf2(np.array(edges[0]))) * abs(edges[0])
    err = abs(totals[0] - totals[1]) + os_.ROUNDING * (abs(base) + abs(totals[0] - base) + abs(tail))
    return totals[0] + tail, err, above, below


def _power_tails(m, n, edges, sf2, cdf2, lower):
    """The clock price's power-law tails beyond the last edges (and, with ``lower``, below
    the first), integrated in closed form: int_T^inf P(X2 > x) dx = T P(X2 > T) / (2a - 1)
    for P(X2 > x) ~ x^-2a, and alike below with index (n - 1) a_low."""
    tail = 0.0
    if math.isfinite(m.upper_tail_index) and not math.isfinite(m.upper):
        top = edges[-1]
        tail += top * float(sf2(np.array(top))) / (2.0 * m.upper_tail_index - 1.0)
    if lower and math.isfinite(m.lower_tail_index):
        bot = edges[0]
        tail -= abs(bot) * float(cdf2(np.array(bot))) / ((n - 1.0) * m.lower_tail_index - 1.0)
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
    m, n, lo_end = auc.model, auc.n, auc.floor
    xs = os_.rank_quantiles(m, n, 2, _P_EDGES)
    edges = np.concatenate((xs, list(m.kink_values()), [lo_end] if math.isfinite(lo_end) else []))
    if math.isfinite(m.upper):
        edges = np.append(edges, m.upper)
    if math.isfinite(lo_end):
        edges = edges[edges >= lo_end]
    edges = np.unique(edges[np.isfinite(edges)])
    split = None if math.isfinite(lo_end) else float(os_.rank_quantiles(m, n, 2, [0.5])[0])
    if split is not None:
        edges = np.unique(np.concatenate((edges, [split], _tail_edges(edges[0], (n - 1.0) * m.lower_tail_index))))
    if not math.isfinite(m.upper):
        edges = np.append(edges, _tail_edges(edges[-1], 2.0 * m.upper_tail_index))
    return _widened(edges), split


def _widened(edges):
    """Edges with every panel spanning more than e^3 on one side of zero cut into pieces."""
    a, b, _, log_ratio = _value_spans(edges)
    wide = np.nonzero(log_ratio > 3.0)[0]
    if wide.size:
        extra = [math.copysign(v, a[i]) for i in wide
                 for v in np.geomspace(abs(a[i]), abs(b[i]), min(int(log_ratio[i] / 3.0), 400) + 2)[1:-1]]
        edges = np.unique(np.concatenate((edges, extra)))
    return edges


def _value_spans(edges):
    """Panels, whether each lies on one side of zero, and its |log(b / a)| there: taken as
    log|b| - log|a|, since b / a overflows from a subnormal floor (1e-315) up to 1."""
    a, b = edges[:-1], edges[1:]
    same_side = np.sign(a) * np.sign(b) > 0
    with np.errstate(divide="ignore"):
        gap = np.log(np.abs(np.where(same_side, b, 1.0))) - np.log(np.abs(np.where(same_side, a, 1.0)))
    return a, b, same_side, np.abs(gap)


def _value_panel_sums(la, lb, logp, sgn, integrand):
    """Per panel, the 24-node and the 16-node Gauss-Legendre integrals of
    ``integrand`` over [la, lb], in x or (where ``logp``) in y = log|x|, dx = x dy.
    Both rules' nodes go to ``integrand`` in one call."""
    half, mid = 0.5 * (lb - la), 0.5 * (lb + la)
    pts = mid[:, None] + half[:, None] * os_.BOTH_NODES
    hw = half[:, None] * os_.BOTH_WEIGHTS
    if logp.any():
        pts[logp] = sgn[logp, None] * np.exp(pts[logp])
        hw = np.where(logp[:, None], hw * pts, hw)
    sums = (hw * integrand(pts)) @ os_.RULE_COLUMNS
    return sums[:, 0], sums[:, 1]


def _refined_value_integral(la, lb, logp, sgn, integrand, offset_scale, rtol=2e-14, max_panels=4000):
    """Both rules' integrals over all panels, halving (in each panel's own coordinate)
    any panel whose two rules disagree by more than rtol of the whole, so that steep
    stretches the fixed edges do not resolve (a mixture's far-apart components) are
    refined where they are and nowhere else."""
    hi, lo = _value_panel_sums(la, lb, logp, sgn, integrand)
    while True:
        budget.check()
        bad = np.abs(hi - lo) > rtol * (offset_scale + np.abs(hi).sum())
        if not bad.any() or len(la) + np.count_nonzero(bad) > max_panels:
            break
        mid = 0.5 * (la[bad] + lb[bad])
        na, nb = np.concatenate((la[bad], mid)), np.concatenate((mid, lb[bad]))
        nlog, nsgn = np.tile(logp[bad], 2), np.tile(sgn[bad], 2)
        nhi, nlo = _value_panel_sums(na, nb, nlog, nsgn, integrand)
        keep = ~bad
        la, lb = np.concatenate((la[keep], na)), np.concatenate((lb[keep], nb))
        logp, sgn = np.concatenate((logp[keep], nlog)), np.concatenate((sgn[keep], nsgn))
        hi, lo = np.concatenate((hi[keep], nhi)), np.concatenate((lo[keep], nlo))
    return float(hi.sum()), float(lo.sum())


def _bid_outer(auc, integrand):
    """E[integrand(nodes)] over the bid nodes, and its error: the two rules' difference plus
    ``ROUNDING`` of E|integrand|."""
    nb = auc.node_bids()
    h = integrand(nb).reshape(-1)
    (hi, lo), (size, _) = (np.stack((h, np.abs(h))) @ nb.rule_dt).tolist()
    return hi, abs(hi - lo) + os_.ROUNDING * size


def first_price_revenue(auc):
    """E[b(X1) 1{X1 >= r}]: the winner pays its own equilibrium bid."""
    return _bid_outer(auc, lambda nb: nb.top * nb.bids)


def descending_revenue(auc):
    """The descending clock price b(X1), integrated by parts:
    E = b(c) - r F(r)^n + int_c^inf b' (1 - F^n) dv - int_r^c b' F^n dv,
    with b' dv = -(n-1) (v - b) ds from the equilibrium equation."""
    n = auc.n
    tail, nb = auc._bid_tail(), auc.node_bids()
    c, weight = auc._inner_quadrature().kept(("descending", n), lambda: _descending_weight(tail.nodes, n))
    # b(c) - r F(r)^n with b(c) = origin + d[c], written (origin - r) + r P(sale) + d[c] so that no term
    # of the reserve's size is taken from another.
    at_floor = (auc.origin - auc.floor) + auc.floor * auc.p_sale if math.isfinite(auc.floor) else auc.origin
    hi, lo = (tail.d[:, c] + at_floor + nb.integrals((nb.values - nb.bids) * weight)).tolist()
    # v - b(v) at a node is as precise as v itself
    rounding = abs(tail.d[0, c]) + abs(auc.origin) + abs(auc.floor * auc.p_sale if math.isfinite(auc.floor) else 0.0) \
        + float(nb.integrals(np.abs(nb.values * weight))[0])
    return hi, abs(hi - lo) + os_.ROUNDING * rounding


def _descending_weight(nodes, n):
    """The descending route's split edge c (the edge nearest F^n = e^-1) and its node
    weight, (n-1) s (1 - F^n) where t < t_c and -(n-1) s F^n elsewhere: functions of
    the nodes and n alone."""
    k = n - 1.0
    c = int(np.argmin(np.abs(nodes.edges - math.log(k / n)))) if len(nodes.edges) else 0
    return c, k * nodes.s * np.where(nodes.t < nodes.edges[c], -np.expm1(-n * nodes.s), -np.exp(-n * nodes.s))


def all_pay_revenue(auc):
    """n E[a(X) 1{X >= r}], a(v) = F(v)^(n-1) b(v): every bidder pays its bid."""
    n = auc.n
    return _bid_outer(auc, lambda nb: n * nb.one * nb.rivals * nb.bids)


def _bid_price_stats(auc):
    """(sd, its error) of the revenue b(X1) 1{sale}, shared by first-price and descending.
    The price's spread comes from the bids' offsets from a reference anchor
    (``ForwardAuction.node_bid_offsets``), so it keeps its digits wherever the values sit;
    its squares are scaled by a power of two (``orderstats.sd_scale``)."""
    ref, bid_off = auc.node_bid_offsets()
    nb = auc.node_bids()
    with np.errstate(over="ignore", invalid="ignore"):
        mass, first = (np.stack((nb.top.reshape(-1), (nb.top * bid_off).reshape(-1))) @ nb.rule_dt[:, 0]).tolist()
        if not mass > 0:
            return 0.0, 0.0
        shift = first / mass
        c = os_.sd_scale(bid_off - shift)
        spread, err = _bid_outer(auc, lambda nb: nb.top * ((bid_off - shift) / c) ** 2)
    sd = _revenue_sd(auc.p_sale, ref + shift, c * math.sqrt(max(spread / mass, 0.0)))
    return sd, _sd_error(sd, c, auc.p_sale * err / mass + os_.ROUNDING * (sd / c) ** 2)


def _bid_price_quantiles(auc, ps):
    n, p0 = auc.n, 1.0 - auc.p_sale

    def sale_quantile(q):
        # The price b(X1) is increasing in X1, and P(sale, X1 <= v) = F(v)^n - p0.
        s_q = -np.log(np.minimum(q + p0, 1.0)) / n
        return auc.bids_at_s(np.minimum(s_q, auc.s_r))

    def sale_cdf_at_zero():
        lo, hi = 0.0, auc.p_sale
        for _ in range(60):  # bisection on the increasing sale-price quantile
            mid = 0.5 * (lo + hi)
            lo, hi = (mid, hi) if float(sale_quantile(np.array([mid]))[0]) < 0.0 else (lo, mid)
        return lo

    return _with_no_sale(auc, ps, sale_quantile, sale_cdf_at_zero)


def _all_pay_stats(auc):
    """(sd, its error) of the all-pay revenue, the sum of n independent bids
    a(X) = F(X)^(n-1) b(X) 1{X >= r}, each bid's variance taken about its mean and its
    squares scaled (``orderstats.sd_scale``). Below the nodes (below the floor, or where
    F^(n-1) is negligible) a bidder bids 0."""
    nb = auc.node_bids()
    mass, ea = (np.stack((nb.one.reshape(-1), (nb.one * nb.rivals * nb.bids).reshape(-1))) @ nb.rule_dt[:, 0]).tolist()
    below = 1.0 - mass
    with np.errstate(over="ignore", invalid="ignore"):
        c = os_.sd_scale(ea, nb.rivals * nb.bids - ea)
        spread, err = _bid_outer(auc, lambda nb: nb.one * ((nb.rivals * nb.bids - ea) / c) ** 2)
    scaled_var = auc.n * (spread + below * (ea / c) ** 2)
    sd = c * math.sqrt(max(scaled_var, 0.0))
    return sd, _sd_error(sd, c, auc.n * err + os_.ROUNDING * abs(scaled_var))


def all_pay_winner_payment(auc):
    """E[a(X1) 1{sale}]: what the winner alone pays under all-pay."""
    return _bid_outer(auc, lambda nb: nb.top * nb.rivals * nb.bids)[0]


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


def _no_sale_note(auc, direction):
    """Say so when the reserve (maximum price) lies where no value (cost) reaches it."""
    if auc.p_sale > 0.0:
        return []
    if direction == "forward":
        return ["the reserve is at or above the top of the value model's support: no bidder can beat it, so nothing is sold"]
    return ["the maximum price is at or below the bottom of the cost model's support: no bidder can meet it, so nothing is awarded"]


def forward_figures(auc, rules, quantiles):
    """Each rule's forward figures: the expected revenue by the rule's own route; the sd,
    the surpluses and the efficiency each integrated as one quantity, never as a
    difference of two large figures; a figure that does not exist is None, with a warning."""
    if auc.n == 1 and auc.p_sale > 0.0 and not math.isfinite(auc.lone_price):
        raise ParameterError("reserve", "with one bidder and no reserve the price is the bottom of an unbounded value model; give a reserve")
    warnings = []
    sp_surplus, eff = _top_gains(auc, warnings)
    out, shared = {}, {}
    for rule in rules:
        mean, err, sd, sd_err, qs = _price_figures(auc, rule, quantiles, shared, warnings)
        if sd is not None and not math.isfinite(sd):
            sd = None
            warnings.append(f"{rule}: the sd is null (it is beyond double precision, about 1e308)")
        winner, bidder = (None, None) if sp_surplus is None else _winner_gains(auc, rule, sp_surplus)
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
    has_var = auc.p_sale == 0.0 or price_moment_exists(auc.model, auc.n, rule, 2, auc.floor)
    if not has_var:
        note = f"{rule}: the sd is null (the price's variance does not exist: the value model's tail is too heavy)"
        if note not in warnings:
            warnings.append(note)
    if auc.p_sale == 0.0:
        return 0.0, 0.0, 0.0, 0.0, np.zeros(len(quantiles))
    if auc.single_price is not None:
        return _single_price_stats(auc, quantiles)
    pricing = R.get(rule).pricing
    if pricing is not R.SECOND:
        if _out_of_reach(auc, rule, 1, warnings):
            return None, 0.0, None, 0.0, (None if pricing is R.ALL_PAY else _bid_price_quantiles(auc, quantiles))
        has_var = has_var and not _out_of_reach(auc, rule, 2, warnings)
    mean, err = R.get(rule).revenue(auc)
    if pricing is R.ALL_PAY:
        sd, sd_err = _all_pay_stats(auc) if has_var else (None, 0.0)
        return mean, err, sd, sd_err, None
    if pricing.name not in shared:
        stats, price_quantiles = _PRICE_DISTRIBUTION[pricing.name]
        shared[pricing.name] = (stats(auc) if has_var else (None, 0.0)), price_quantiles(auc, quantiles)
    (sd, sd_err), qs = shared[pricing.name]
    return mean, err, sd, sd_err, qs


#: Each winner-pays pricing's (sd and its error, quantiles) of the revenue.
_PRICE_DISTRIBUTION = {"second": (_price_stats_second, _price_quantiles_second), "first": (_bid_price_stats, _bid_price_quantiles)}


def _single_price_stats(auc, quantiles):
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


def _out_of_reach(auc, rule, p, warnings):
    """Whether the bid route's p-th moment, which exists, has more than ``_UNREACHED`` of
    it beyond the bid nodes (``ForwardAuction.share_beyond_reach``); if so it is null, and
    a warning says why."""
    if not auc.share_beyond_reach(p) > _UNREACHED:
        return False
    what = "expected revenue and sd are" if p == 1 else "sd is"
    warnings.append(f"{rule}: the {what} null: the moment exists, but more than {_UNREACHED:g} of it comes from values "
                    f"beyond {_TOP_VALUE:g}, out of the double range (a tail index just above the moment's threshold)")
    return True


def _top_gains(auc, warnings):
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


def _top_quadrature(auc):
    """(quadrature, s0): the highest value's quadrature over the values at or above the lower
    of the floor and the seller's own value v0 (s = -log F up to the larger of s_r and s0),
    split at the higher of the two, where the reserve's gains and losses begin."""
    m = auc.model
    s0 = None if auc.v0 is None else (math.inf if auc.v0 <= m.lower else _neg_log_cdf(m, auc.v0))
    s_cut = auc.s_r if s0 is None else max(auc.s_r, s0)
    split = () if s0 is None or s0 == auc.s_r else (min(auc.s_r, s0),)
    up, low = os_.tail_growth(m, 1)
    q = os_.rank_quadrature(auc.n, 1, kinks_u=m.kinks_u(), s_cut=s_cut, splits_s=split, upper_growth=up,
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
    less the revenue."""
    above = _panels_above(q, auc.s_r)
    ih = auc.model.inverse_hazard(q.u, q.v, q.anchor, q.delta)
    below_support = (auc.floor - auc.lone_price) * auc.p_sale if auc.n == 1 else 0.0
    with np.errstate(invalid="ignore", over="ignore"):
        if ih is not None:
            surplus, err = q.integrate_nodes(ih, above)
            return surplus + below_support, err
        ref, o = q.offsets()
        if auc.n == 1:
            surplus, err = q.integrate_nodes(o - (auc.floor - ref), above)
            return surplus + below_support, err
        shift, err = q.integrate_nodes(o, above)
        revenue, rev_err = second_price_revenue(auc)
        return ref * float(q.w_hi[above].sum()) + shift - revenue, err + rev_err


def _winner_gains(auc, rule, sp_surplus):
    """(winner's surplus, bidders' surplus) under ``rule``, each (value, error). Second price
    (and a lone bidder): ``_second_price_surplus``. First price: E[X1 - b(X1)], the shading
    integrated directly (``ForwardAuction.node_shade``). All-pay: every bidder pays its bid,
    so all of them keep E[F(X1)^(n-1) (X1 - b(X1))] summed, that is E[X1 - b(X1)] again, and
    the winner keeps X1 - a(X1) = (X1 - b(X1)) + (1 - F(X1)^(n-1)) b(X1)."""
    if auc.p_sale == 0.0:
        return (0.0, 0.0), (0.0, 0.0)
    pricing = R.get(rule).pricing
    if auc.n == 1 or pricing is R.SECOND:
        return sp_surplus, sp_surplus
    shade = auc.node_shade()
    if auc._bidders_surplus is None:  # kept on the auction: every bid rule asks for it
        auc._bidders_surplus = _bid_outer(auc, lambda nb: nb.top * shade)
    bidders = auc._bidders_surplus
    if pricing is not R.ALL_PAY:
        return bidders, bidders
    k = auc.n - 1.0
    return _bid_outer(auc, lambda nb: nb.top * (shade - np.expm1(-k * nb.s) * nb.bids)), bidders


def winner_value(auc):
    """E[X1 1{sale}], the winner's expected value; None above a far reserve (``FAR_RESERVE``)."""
    if auc.p_sale == 0.0:
        return 0.0
    if 0.0 < auc.s_r < FAR_RESERVE:
        return None
    closed_top = _closed_moments(auc, 1)
    if closed_top is not None:
        return closed_top[0]
    return _quad_cut(auc, 1).integrate(lambda x: x)[0]


def _efficiency(auc, q, s0, warnings):
    """(1 - lost / best, its error): best = E[(X1 - v0)^+], the largest expected gain from
    trade; lost = the gains a reserve above v0 gives up, E[(X1 - v0) 1{v0 <= X1 < r}], or the
    losses of selling below v0, E[(v0 - X1) 1{r <= X1 < v0}]. Each is one integral of X1 - v0
    (from the value offsets) over its own panels of ``_top_quadrature``, so 0 <= lost <= best
    and the efficiency never exceeds 1."""
    if auc.v0 is None:
        warnings.append("efficiency is null: give buyer_value to measure gains from trade")
        return None
    ref, o = q.offsets()
    gain = o - (auc.v0 - ref)
    above = _panels_above(q, min(auc.s_r, s0))
    with np.errstate(invalid="ignore", over="ignore"):
        if auc.s_r <= s0:  # the reserve at or above v0
            (best, e_best), (lost, e_lost) = q.integrate_nodes(gain), q.integrate_nodes(gain, ~above)
        else:
            (best, e_best), (lost, e_lost) = q.integrate_nodes(gain, above), q.integrate_nodes(-gain, ~above)
    if not best > 0:
        warnings.append("efficiency is null: no value exceeds the auctioneer's own, so there are no gains from trade")
        return None
    return 1.0 - lost / best, (e_lost + abs(lost) / best * e_best) / best

# ---- reports in the caller's direction -------------------------------------------

def _forward_case(model, direction, reserve, own_value):
    """Reflect a reverse case into its forward twin: X = -C."""
    if direction == "forward":
        return model, reserve, own_value
    return Reflected(model), None if reserve is None else -reserve, None if own_value is None else -own_value


_NAMES = {
    "forward": ("expected_revenue", "revenue_sd", "revenue_quantiles", "probability_of_sale"),
    "reverse": ("expected_payment", "payment_sd", "payment_quantiles", "probability_of_award"),
}


def revenue_report(model, direction, bidders, reserve=None, own_value=None, rules=None,
                   quantiles=(0.05, 0.25, 0.5, 0.75, 0.95)):
    """Revenue (forward) or payment (reverse) figures for each rule asked (default: every
    registered rule)."""
    rules = R.names() if rules is None else rules
    fmodel, freserve, v0 = _forward_case(model, direction, reserve, own_value)
    if direction == "forward" and v0 is None:
        v0 = 0.0
    auc = ForwardAuction(fmodel, bidders, freserve, v0)
    _check_price_exists(fmodel, bidders, auc.floor)
    # Payment quantile p is minus the forward revenue quantile 1 - p.
    fq = list(quantiles) if direction == "forward" else [1.0 - p for p in quantiles]
    figures, warnings = forward_figures(auc, list(rules), fq)
    warnings += _no_sale_note(auc, direction)
    sign = 1.0 if direction == "forward" else -1.0
    mean_k, sd_k, q_k, p_k = _NAMES[direction]
    results, err = [], 0.0
    for rule in rules:
        f = figures[rule]
        err = max(err, f["_err"])
        qs = f["revenue_quantiles"]
        results.append({
            "rule": rule,
            mean_k: finite(None if f["expected_revenue"] is None else sign * f["expected_revenue"]),
            sd_k: finite(f["revenue_sd"]),
            q_k: None if qs is None else [{"p": float(p), "value": finite(sign * x)} for p, x in zip(quantiles, qs)],
            p_k: finite(f["probability_of_sale"]),
            "expected_winner_surplus": finite(f["expected_winner_surplus"]),
            "expected_bidder_surplus": finite(f["expected_bidder_surplus"]),
            "efficiency": finite(f["efficiency"]),
        })
    means = [r[mean_k] for r in results]
    spread = (max(means) - min(means)) if len(means) > 1 and None not in means else None
    return audit.revenue({
        "direction": direction,
        "assumptions": ASSUMPTIONS[direction],
        "bidders": bidders,
        "reserve": reserve,
        "results": results,
        "revenue_equivalence": finite(spread),
        "numerics": {"method": "quantile_gauss_legendre+spectral_bid_integration", "abs_error": finite(err)},
        "warnings": warnings,
    }, model, reserve, own_value if own_value is not None or direction == "reverse" else 0.0)


def price_moment_exists(model, n, rule, p, floor=-math.inf):
    """Whether E|price|^p is finite under ``rule`` with n bidders and the given floor (the
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
    if n == 1:
        return math.isfinite(floor)
    a, a_low = model.upper_tail_index, model.lower_tail_index
    pricing = R.get(rule).pricing
    if pricing is R.SECOND:
        upper, lower = 2.0 * a > p, (n - 1) * a_low > p
    else:
        upper, lower = a >= 1.0 or a / (1.0 - a) > p, pricing is R.ALL_PAY or n * a_low > p
    return upper and (lower or math.isfinite(floor))


def _check_price_exists(fmodel, bidders, floor=-math.inf):
    """The expected price, under every rule alike (revenue equivalence), is the expected
    max(X2, r): with rivals it needs the second-highest value's mean, upper tail 2a > 1, and,
    unless the floor is finite, lower tail (n - 1) a_low > 1 (see ``price_moment_exists``)."""
    if bidders > 1 and not (2.0 * fmodel.upper_tail_index > 1.0
                            and ((bidders - 1) * fmodel.lower_tail_index > 1.0 or math.isfinite(floor))):
        raise ParameterError("bidders", "the expected price does not exist: the value model's tail is too heavy")


def _grid(model, points):
    lo = model.lower if math.isfinite(model.lower) else float(model.ppf(1e-3))
    hi = model.upper if math.isfinite(model.upper) else float(model.isf(1e-3))
    return np.linspace(lo, hi, points)


def bid_strategy(model, direction, bidders, reserve=None, rule="first_price", points=51, at=None):
    """Equilibrium bids on a grid of values (forward) or costs (reverse)."""
    fmodel, freserve, _ = _forward_case(model, direction, reserve, None)
    auc = ForwardAuction(fmodel, bidders, freserve, 0.0)
    pricing = R.get(rule).pricing
    if not pricing.truthful and bidders > 1 and not auc.reserve_binds \
            and not (bidders - 1) * fmodel.lower_tail_index > 1.0:  # b(v) needs E[Y; Y < v]: the lower tail alone
        raise ParameterError("bidders", "the equilibrium bids do not exist: the expected best rival value diverges "
                                        "(the value model's tail is too heavy); give a reserve")
    grid = np.asarray(at, float) if at is not None else _grid(model, points)
    v = grid if direction == "forward" else -grid
    inside = (v >= fmodel.lower) & (v <= fmodel.upper)
    takes_part = inside & (v >= auc.floor)
    note = R.get(rule).note[direction]
    if pricing.truthful:
        bids = v.copy()
    else:
        s_q = fmodel.neg_log_cdf(v)
        s_q = np.minimum(s_q, auc.s_r)
        b = np.full(v.shape, auc.lone_price if bidders == 1 else auc.floor)
        live = np.isfinite(s_q)  # at the bottom of the support the bid is that value itself
        b[live] = auc.bids_at_s(s_q[live])
        if pricing is R.ALL_PAY:
            # a(v) = F(v)^(n-1) b(v); F^0 = 1 for a lone bidder, F = 0 at the bottom of the support.
            win = np.ones(v.shape) if bidders == 1 else np.where(np.isfinite(s_q), np.exp(-(bidders - 1.0) * np.where(np.isfinite(s_q), s_q, 0.0)), 0.0)
            with np.errstate(invalid="ignore"):  # F^(n-1) b -> 0 at the bottom of an unbounded support
                bids = np.where(win > 0.0, win * b, 0.0)
        else:
            bids = b
    if direction == "reverse":
        bids = -bids
    out_bids = [finite(b) if ok else None for b, ok in zip(bids.tolist(), takes_part.tolist())]
    key = "values" if direction == "forward" else "costs"
    warnings = []
    if not all(inside):
        warnings.append("bids are null at " + ("values" if direction == "forward" else "costs") + " outside the model's support")
    if not all(takes_part[inside]):
        warnings.append("bids are null where the bidder does not take part (" + ("value below the reserve" if direction == "forward" else "cost above the maximum price") + ")")
    warnings += _no_sale_note(auc, direction)
    return audit.bids({"direction": direction, "rule": rule, "bidders": bidders, key: [finite(x) for x in grid.tolist()],
                       "bids": out_bids, "note": note, "assumptions": ASSUMPTIONS[direction], "warnings": warnings}, model, reserve)


def _sp_payoff(model, n, r, v0):
    """Seller's expected payoff with reserve r: revenue plus v0 P(no sale)."""
    auc = ForwardAuction(model, n, r, v0)
    rev = second_price_revenue(auc)[0] if n > 1 else auc.lone_price * auc.p_sale
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


def _best_reserve(model, n, v0, x, lo, hi, scale):
    """The global maximum of the payoff over reserves. Its local maxima are where the
    slope turns from positive to negative between grid points (refined by brentq), and
    the ends where the slope points out of the support. The payoff differences between
    them are integrals of the slope itself, n F^(n-1) ((v0 - r) f + S), in value space."""
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

    def slope(r):
        with np.errstate(all="ignore"):
            rivals = np.exp(-(n - 1.0) * model.neg_log_cdf(r)) if n > 1 else 1.0
            return n * np.where(rivals > 0.0, rivals * _payoff_slope(model, r, v0), 0.0)

    gains = [0.0]
    for a, b in zip(peaks[:-1], peaks[1:]):
        edges = np.concatenate(([a], x[(x > a) & (x < b)], [b]))
        flat = np.zeros(len(edges) - 1, bool)
        rise, _ = _refined_value_integral(edges[:-1], edges[1:], flat, np.ones(len(flat)), slope, scale)
        gains.append(gains[-1] + rise)
    return peaks[int(np.argmax(gains))]


_MYERSON = {
    "forward": "Myerson (1981): the reserve where the virtual value equals the auctioneer's own value; it does not depend "
               "on the number of bidders",
    "reverse": "Myerson (1981): the reserve where the virtual cost c + F(c)/f(c) equals the buyer's value; it does not "
               "depend on the number of bidders",
}
#: What the optimum means, by direction and by how ``optimal_reserve`` found it.
_RESERVE_NOTES = {
    "forward": {
        "root": _MYERSON["forward"],
        "none_binds": _MYERSON["forward"] + "; here every value's virtual value already exceeds it, so no reserve binds",
        "kept": _MYERSON["forward"] + "; here no value's virtual value reaches it, so the item is best kept",
        "irregular": "the virtual value is not increasing over the support (an irregular model), so every local maximum "
                     "of the expected payoff over reserves was found, and the highest taken",
    },
    "reverse": {
        "root": _MYERSON["reverse"],
        "none_binds": _MYERSON["reverse"] + "; here every cost's virtual cost is already below it, so no maximum price binds",
        "kept": _MYERSON["reverse"] + "; here no cost's virtual cost is below it, so the contract is best not awarded",
        "irregular": "the virtual cost c + F(c)/f(c) is not increasing over the support (an irregular model), so every "
                     "local maximum of the expected payoff over maximum prices was found, and the highest taken",
    },
}


def reserve_report(model, direction, bidders, own_value):
    """The reserve (forward) or maximum price (reverse) that maximises the seller's (buyer's) expected payoff."""
    fmodel, _, v0 = _forward_case(model, direction, None, own_value)
    r_star, regular, outcome = optimal_reserve(fmodel, bidders, v0)
    note = _RESERVE_NOTES[direction][outcome]
    _check_price_exists(fmodel, bidders)
    payoff, rev, p_sale = _sp_payoff(fmodel, bidders, r_star, v0)
    payoff0, rev0, _ = _sp_payoff(fmodel, bidders, None, v0) if (bidders > 1 or math.isfinite(fmodel.lower)) else (None, None, None)
    # the buyer's payoff, own_value P(award) - payment, from the forward twin's revenue + v0 P(no sale)
    to_payoff = (lambda x: x) if direction == "forward" else (lambda x: x + own_value)
    sign = 1.0 if direction == "forward" else -1.0
    word, chance = ("revenue", "sale") if direction == "forward" else ("payment", "award")
    out = {
        "direction": direction,
        "bidders": bidders,
        "optimal_reserve": finite(sign * r_star),
        f"expected_{word}_at_optimum": finite(sign * rev),
        f"expected_{word}_without_reserve": finite(None if rev0 is None else sign * rev0),
        f"probability_of_{chance}_at_optimum": finite(p_sale),
        "expected_payoff_at_optimum": finite(to_payoff(payoff)),
        "expected_payoff_without_reserve": finite(None if payoff0 is None else to_payoff(payoff0)),
        "regular": regular,
        "note": note,
        "assumptions": ASSUMPTIONS[direction],
        "warnings": [],
    }
    return audit.reserve_price(out, model, own_value)
