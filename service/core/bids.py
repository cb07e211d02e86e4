"""The symmetric first-price equilibrium bids, computed on the quadrature nodes of the
highest rival value.

In s = -log F(v), the bid b(v) = E[max(Y, r) | Y < v] (Y the highest of n - 1 rival values;
Krishna, Auction Theory, 2nd ed., 2009, ch. 2) is an integral against (n-1) e^(-(n-1)(s - s_v)),
which a panel recurrence (``_discounted_tails``) gives at every panel edge at once, and the
spectral partial-panel rules at every node. Bids are integrated from an origin near the
rivals' values so that they keep their digits wherever the values sit.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from . import orderstats as os_
from .auction import neg_log_cdf
from .price import price_moment_exists

_GL = os_.GAUSS_RULES


# M[q, j] = integral from node q to the panel end of the j-th Lagrange basis polynomial,
# per rule, laid out transposed as one block-diagonal matrix for both rules side by side.
TAIL_BOTH = np.zeros((len(os_.BOTH_NODES),) * 2)


for _i, (_x, _) in enumerate(_GL):
    _block = slice(0, os_.RULE_SPLIT) if _i == 0 else slice(os_.RULE_SPLIT, None)
    TAIL_BOTH[_block, _block] = (os_.partial_panel_weights(1.0, _i) - os_.partial_panel_weights(_x, _i)).T


def _discounted_tails(panel, w, end):
    """d with d[P] = end and d[i] = e^-(w[i+1] - w[i]) (panel[i] + d[i+1]) for the P
    panels between edges w (increasing): every factor is at most 1, so nothing
    overflows. A plain loop over Python floats: P is a few dozen."""
    shrink, panel = np.exp(w[:-1] - w[1:]).tolist(), panel.tolist()
    d = [0.0] * len(shrink) + [end]
    for i in range(len(shrink) - 1, -1, -1):
        d[i] = shrink[i] * (panel[i] + d[i + 1])
    return np.array(d)


#: Panel edges in w = (n-1)(s - s_q) for a bid integrated standalone (``EquilibriumBids._partial``).
_W_EDGES = (0.0, 0.5, 1.5, 3.0, 5.5, 9.0, 14.0, 21.0, 30.0, 42.0, 58.0, 80.0)


#: Where the highest value has no mean, the bid nodes stop at this value (see ``share_beyond_reach``).
TOP_VALUE = 1e300


def _heavy_tail_edges(a, k, s_top):
    """Panel edges (as s = -log F) every 2a in t = log((n-1) s) from the peak up to s_top,
    for a tail of index a <= 1, whose far panels carry the price's moments. There values grow
    as e^(-t/a), so a panel spans a factor e^2 of them and the partial-panel rules behind the
    bids at the nodes (polynomial interpolation, far less exact than a whole panel's Gauss
    sum) keep their digits."""
    t_end = math.log(k * max(s_top, 1e-300))
    return tuple(np.exp(np.arange(-2.0 * a, t_end, -2.0 * a)) / k)


#: Kernel panels per unit of k/m (``_kernel_edges``: 60/m wide in s, 4/k apart), and the most laid out;
#: beyond, risk-averse bids are integrated point by point (``EquilibriumBids.standalone``).
_KERNEL_PANELS = 15.0
MAX_KERNEL_PANELS = 1500


def _kernel_edges(k, m):
    """Panel edges (as s = -log F) for bids that weigh rivals as F^k with k well above the m = n - 1
    rivals the nodes are laid out for (risk aversion: k = m / alpha): every panel no wider than
    4/k in s where the winner's values lie (s up to 60/m), so that e^(-k s) changes by at most
    e^4 across one and the panels' polynomial rules integrate it; below 4/k, every 0.5 in log s."""
    step = 4.0 / k
    linear = np.arange(step, 60.0 / m, step)
    geometric = step * np.exp(-0.5 * np.arange(1, 80))
    return tuple(np.concatenate((geometric[geometric > 1e-300], linear)).tolist())


class EquilibriumBids:
    """The symmetric first-price equilibrium bids of one auction, b(v) = E[max(Y, r) | Y < v]
    with Y the highest of the n - 1 rival values (Krishna 2009, ch. 2), on the nodes of Y's
    quadrature and anywhere else asked; the descending clock and all-pay bids are built on them."""

    def __init__(self, auction):
        self.auction, self.model, self.n = auction, auction.model, auction.n
        # the bids' exponent k: n - 1 for risk-neutral bidders, (n - 1)/alpha under constant
        # relative risk aversion (``ForwardAuction.bid_rivals``); the winner is still the highest of n
        self.rivals, self.lone = auction.bid_rivals, auction.bidders.lone
        # the nodes are those of the highest of the n - 1 rivals' values, in t = log(m s), m = n - 1,
        # so that they cover the winner's values whatever the bids' exponent
        self.m = auction.bidders.rivals
        # bids whose exponent is far steeper than the nodes' (strong risk aversion) are integrated
        # point by point (``_standalone``), where panels fine enough for it would be too many
        self.standalone = self.rivals > 1.5 * self.m and _KERNEL_PANELS * self.rivals / self.m > MAX_KERNEL_PANELS
        self.s_r, self.floor, self.lone_price = auction.s_r, auction.floor, auction.lone_price
        self.origin = self._origin()
        self._quadrature = self._tail = self._nodes = self._shading_cache = None

    def _origin(self):
        """Bids are integrated as b(v) - origin, b(v) - o = E[max(Y, r) - o | Y < v]. The origin is
        whichever of the floor, the top of the support and 0 lies nearest the highest rival's
        median, so that bids keep their digits where the rivals' values are: a bid barely above
        a reserve far from zero, or bids just below a top of 0 (the forward twin of costs massed
        near 0)."""
        ends = [x for x in (self.floor, self.model.upper, 0.0) if math.isfinite(x)]
        if self.lone:
            return ends[0]
        s = math.log(2.0) / (self.rivals)  # F(y)^(n-1) = 1/2
        mid = float(self.model.value_at(np.array([math.exp(-s)]), np.array([-math.expm1(-s)]))[0])
        if math.isfinite(self.floor):
            mid = max(mid, self.floor)  # only bids above the floor are asked for
        return min(ends, key=lambda x: abs(x - mid)) if math.isfinite(mid) else ends[0]

    def _reserve_masses(self, s_from):
        """(floor - origin) e^(-(n-1)(s_r - s)): the reserve's part of the bid at each s (array), from the origin."""
        if not (math.isfinite(self.s_r) and math.isfinite(self.floor)) or self.floor == self.origin:
            return np.zeros(np.shape(s_from))
        return (self.floor - self.origin) * np.exp(-(self.rivals) * (self.s_r - s_from))

    def _growth(self):
        """Tail reach for the bid nodes' integrands: that of the highest value where its
        mean exists; otherwise that of the price b^p, b growing as v^(1 - a) (see
        ``price_moment_exists``)."""
        up, low = os_.tail_growth(self.model, self.auction.power(self.m, 1))
        a = self.model.upper_tail_index
        if a <= 1.0:
            up = (2.0 if price_moment_exists(self.model, self.auction.bidders, "first_price", 2, self.floor) else 1.0) * (1.0 - a) / a
        return up, low

    def inner_quadrature(self):
        """Panels for the highest of the other n-1 values, cut at the reserve."""
        if self._quadrature is None:
            # where the highest value has no mean, the panels reach no further than values of 1e300
            a, k = self.model.upper_tail_index, self.m
            s_top, splits = 0.0, ()
            if a <= 1.0:  # the bids' own tail matters: see ``_heavy_tail_edges``
                s_top = neg_log_cdf(self.model, TOP_VALUE)
                splits = _heavy_tail_edges(a, k, s_top)
            if self.rivals > 1.5 * self.m and not self.standalone:  # risk-averse bids: a steeper F^k, ``_kernel_edges``
                splits = tuple(sorted(set(splits) | set(_kernel_edges(self.rivals, self.m))))
            self._quadrature = os_.filled_rank_quadrature(
                self.model, self.m, 1, power=self.auction.power(self.m, 1), growth=self._growth(), s_cut=self.s_r,
                fine=True, s_top=s_top, splits_s=splits, checked=True,
                fill={"conditional": True, "floor": 0.0 if a <= 1.0 else 1e-12})
        return self._quadrature

    def share_beyond_reach(self, p):
        """An estimate of the share of E[|b(X1)|^p] from values above the bid nodes' top edge
        x_T: 0 where the highest value has a mean (the panels reach as far as its integrand
        needs); else, with b(v) ~ c v^(1 - a) there (see ``price_moment_exists``) and
        P(X1 > x) ~ n S(x), |b(x_T)|^p P(X1 > x_T) a / (a - p (1 - a)), over the nodes'
        integral. Near a moment's threshold the tail beyond 1e300 carries a real share."""
        a = self.model.upper_tail_index
        if a > 1.0 or self.nodes().bids.size == 0:
            return 0.0
        nb = self.nodes()
        if p * (1.0 - a) >= a:
            return math.inf
        top_mass = -math.expm1(-self.n * self.tail().nodes.se[0])
        tail = abs(nb.bids[0, 0]) ** p * top_mass * a / (a - p * (1.0 - a))
        return tail / float(nb.integrals(nb.top * np.abs(nb.bids) ** p)[0])

    def tail(self):
        """The inner quadrature's nodes with the pieces of the bid integral, as
        :class:`BidTail`. Computed once per auction."""
        if self._tail is not None:
            return self._tail
        q = self.inner_quadrature()
        nodes = q.kept(("bid_nodes", self.n, self.rivals), lambda: _bid_nodes(q, self.n, self.rivals))
        if self.standalone:  # no recurrence: every bid is integrated on its own
            d, g = np.zeros((2, len(nodes.se))), np.zeros(q.values.shape)
        else:
            d, g = self._conditional_tails(nodes, q.values - self.origin, self.floor - self.origin)
        self._tail = BidTail(nodes, q.values, d, g)
        return self._tail

    def _conditional_tails(self, nodes, h, end_value):
        """For node values h of a function of s: per rule, d[k] = the integral of
        h (n-1) e^(-(n-1)(s - s_k)) ds from edge k to the reserve, plus end_value times
        e^(-(n-1)(s_r - s_k)) (the bids: h the values less the origin, end_value the floor less
        it), by the panel recurrence; and the integrand g, shifted to each panel's right edge."""
        k = self.rivals
        g = h * nodes.k_s_growth
        end_mass = 0.0
        if math.isfinite(self.s_r) and math.isfinite(end_value) and end_value != 0.0 and len(nodes.se):
            end_mass = end_value * math.exp(-k * (self.s_r - nodes.se[-1]))
        panels = (nodes.dt * g) @ os_.RULE_COLUMNS
        return np.array([_discounted_tails(panels[:, i], k * nodes.se, end_mass) for i in (0, 1)]), g

    def _partial(self, s_q, s_end):
        """Integral of (v - origin) (n-1) e^(-(n-1)(s - s_q)) ds over [s_q, s_end], standalone,
        for arrays of both: in w = (n-1)(s - s_q) on fixed panels out to w = 80 (e^-80 of the
        first), split at the model's kinks, each panel by the 24-node Gauss-Legendre rule."""
        k = self.rivals
        s_q, s_end = np.broadcast_arrays(np.asarray(s_q, float), np.asarray(s_end, float))
        w_end = np.minimum(k * (s_end - s_q), 80.0)
        w_end = np.where(w_end > 0, w_end, 0.0)[..., None]
        cuts = [np.broadcast_to(np.array(_W_EDGES), s_q.shape + (len(_W_EDGES),))]
        kinks = np.array([-math.log(uk) for uk in self.model.kinks_u()])
        if kinks.size:
            cuts.append(k * (kinks - s_q[..., None]))
        edges = np.sort(np.clip(np.concatenate(cuts, axis=-1), 0.0, w_end), axis=-1)
        edges = edges[..., :int(np.sum(np.any(edges < w_end, axis=tuple(range(edges.ndim - 1))))) + 1]  # no empty panels
        (x, w) = _GL[0]
        a, b = edges[..., :-1, None], edges[..., 1:, None]
        wp = 0.5 * (b + a) + 0.5 * (b - a) * x
        ww = 0.5 * (b - a) * w * np.exp(-wp)
        s = s_q[..., None, None] + wp / k
        vals = self.model.value_at(np.exp(-s), -np.expm1(-s))
        return (ww * (vals - self.origin)).sum(axis=(-1, -2))

    def at_s(self, s_q):
        """First-price equilibrium bids at values with -log F(v) = s_q (array): the floor
        at and below it (b(r) = r), where the value model has no mass above the floor too."""
        s_q = np.asarray(s_q, float)
        if self.lone:
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
        k = self.rivals
        q = self.inner_quadrature()
        tail = self.tail()
        edges, se, d = tail.nodes.edges, tail.nodes.se, tail.d[0]
        res = np.full(flat.shape, math.nan)
        on_panels = np.zeros(flat.shape, bool)
        if self.standalone:
            return self._standalone(flat)
        if q.panels:
            # The panel recurrence is exact out to the cut when the panels reach it; where they
            # stop short (the weight is negligible there), only bids 36 e-folds inside can use it.
            ends_at_cut = math.isfinite(self.s_r) and se[-1] >= self.s_r * (1.0 - 1e-12)
            reach = math.inf if ends_at_cut else k * se[-1] - 36.0
            on_panels = (se[0] <= flat) & (flat <= se[-1]) & (k * flat <= reach)
            if k > 1.5 * self.m and on_panels.any():  # risk-averse bids: a panel wider than 8/k cannot follow e^(-k s)
                j = np.minimum(np.searchsorted(se, flat[on_panels], side="right") - 1, len(se) - 2)
                on_panels[np.nonzero(on_panels)[0][k * (se[j + 1] - se[j]) > 8.0]] = False
        if on_panels.any():
            # Within the panels: the node's partial panel, then the recurrence from its right edge.
            sq = flat[on_panels]
            j = np.minimum(np.searchsorted(se, sq, side="right") - 1, len(se) - 2)
            part = self.sub_integral(np.log(self.m * sq), edges[j + 1])
            res[on_panels] = self.origin + part + np.exp(-k * (se[j + 1] - sq)) * d[j + 1]
        off = ~on_panels
        above = off & (flat < se[0]) if q.panels else np.zeros(flat.shape, bool)
        if above.any():  # above the panels: to the first edge, then the recurrence from there
            sq = flat[above]
            res[above] = self.origin + self._partial(sq, se[0]) + np.exp(-k * (se[0] - sq)) * d[0]
        alone = off & ~above
        if alone.any():
            sq = flat[alone]
            end = np.full(sq.shape, self.s_r) if math.isfinite(self.s_r) else sq + 80.0 / k
            res[alone] = self.origin + self._partial(sq, end) + self._reserve_masses(sq)
        return res

    def _standalone(self, s):
        """Bids at -log F = s (array, above the floor), each as v less its shading, integrated on
        its own (``_standalone_shade``)."""
        s = np.asarray(s, float)
        flat = s.ravel()
        values = self.model.value_at(np.exp(-flat), -np.expm1(-flat))
        return (values - self._standalone_shade(flat)).reshape(s.shape)

    def _standalone_shade(self, s_q):
        """v - b(v) = int_r^v (F(x)/F(v))^k dx at -log F(v) = s_q (flat array), as
        (1/k) int u Q'(u) e^-w dw with s = s_q + w/k, u = e^-s, Q'(u) = 1/f(Q(u)), out to the
        floor or w = 80, on the fixed panels of ``_partial``: the shading itself, so that it
        keeps its digits however small a steep exponent k makes it."""
        k = self.rivals
        end = np.full(s_q.shape, self.s_r) if math.isfinite(self.s_r) else s_q + 80.0 / k
        w_end = np.minimum(k * (end - s_q), 80.0)
        w_end = np.where(w_end > 0, w_end, 0.0)[:, None]
        edges = np.clip(np.broadcast_to(np.array(_W_EDGES), (len(s_q), len(_W_EDGES))), 0.0, w_end)
        (x, w) = _GL[0]
        a, b = edges[:, :-1, None], edges[:, 1:, None]
        wp = 0.5 * (b + a) + 0.5 * (b - a) * x
        ww = 0.5 * (b - a) * w * np.exp(-wp)
        s = s_q[:, None, None] + wp / k
        u = np.exp(-s)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            slope = u / self.model.pdf(self.model.value_at(u, -np.expm1(-s)))  # u Q'(u)
        return (ww * np.where(np.isfinite(slope), slope, 0.0)).sum(axis=(-1, -2)) / k

    def bid_at_edge(self, c):
        """(b - origin) at the inner quadrature's edge c, per rule (the descending route's anchor)."""
        if self.standalone:
            return np.full(2, float(self._standalone(np.array([self.tail().nodes.se[c]]))[0]) - self.origin)
        return self.tail().d[:, c]

    def sub_integral(self, t_q, t_end):
        """Integral of (v - origin) k s e^(-k (s - s_q)) dt over [t_q, t_end] (arrays; t = log(m s),
        the nodes' coordinate), each by one 24-node Gauss-Legendre rule."""
        k = self.rivals
        xs, ws = _GL[0]
        hh = 0.5 * (t_end - t_q)
        tt = (0.5 * (t_end + t_q))[..., None] + hh[..., None] * xs
        ss = np.exp(tt) / self.m
        vv = self.model.value_at(np.exp(-ss), -np.expm1(-ss))
        sq = (np.exp(t_q) / self.m)[..., None]
        return (hh[..., None] * ws * (vv - self.origin) * k * ss * np.exp(-k * (ss - sq))).sum(axis=-1)

    def nodes(self):
        """The inner quadrature's nodes with the bids there (bids by the panel
        recurrence plus the node's partial panel), as :class:`NodeBids`."""
        if self._nodes is not None:
            return self._nodes
        tail = self.tail()
        nodes = tail.nodes
        bids = self._standalone(nodes.s) if self.standalone else self.origin + _at_nodes(nodes, tail.d, tail.g)
        # An equilibrium bid lies between the floor and the value; far out in the
        # tail, where the weights are negligible, rounding could break that.
        vals = tail.values
        bids = np.minimum(np.maximum(bids, self.floor if math.isfinite(self.floor) else np.min(vals)), vals)
        self._nodes = NodeBids(nodes.t, nodes.dt, vals, nodes.s, bids, nodes.rivals, nodes.one, nodes.top,
                                        nodes.rule_dt)
        return self._nodes

    def shade(self):
        """v - b(v) at the bid nodes, laid out as ``node_bids`` (see ``_shading``)."""
        return self._shading()[0]

    def offsets(self):
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
        if self._shading_cache is None:
            q, nb = self.inner_quadrature(), self.nodes()
            ref = q.offsets()[0] if np.ndim(q.anchor) == 0 else None
            ref, o = (ref, None) if ref is not None else q.offsets()
            shade, bid_off = nb.values - nb.bids, nb.bids - ref
            small = shade < 1e-3 * (np.abs(nb.values) + np.abs(nb.bids))
            # only where the shading is small beside the values on the whole do its digits matter
            near = nb.integrals(nb.top * shade)[0] < 1e-3 * nb.integrals(nb.top * np.abs(nb.values))[0]
            ih = self.model.inverse_hazard(q.u, q.v, q.anchor, q.delta) if near and not self.standalone else None
            if self.standalone:  # the shading integrated itself, node by node
                shade = self._standalone_shade(nb.s.ravel()).reshape(nb.s.shape)
                o = q.offsets()[1] if o is None else o
                bid_off = o - shade
            if ih is not None:
                nodes = self.tail().nodes
                with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
                    d, g = self._conditional_tails(nodes, q.u / q.v * ih / (self.rivals), 0.0)
                    direct = np.maximum(_at_nodes(nodes, d, g), 0.0)
                small &= np.isfinite(direct)
                o = q.offsets()[1] if o is None else o
                shade, bid_off = np.where(small, direct, shade), np.where(small, o - direct, bid_off)
            self._shading_cache = shade, (ref, bid_off)
        return self._shading_cache

    def expect(self, integrand):
        """E[integrand(nodes)] over the bid nodes (``integrand`` takes the :class:`NodeBids`), and
        its error: the two rules' difference plus ``ROUNDING`` of E|integrand|."""
        nb = self.nodes()
        h = integrand(nb).reshape(-1)
        (hi, lo), (size, _) = (np.stack((h, np.abs(h))) @ nb.rule_dt).tolist()
        return hi, abs(hi - lo) + os_.ROUNDING * size


def _at_nodes(nodes, d, g):
    """The recurrence's integrals at the nodes: g integrated spectrally from every node to
    its panel's right end (no new value evaluations), plus each rule's tail beyond,
    shifted back to the node."""
    return (nodes.half * (g @ TAIL_BOTH) + d[:, 1:].T @ os_.RULE_COLUMNS.T) / nodes.growth


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


def _bid_nodes(q, n, k):
    """The bid route's node arrays for n bidders whose bids weigh rivals as F^k (k = n - 1 for
    risk-neutral bidders); q runs in t = log(m s), m = q.m = n - 1."""
    edges = np.append(q.a, q.b[-1]) if q.panels else np.empty(0)
    se = np.exp(edges) / q.m
    t, dt, _ = q.stacked()
    s = np.exp(t) / q.m
    # beyond the panels a steep kernel is split for (weights below e^-60 there) the shift is held
    # within the double range; the bids there are not asked for (``_bids_above_floor``)
    growth = np.exp(np.minimum(k * (se[1:, None] - s), 700.0))
    rivals = np.exp(-(n - 1.0) * s)
    one = np.exp(-s) * s
    rule_dt = dt.reshape(-1, 1) * np.tile(os_.RULE_COLUMNS, (q.panels, 1))
    with np.errstate(over="ignore"):  # a standalone kernel's recurrence terms are not used (``EquilibriumBids.standalone``)
        k_s_growth = k * s * growth
    return BidNodes(edges, se, 0.5 * (q.b - q.a)[:, None], t, dt, s, growth, k_s_growth, rivals, one, n * rivals * one, rule_dt)


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
