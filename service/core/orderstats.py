"""Order statistics of n independent draws from a value model.

Ranks count from the top: rank 1 is the highest of n, rank 2 the second-highest.
With m = n - r + 1, the rank-r value is Q(U) where U ~ Beta(m, r) (David and
Nagaraja, Order Statistics, 3rd ed., 2003, section 2.1); we write V = 1 - U and
s = -log U, so that the value is isf(-expm1(-s)) and the upper tail keeps its
precision. The quadrature runs in t = log(m s): there the weight is smooth and
has the same shape whatever n is (for rank 1 it is exactly exp(t - e^t)), which
keeps the cost flat in n, and power-law endpoint behaviour of Q becomes analytic.
The t-axis is cut into graded panels around the weight's peak, split at the
model's kinks; each panel gets a 24-node and a 16-node Gauss-Legendre rule, and
their difference is the reported error estimate.
"""
from __future__ import annotations

import copy
import dataclasses
import functools
import math
from dataclasses import dataclass

import numpy as np
from scipy import special as sp

from . import budget

_GL_HI = np.polynomial.legendre.leggauss(24)
_GL_LO = np.polynomial.legendre.leggauss(16)
GAUSS_RULES = (_GL_HI, _GL_LO)
# Both rules side by side, for integrands evaluated once for the pair: columns
# [:RULE_SPLIT] hold the 24-node rule, the rest the 16-node rule, and
# x @ RULE_COLUMNS sums each rule's columns of x separately.
BOTH_NODES, BOTH_WEIGHTS = (np.concatenate(v) for v in zip(*GAUSS_RULES))
RULE_SPLIT = len(_GL_HI[0])
RULE_COLUMNS = np.zeros((len(BOTH_NODES), 2))
RULE_COLUMNS[:RULE_SPLIT, 0] = RULE_COLUMNS[RULE_SPLIT:, 1] = 1.0


def _lagrange_antiderivatives(x):
    """Legendre coefficients (one column per node) of the integral from -1 of
    each Lagrange basis polynomial on the nodes x."""
    L = np.polynomial.legendre
    return L.legint(np.linalg.inv(L.legvander(x, len(x) - 1)), lbnd=-1.0, axis=0)


_ANTI = (_lagrange_antiderivatives(_GL_HI[0]), _lagrange_antiderivatives(_GL_LO[0]))


def partial_panel_weights(x, rule=0):
    """W[q, j] = integral from -1 to x_q of the j-th Lagrange basis polynomial:
    the weights that integrate a panel's node values up to local point x_q. One
    eval_legendre call for all points and degrees (legval loops in Python)."""
    x = np.atleast_1d(np.asarray(x, float))
    anti = _ANTI[rule]
    return sp.eval_legendre(np.arange(len(anti)), x[:, None]) @ anti


#: Relative rounding allowed for in every error estimate: a node value's few ulps and the
#: sum over a few thousand nodes (numpy sums pairwise), per unit of the integral of |h|.
ROUNDING = 4.0 * np.finfo(float).eps


def closed_form_error(model, n, mean, sd=0.0):
    """An error bound for a family's moments in closed form: a few ulps, and where they are
    exps of log-gamma differences (``closed_form_logs``), a few per unit of the logs,
    which grow as log n."""
    logs = math.log1p(n) if model.closed_form_logs else 0.0
    return 2.0 * ROUNDING * (1.0 + logs) * (abs(mean) + sd)


_EDGES_Z = np.array([1.0, 2.5, 4.5, 7.0, 10.0, 14.0, 20.0, 28.0, 40.0, 56.0, 80.0, 112.0, 160.0, 230.0, 330.0, 480.0, 700.0])
_DECADES = 48.0  # integrand cut where it falls below e^-48 (about 1e-21) of its peak
_TINY = 1e-300


def log_beta(a, b):
    """log B(a, b) for whole a, b: exact sums of logs when one is small, where
    scipy's betaln loses digits (about 1e-11 relative at b = 10^6)."""
    a, b = (a, b) if a <= b else (b, a)
    if a <= 64:
        return math.lgamma(a) - math.fsum(math.log(b + j) for j in range(int(a)))
    return float(sp.betaln(a, b))


def _log_weight(t, m, r, lognorm):
    """log of the density of t = log(m s), s = -log U, U ~ Beta(m, r)."""
    w = np.exp(t)
    with np.errstate(divide="ignore"):
        return t - w + (r - 1.0) * np.log(-np.expm1(-w / m)) - lognorm


class RankQuadrature:
    """Nodes and weights for E[h(X_r) 1{X_r >= cut}] in quantile space.

    Arrays are (panels, 24 + 16), both Gauss rules side by side: columns
    [:RULE_SPLIT] hold the 24-node rule, the rest the 16-node rule (``*_hi`` and
    ``*_lo`` are views of each). ``fill`` evaluates the model's values at the nodes
    and splits any panel whose two rules disagree, so rough quantile functions (a
    kernel density through a few scattered bids) still integrate to full precision.
    Beside the values it keeps their parts (``anchor`` + ``delta``, see
    ``ValueModel.value_parts``), from which ``offsets`` forms differences of values.
    """

    def __init__(self, m, r, lognorm, edges, cut_at_end=False):
        self.m, self.r, self.lognorm = m, r, lognorm
        self.cut_at_end = cut_at_end  # whether the last edge is a cut (a reserve), not where the weight fades
        edges = np.asarray(edges, float)
        self._set_panels(edges[:-1], edges[1:])
        self.values = None
        # What depends on the nodes as built and on nothing else (see ``kept``): the
        # copies handed out of the rule cache share it, so a worker builds each once.
        self._kept, self._built_nodes = {}, self.u

    @property
    def panels(self):
        return len(self.a)

    w_hi = property(lambda self: self.w[:, :RULE_SPLIT])
    values_hi = property(lambda self: self.values[:, :RULE_SPLIT])

    def kept(self, key, build):
        """``build()``, a function of the nodes alone (never of a model's values), built
        once and kept with the nodes, its arrays made read-only. For the nodes as built
        the store is shared with the rule cache's copies; nodes refined by ``fill`` are
        this quadrature's own, and so is their store."""
        store = self._kept if self.u is self._built_nodes else self._refined_kept
        hit = store.get(key)
        if hit is None:
            hit = store[key] = build()
            parts = hit if isinstance(hit, tuple) else vars(hit).values() if dataclasses.is_dataclass(hit) else (hit,)
            for a in parts:
                if isinstance(a, np.ndarray):
                    a.flags.writeable = False
        return hit

    def _node_parts(self, model):
        """The parts (anchor, delta) of the model's values at the nodes. A family with a
        standard quantile maps the standard values kept with the nodes, so only the map is paid."""
        std = model.standard_quantile
        if std is None:
            return model.value_parts(self.u, self.v)
        return model.parts_from_standard(self.kept(("standard", std), lambda: std(self.u, self.v)))

    def offsets(self):
        """(ref, values - ref) at the nodes, ref the anchor of the node where the 24-node
        weights peak. The differences come from the value parts, so a spread far smaller
        than where the model sits keeps its digits."""
        if np.ndim(self.anchor) == 0:
            return float(self.anchor), self.delta
        ref = float(self.anchor[np.unravel_index(np.argmax(self.w_hi), self.w_hi.shape)]) if self.panels else 0.0
        return ref, (self.anchor - ref) + self.delta

    def _nodes(self, a, b):
        half, mid = 0.5 * (b - a), 0.5 * (b + a)
        t = mid[:, None] + half[:, None] * BOTH_NODES
        wt = half[:, None] * BOTH_WEIGHTS * np.exp(_log_weight(t, self.m, self.r, self.lognorm))
        s = np.exp(t) / self.m
        return np.exp(-s), -np.expm1(-s), wt

    def _set_panels(self, a, b):
        order = np.argsort(a)
        self.a, self.b = a[order], b[order]
        self.u, self.v, self.w = self._nodes(self.a, self.b)
        self._refined_kept = {}
        return order

    def rules(self):
        """Per rule: (t nodes, dt weights, values), for integrands of one's own."""
        t, dt, v = self.stacked()
        return [(t[:, :RULE_SPLIT], dt[:, :RULE_SPLIT], v[:, :RULE_SPLIT]), (t[:, RULE_SPLIT:], dt[:, RULE_SPLIT:], v[:, RULE_SPLIT:])]

    def stacked(self):
        """(t nodes, dt weights, values), both rules side by side."""
        half, mid = 0.5 * (self.b - self.a), 0.5 * (self.b + self.a)
        t = mid[:, None] + half[:, None] * BOTH_NODES
        return t, half[:, None] * BOTH_WEIGHTS, self.values

    def fill(self, model, rtol=2e-14, max_rounds=60, conditional=False, floor=1e-12):
        """Evaluate model values at the nodes, refining rough panels: those whose two
        rules differ by more than rtol of the whole integral or, with ``conditional``,
        of the part at and below the panel's values (floored at ``floor`` of the whole).
        Integrals conditioned on Y < v (the equilibrium bids) divide by that part, so
        an error negligible for the whole can still dominate them. Where the values have
        no mean, the whole is only the panels' reach, and ``floor`` is 0."""
        if self.panels == 0:
            self.values = self.delta = np.empty((0, len(BOTH_NODES)))
            self.anchor = 0.0
            return self
        anchor, delta = self._node_parts(model)
        vals = _joined(anchor, delta)
        for _ in range(max_rounds):
            budget.check()
            with np.errstate(invalid="ignore"):  # values beyond the double range: the callers say so
                parts = self.w * vals
                hi = parts[:, :RULE_SPLIT]
                err = np.abs(hi.sum(axis=1) - parts[:, RULE_SPLIT:].sum(axis=1))
            mass = np.abs(hi).sum(axis=1)
            scale = mass.sum() + 1e-300
            if conditional:  # panels run up in t, i.e. down in value: the part below is a reversed cumsum
                scale = np.maximum(np.cumsum(mass[::-1])[::-1], floor * scale)
            bad = err > rtol * scale
            if model.discrete or not bad.any() or self.panels > 4000:
                break
            a, b = self.a[bad], self.b[bad]
            mid = 0.5 * (a + b)
            na, nb = np.concatenate((a, mid)), np.concatenate((mid, b))
            u_new, v_new, _ = self._nodes(na, nb)
            a_new, d_new = model.value_parts(u_new, v_new)
            order = self._set_panels(np.concatenate((self.a[~bad], na)), np.concatenate((self.b[~bad], nb)))
            if np.ndim(anchor) or np.ndim(a_new) or anchor != a_new:
                anchor = np.concatenate((np.broadcast_to(anchor, vals.shape)[~bad], np.broadcast_to(a_new, d_new.shape)))[order]
            delta = np.concatenate((delta[~bad], d_new))[order]
            vals = np.concatenate((vals[~bad], _joined(a_new, d_new)))[order]
        self.values, self.anchor, self.delta = vals, anchor, delta
        return self

    def cut_weights(self, t_cut):
        """dt-weights (cuts x panels*24, 24-node rule) that integrate over t <= each t_cut,
        the cut panel by spectral partial integration of its node values."""
        t_cut = np.atleast_1d(np.asarray(t_cut, float))
        P, J = self.panels, len(_GL_HI[0])
        half = 0.5 * (self.b - self.a)
        full = half[:, None] * _GL_HI[1][None, :]  # (P, J)
        left = self.b[None, :] <= t_cut[:, None]  # panels wholly below the cut
        W = np.where(left[:, :, None], full[None, :, :], 0.0)
        inside = (self.a[None, :] < t_cut[:, None]) & ~left
        qi, pi = np.nonzero(inside)
        if len(qi):
            x_loc = (t_cut[qi] - 0.5 * (self.a[pi] + self.b[pi])) / half[pi]
            W[qi, pi, :] = half[pi, None] * partial_panel_weights(x_loc)
        return W.reshape(len(t_cut), P * J)

    def total(self):
        return float(self.w_hi.sum())

    def integrate(self, fn):
        """Integral of fn(values), and its error estimate (see ``integrate_nodes``)."""
        return self.integrate_nodes(fn(self.values))

    def integrate_nodes(self, h, panels=None):
        """Integral of the node array h (over the panels selected by the boolean array
        ``panels``, or all), and its error estimate: the two rules' difference plus
        ``ROUNDING`` of the integral of |h|."""
        parts = self.w * h
        if panels is not None:
            parts = parts[panels]
        hi, lo = (parts.sum(axis=0) @ RULE_COLUMNS).tolist()
        return hi, abs(hi - lo) + ROUNDING * float(np.abs(parts[:, :RULE_SPLIT]).sum())

    def left_of(self, t):
        """Panels wholly below t (t an edge of the panels, as a split puts it)."""
        return 0.5 * (self.a + self.b) < t


def _joined(anchor, delta):
    """anchor + delta; the delta itself where the anchor is 0 (the generic parts)."""
    return delta if np.ndim(anchor) == 0 and anchor == 0.0 else anchor + delta


# Per worker. A rule takes about 1 KB a panel (at most about 80 KB); what ``kept`` adds
# for the bid route's rules takes about 4 KB a panel more (120 KB at 32 panels).
_RULE_CACHE_SIZE = 256
_RULE_CACHE_KINKS = 16  # a model with more kinks (a long quantile table) builds its rule each time


def rank_quadrature(n, r, *, kinks_u=(), s_cut=None, upper_growth=0.0, lower_growth=0.0, model=None, power=0,
                    fine=False, splits_s=(), s_top=0.0, checked=False):
    """Quadrature for rank r of n (see ``_build_rank_quadrature``); ``splits_s`` are extra
    panel edges, given as s = -log u so that they keep their digits near the top, and no
    panel reaches above s = ``s_top`` (values beyond the double range, say).

    Without a model to probe, the rule depends only on its arguments, so it is built
    once per worker for each (n, r, kinks, cut, reach) and handed out as a fresh copy
    (``fill`` replaces arrays, never writes into them; the cached ones are read-only).
    A model with cheap quantiles is probed: the scan that trims the range weighs |Q|^power.
    With ``checked`` it is probed only when the cached rule's ends still carry that
    weight (``_ends_matter``: a lognormal with a large sigma, a gamma of tiny shape), so
    that ordinary models keep the cached rule and what is kept with it.
    """
    kinks = tuple(float(k) for k in np.atleast_1d(np.asarray(kinks_u, float)))
    splits = tuple(float(x) for x in splits_s)
    if model is not None and not (model.upper_tail_index == model.lower_tail_index == math.inf):
        model = None  # a power-law tail's growth is known in closed form; its far values overflow
    probe = model is not None and power and model.cheap_quantiles
    shape = (n, r, kinks, s_cut, upper_growth, lower_growth)
    if (probe and not checked) or len(kinks) > _RULE_CACHE_KINKS:
        return _build_rank_quadrature(*shape, model, power, fine, splits, s_top)
    rule = copy.copy(_cached_rule(n, r, kinks, None if s_cut is None else float(s_cut),
                                  float(upper_growth), float(lower_growth), bool(fine), splits, float(s_top)))
    if probe and _ends_matter(rule, model, power):
        return _build_rank_quadrature(*shape, model, power, fine, splits, s_top)
    return rule


def _ends_matter(q, model, power):
    """Whether |Q|^power times the weight, at the rule's first edge (the upper tail) or at
    its last when that is not a cut, comes within e^-40 of its size in the bulk: the
    scan that placed the edges weighed the weight alone, and here the values grow
    faster than it allowed for. A few quantiles: the edges and the panels' middles."""
    if q.panels == 0:
        return False
    t = np.concatenate(([q.a[0], q.b[-1]], 0.5 * (q.a + q.b)))
    s = np.exp(t) / q.m
    with np.errstate(divide="ignore", over="ignore", invalid="ignore"):
        logw = _log_weight(t, q.m, q.r, q.lognorm)
        x = np.abs(model.value_at(np.exp(-s), -np.expm1(-s)))
        bulk = logw > np.max(logw) - 5.0
        scale = max(float(np.max(np.where(bulk & np.isfinite(x), x, 0.0))), _TINY)
        h = logw + power * np.log(np.maximum(x, scale) / scale)
    h = np.where(np.isnan(h), -np.inf, h)
    ends = h[:1] if q.cut_at_end else h[:2]
    return bool(np.max(ends) > np.max(h[2:]) - 40.0)


@functools.lru_cache(maxsize=_RULE_CACHE_SIZE)
def _cached_rule(n, r, kinks_u, s_cut, upper_growth, lower_growth, fine, splits_s=(), s_top=0.0):
    q = _build_rank_quadrature(n, r, kinks_u, s_cut, upper_growth, lower_growth, None, 0, fine, splits_s, s_top)
    for name in ("a", "b", "u", "v", "w"):
        getattr(q, name).flags.writeable = False
    return q


def _build_rank_quadrature(n, r, kinks_u, s_cut, upper_growth, lower_growth, model, power, fine, splits_s=(), s_top=0.0):
    """Quadrature for rank r of n, restricted to s = -log u <= s_cut (the cut written in s
    keeps its digits where u itself rounds to 1).

    ``upper_growth``/``lower_growth`` are p/alpha for an integrand |x|^p over a
    tail of power-law index alpha, so that the panels reach far enough out.
    With a ``model`` whose quantiles are cheap, the scan that trims the range
    also weighs |Q|^power, so fast-growing tails (a lognormal with a large sigma,
    a Weibull with a small shape) keep all of their mass. ``fine`` adds edges every
    4 units of w = m s, so the weight e^-w changes by at most e^4 within a panel and
    partial-panel integrals (``cut_weights``) keep full precision anywhere.
    """
    m = float(n - r + 1)
    r = float(r)
    lognorm = math.log(m) + log_beta(r, m)
    t_floor = math.log(m * max(_TINY, s_top))
    window = _rank_window(n, m, r, s_cut, upper_growth, lower_growth, fine, t_floor)
    if window is None:
        return RankQuadrature(m, r, lognorm, [])
    t0, sig, t_left, t_right = window
    cut = s_cut is not None and math.isfinite(s_cut)
    probe = model is not None and power and model.cheap_quantiles
    ta, tb = _trimmed(m, r, lognorm, t_left, t_right, cut, upper_growth, lower_growth, model if probe else None, power,
                      t_floor)
    if fine:  # reach w = 80, so every partial integral out to e^-40 of the weight lies inside
        tb = max(tb, min(t_right, math.log(80.0)))
    tpk = min(max(t0, ta), tb)
    edges = np.concatenate(([ta, tb, tpk], tpk + sig * _EDGES_Z, tpk - sig * _EDGES_Z))
    splits = [-math.log(uk) for uk in kinks_u if 0.0 < uk < 1.0] + [x for x in splits_s if 0.0 < x < math.inf]
    edges = np.append(edges, [math.log(m * x) for x in splits])
    if fine:
        w_end = min(math.exp(tb), 4.0 * 400)
        edges = np.append(edges, np.log(4.0 * np.arange(1, int(w_end / 4.0) + 1)))
    edges = np.unique(edges[(edges >= ta) & (edges <= tb)])
    return RankQuadrature(m, r, lognorm, edges, cut_at_end=cut and tb >= t_right)


def _rank_window(n, m, r, s_cut, upper_growth, lower_growth, fine, t_floor):
    """(t0, sig, t_left, t_right): the weight's peak and scale in t, and the range
    that holds it (None when empty). A cut far in the upper tail (a reserve beaten
    with chance 1e-40) keeps the weight's last 60 e-folds below it, since integrals
    cut there are about that sliver and nothing else."""
    es = float(sp.digamma(n + 1.0) - sp.digamma(m)) if n - r >= 2000 else float(np.sum(1.0 / np.arange(m, n + 1.0)))
    vs = float(sp.polygamma(1, m) - sp.polygamma(1, n + 1.0)) if n - r >= 2000 else float(np.sum(1.0 / np.arange(m, n + 1.0) ** 2))
    t0 = math.log(m * es)
    sig = min(1.0, math.sqrt(vs) / es)
    reach = 60.0 / max(r - upper_growth, 1e-3)  # the weight falls as e^((r - growth) t) into the upper tail
    t_left = max(t0 - max(14.0 * sig, reach), t_floor)
    w_right = m * (es + 14.0 * math.sqrt(vs)) + 70.0
    if lower_growth:
        w_right /= max(1.0 - lower_growth / m, 1e-3)
    if fine:
        w_right = max(w_right, 90.0)
    t_right = min(math.log(w_right), math.log(m * 690.0))
    if s_cut is not None and math.isfinite(s_cut):
        if s_cut <= 0.0:
            return None
        t_right = min(t_right, math.log(m * s_cut))
        t_left = max(min(t_left, t_right - reach), t_floor)
    if t_right <= t_left:
        return None
    return t0, sig, t_left, t_right


def _trimmed(m, r, lognorm, t_left, t_right, cut, upper_growth, lower_growth, model, power, t_floor):
    """(ta, tb): the part of [t_left, t_right] where the integrand matters, on a cheap
    scan of the log-weight (and, with a ``model`` to probe, of |Q|^power)."""
    scan = np.linspace(t_left, t_right, 151 if model is not None else 301)
    if model is not None:
        far = np.linspace(t_floor, min(math.log(m * 690.0), t_right if cut else math.inf), 121)
        scan = np.unique(np.concatenate((scan, far)))
    wscan = np.exp(scan)
    with np.errstate(divide="ignore", over="ignore", invalid="ignore"):
        aug = _log_weight(scan, m, r, lognorm)
        if model is None:  # the power-law tails' growth, in closed form
            aug = aug - upper_growth * np.log(np.maximum(-np.expm1(-wscan / m), _TINY)) + lower_growth * wscan / m
        else:  # the growth itself, measured on the model's values
            # |Q|^power only counts where it exceeds the values' own scale in the
            # bulk: a central moment needs the mass where Q is near zero too.
            xs = np.abs(model.value_at(np.exp(-wscan / m), -np.expm1(-wscan / m)))
            bulk = aug > np.max(aug) - 5.0
            scale = np.max(np.where(bulk & np.isfinite(xs), xs, 0.0))
            aug = aug + power * np.log(np.maximum(xs, max(scale, _TINY)) / max(scale, _TINY))
            aug = np.where(np.isnan(aug), -np.inf, aug)  # no value there (a quantile routine gave up)
    top = np.max(aug)
    if model is not None and not math.isfinite(float(top)):
        return scan[0], scan[-1]  # the integrand overflows: the caller sees a non-finite result
    keep = np.nonzero(aug > top - _DECADES)[0] if np.isfinite(top) else np.nonzero(aug == np.inf)[0]
    # The hull with where the weight alone matters: a fast-growing tail (a lognormal with
    # a large sigma) puts the peak of x^2 w far out, where x w (the mean) no longer is.
    weight = _log_weight(scan, m, r, lognorm)
    keep = np.union1d(keep, np.nonzero(weight > np.max(weight) - _DECADES)[0])
    if len(keep) == 0:  # nothing finite to go by: the whole scanned range
        keep = np.arange(len(scan))
    ta = scan[max(keep[0] - 1, 0)]
    if cut and keep[-1] == len(scan) - 1:
        return ta, t_right
    # On the right the weight falls as e^-w: one unit of t (a factor e in w) past the last point
    # kept is margin enough, where the probe's sparse far scan would step a factor 300 out.
    return ta, min(scan[min(keep[-1] + 1, len(scan) - 1)], scan[keep[-1]] + 1.0)


def filled_rank_quadrature(model, n, r, *, power=None, growth=None, fill=None, **rule):
    """The one way a rank quadrature is set up for a model: the rank-r-of-n rule with the
    model's kinks, its panels reaching as far into each tail as |X|^power needs (by default
    2 where the variance exists, else 1; ``growth`` overrides the reach), filled with the
    model's values (``fill``: the arguments of ``RankQuadrature.fill``). ``rule`` passes
    on to :func:`rank_quadrature` (s_cut, fine, checked, splits_s, s_top)."""
    if power is None:
        power = 2 if moment_exists(model, n, r, 2) else 1
    up, low = tail_growth(model, power) if growth is None else growth
    q = rank_quadrature(n, r, kinks_u=model.kinks_u(), upper_growth=up, lower_growth=low, model=model, power=power, **rule)
    return q.fill(model, **(fill or {}))


def tail_growth(model, p):
    """(p / alpha_up, p / alpha_low): how fast |x|^p grows into each power-law tail."""
    up = p / model.upper_tail_index if math.isfinite(model.upper_tail_index) else 0.0
    low = p / model.lower_tail_index if math.isfinite(model.lower_tail_index) else 0.0
    return up, low


def moment_exists(model, n, r, p):
    """E|X_r|^p is finite iff r alpha_up > p and (n - r + 1) alpha_low > p."""
    return r * model.upper_tail_index > p and (n - r + 1) * model.lower_tail_index > p


def discrete_rank_probabilities(model, n, r):
    """P(rank r of n = each atom) for a step distribution, exact through the
    regularised incomplete beta function: atom i takes U in ((i-1)/N, i/N]."""
    N = model.N
    c = np.arange(N + 1, dtype=float) / N
    m = n - r + 1.0
    below = sp.betainc(m, float(r), c)  # P(U <= c), precise for small c
    above = sp.betainc(float(r), m, 1.0 - c)  # P(U >= c), precise for c near 1
    lower_half = c[1:] <= 0.5
    probs = np.where(lower_half, below[1:] - below[:-1], above[:-1] - above[1:])
    return np.maximum(probs, 0.0)


@dataclass
class RankSummary:
    rank: int
    mean: float | None
    sd: float | None
    abs_error: float
    method: str
    warnings: list
    gap: tuple | None = None  # (E[X_1 - X_2], its error) when asked of rank 1's quadrature

    @property
    def var(self):
        return None if self.sd is None else self.sd * self.sd


def sd_scale(*deviations):
    """A power of two at or above the largest finite |deviation|: squares of deviations
    divided by it lie in [0, 1], so none overflows (a spread of 1e200 about a mean of
    1e150) and the ones that matter do not underflow (a spread of 1e-200)."""
    top = 0.0
    for d in deviations:
        d = np.abs(np.asarray(d, float))
        d = d[np.isfinite(d)]
        top = max(top, float(d.max()) if d.size else 0.0)
    return math.ldexp(1.0, math.frexp(top)[1]) if top > 0.0 else 1.0


def rank_summary(model, n, r, with_gap=False):
    """Mean and sd of rank r of n, by the best route the model allows; with ``with_gap``,
    rank 1's quadrature also gives the expected gap (see ``expected_gap``)."""
    warnings = []
    has_mean = moment_exists(model, n, r, 1)
    has_var = moment_exists(model, n, r, 2)
    if not has_mean:
        warnings.append(f"rank {r}: the mean does not exist (the value model's tail is too heavy for {n} bidders); mean and sd are null")
        return RankSummary(r, None, None, 0.0, "none", warnings)
    if not has_var:
        warnings.append(f"rank {r}: the variance does not exist (the value model's tail is too heavy); sd is null")
    if model.discrete:
        p = discrete_rank_probabilities(model, n, r)
        x = model.atoms
        mean = float(np.dot(p, x) / np.sum(p))
        c = sd_scale(x - mean)
        sd = c * math.sqrt(float(np.dot(p, ((x - mean) / c) ** 2) / np.sum(p)))
        return RankSummary(r, mean, sd, 4e-16 * abs(mean), "exact_discrete_sum", warnings)
    got = model.closed_rank_moments(n, r)
    if got is not None:
        mean, var = got
        sd = math.sqrt(max(var, 0.0)) if has_var and var is not None else None
        return RankSummary(r, mean, sd, closed_form_error(model, n, mean, sd or 0.0), "closed_form", warnings)
    q = filled_rank_quadrature(model, n, r, power=2 if has_var else 1)
    with np.errstate(over="ignore", invalid="ignore"):
        mean, sd, err = quadrature_moments(q, has_var)
        gap = _spacing(model, q, _norm(q)) if with_gap and r == 1 and q.panels else None
    if mean is None or not math.isfinite(mean):
        warnings.append(f"rank {r}: the mean is beyond double precision (about 1e308); mean and sd are null")
        return RankSummary(r, None, None, 0.0, "quantile_gauss_legendre", warnings)
    if has_var and (sd is None or not math.isfinite(sd)):
        warnings.append(f"rank {r}: the sd is beyond double precision (about 1e308); sd is null")
        sd = None
    return RankSummary(r, mean, sd, err if math.isfinite(err) else None, "quantile_gauss_legendre", warnings, gap)


def _norm(q):
    """What a rank quadrature's integrals are divided by. The rank's weight integrates to 1:
    where the scan kept all of it, dividing by the rule's own total only removes its
    rounding; where it trimmed part of it, it did so because the values there are
    negligible (a gamma of shape 1e-5 is below 1e-300 except with chance 5e-5), and they
    count as zero rather than being spread over the rest by a normalisation."""
    total = q.total()
    return total if abs(total - 1.0) < 1e-9 else 1.0


def quadrature_moments(q, has_sd):
    """(mean, sd, error bound for both) of a filled rank quadrature's values; (None, None, 0)
    for an empty rule. The mean is taken about a value at the weight's peak and the spread
    from the offsets (``RankQuadrature.offsets``), so that its relative precision does not
    depend on where the values sit (a sd of 1e-300 about 1e150); the squares are scaled by a
    power of two (``sd_scale``), so a spread of 1e200 neither overflows nor one of 1e-200
    underflows."""
    if q.panels == 0:
        return None, None, 0.0
    total = _norm(q)
    ref, o = q.offsets()
    if total == 1.0 and abs(q.total() - 1.0) >= 1e-9:
        o, ref = o + ref, 0.0  # a trimmed weight: the whole values, nothing renormalised
    shift, err = q.integrate_nodes(o)
    shift /= total
    mean = ref + shift
    err = err / total + ROUNDING * abs(mean)
    if not (has_sd and math.isfinite(shift)):
        return mean, None, err
    dev = o - shift
    c = sd_scale(dev)
    scaled = dev / c
    var, err2 = q.integrate_nodes(scaled * scaled)
    var /= total
    # each offset's own rounding moves the variance by up to 2 |dev| ROUNDING |o|
    err2 = (err2 + 2.0 * ROUNDING * float(np.abs((q.w * scaled * (o / c))[:, :RULE_SPLIT]).sum())) / total
    root = math.sqrt(max(var, 0.0))
    return mean, c * root, max(err, c * (err2 / (2.0 * root) if root > 0 else math.sqrt(err2)))


def _spacing(model, q, total):
    """(E[X_1 - X_2], its error) on a filled quadrature of the highest value, or None where
    the model has no precise S / f (see ``expected_gap``)."""
    ih = model.inverse_hazard(q.u, q.v, q.anchor, q.delta)
    if ih is None:
        return None
    with np.errstate(invalid="ignore", over="ignore"):
        gap, err = q.integrate_nodes(ih)
    return gap / total, err / total


def expected_gap(model, n, summaries=()):
    """(E[X_1 - X_2], its error) for n >= 2, or (None, 0) where a mean does not exist.

    Integrated as one quantity, never as a difference of the two means: by parts, with
    P(X_2 <= x) - P(X_1 <= x) = n F^(n-1) (1 - F) (David and Nagaraja 2003, section 2.1),
    E[X_1 - X_2] = int n u^(n-1) (1 - u) Q'(u) du = E[(1 - U) Q'(U)], U ~ Beta(n, 1), on the
    highest value's own nodes; (1 - u) Q'(u) = S / f, the reciprocal of the hazard rate
    (``ValueModel.inverse_hazard``). A step model sums its atoms' gaps x_(i+1) - x_i times
    P(X_2 <= x_i < X_1) = n F_i^(n-1) (1 - F_i). Only a model without a precise S / f (a
    mixture, a kernel density) falls back to the difference of the means.
    """
    if not (moment_exists(model, n, 1, 1) and moment_exists(model, n, 2, 1)):
        return None, 0.0
    if model.discrete:
        f = np.arange(1, model.N) / model.N
        gap = float(np.dot(np.diff(model.atoms), n * (1.0 - f) * np.exp((n - 1.0) * np.log(f))))
        return gap, ROUNDING * gap
    by_rank = {s.rank: s for s in summaries}
    top = by_rank.get(1)
    if top is not None and top.gap is not None:
        return top.gap
    if top is None or top.method != "quantile_gauss_legendre":
        q = filled_rank_quadrature(model, n, 1, power=1)
        got = _spacing(model, q, _norm(q)) if q.panels else None
        if got is not None:
            return got
        with np.errstate(over="ignore", invalid="ignore"):
            mean, _, err = quadrature_moments(q, False)
        top = RankSummary(1, mean, None, err, "quantile_gauss_legendre", [])
    second = by_rank.get(2) or rank_summary(model, n, 2)
    if top.mean is None or second.mean is None:
        return None, 0.0
    return top.mean - second.mean, (top.abs_error or 0.0) + (second.abs_error or 0.0)


def rank_quantiles(model, n, r, ps):
    """The p-quantiles of rank r of n: Q at the Beta(m, r) quantiles."""
    ps = np.asarray(ps, float)
    if ps.ndim == 1 and len(ps) <= 64:
        key = tuple(ps.tolist())
        std = model.standard_quantile
        if std is not None:
            return model.from_standard(_standard_beta_quantiles(n, r, key, std))
        u, v = _beta_quantiles(n, r, key)
    else:
        u, v = _beta_quantiles.__wrapped__(n, r, ps)
    if model.discrete:
        return model.ppf(u)
    return model.value_at(u, v)


@functools.lru_cache(maxsize=_RULE_CACHE_SIZE)
def _beta_quantiles(n, r, ps):
    """U ~ Beta(m, r) at probabilities ps as (u, v = 1 - u), each taken from the inverse
    that keeps its digits: v from above where it is below 1/2, else u from below.
    Model-free, so the common probability sets (the default quantiles, the ascending
    route's edges) are computed once per worker."""
    m = n - r + 1.0
    u = sp.betaincinv(m, float(r), ps)
    v = sp.betainccinv(float(r), m, ps)
    u, v = np.where(v < 0.5, 1.0 - v, u), np.where(v < 0.5, v, 1.0 - u)
    if isinstance(ps, tuple):
        u.flags.writeable = v.flags.writeable = False
    return u, v


@functools.lru_cache(maxsize=_RULE_CACHE_SIZE)
def _standard_beta_quantiles(n, r, ps, std):
    """The standard values at ``_beta_quantiles``, for a family with a standard quantile."""
    z = std(*_beta_quantiles(n, r, ps))
    z.flags.writeable = False
    return z


def rank_cdf(model, n, r, x):
    """P(rank r of n <= x) = P(V >= S(x)), V ~ Beta(r, m)."""
    return _rank_tail(model, n, r, x, upper=False)


def rank_sf(model, n, r, x):
    """P(rank r of n > x) = P(V < S(x)), V ~ Beta(r, m), with its digits in the upper tail."""
    return _rank_tail(model, n, r, x, upper=True)


# Up to this many terms past the first, the binomial sum below costs less than betainc.
_BINOMIAL_MAX_STEPS = 8


def _binomial_upper(n, r, s):
    """P(Bin(n, s) >= r) = sum over j >= r of C(n, j) s^j (1 - s)^(n - j), the chance that
    rank r of n exceeds the value whose survival is s (David and Nagaraja 2003, eq. 2.1.3),
    by Horner's rule in s. Every term is positive, so nothing cancels, and where s^r nears
    underflow it keeps more digits than betainc."""
    f = 1.0 - s
    acc, f_pow = (s + n * f if n > r else np.ones_like(s)), f  # the two top terms: C(n, n) = 1, C(n, n-1) = n
    for i in range(n - r - 2, -1, -1):
        f_pow = f_pow * f
        acc = acc * s + math.comb(n, r + i) * f_pow
    return acc * s**r


def _rank_tail(model, n, r, x, upper):
    """Each point by the incomplete beta that keeps its digits: in S where S < 1/2, else in F.
    scipy's betaincc is about ten times slower than betainc, so the survival function
    takes S everywhere when r <= m: V ~ Beta(r, m) then has its mass below 1/2, and where
    S >= 1/2 (known to full precision) the answer is not small. With few terms there, the
    binomial sum replaces betainc."""
    m, r = n - r + 1.0, float(r)
    shape = np.shape(x)
    x = np.atleast_1d(np.asarray(x, float))
    s = np.broadcast_to(model.sf(x), x.shape)
    by_s = np.isfinite(s) if upper and r <= m else s < 0.5
    if by_s.all():
        if upper and n - r <= _BINOMIAL_MAX_STEPS:
            return _binomial_upper(n, int(r), s).reshape(shape)
        return (sp.betainc if upper else sp.betaincc)(r, m, s).reshape(shape)
    out = np.empty(x.shape)
    if by_s.any():
        out[by_s] = (sp.betainc if upper else sp.betaincc)(r, m, s[by_s])
    if not by_s.all():
        f = model.cdf(x[~by_s])
        out[~by_s] = (sp.betaincc if upper else sp.betainc)(m, r, f)
    return out.reshape(shape)


def rank_logpdf(model, n, r, x):
    """log density of rank r of n: log f + (n-r) log F + (r-1) log S - log B(n-r+1, r)."""
    m = n - r + 1.0
    with np.errstate(divide="ignore", invalid="ignore"):
        out = np.log(model.pdf(x)) - log_beta(m, float(r))
        if m > 1:
            out = out + (m - 1.0) * model.logcdf(x)
        if r > 1:
            out = out + (r - 1.0) * model.logsf(x)
    return np.where(np.isfinite(out), out, -np.inf)


def rank_curve(model, n, r, points):
    """pdf and cdf of rank r on ``points`` values across where its mass lies."""
    lo, hi = rank_quantiles(model, n, r, [5e-4, 1 - 5e-4])
    lo = max(float(lo), model.lower)
    hi = min(float(hi), model.upper)
    x = np.linspace(lo, hi, points) if hi > lo else np.full(points, lo)
    return x, np.exp(rank_logpdf(model, n, r, x)), rank_cdf(model, n, r, x)


def joint_logdensity(model, n, i, j, x, y):
    """log joint density of ranks i < j (x the higher, y the lower), -inf where y > x.

    n! / ((n-j)! (j-i-1)! (i-1)!) F(y)^(n-j) (F(x)-F(y))^(j-i-1) S(x)^(i-1) f(x) f(y)
    (David and Nagaraja, 2003, eq. 2.2.1, in ranks from the top).
    """
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    logc = math.fsum(math.log(n - q) for q in range(j)) - math.lgamma(j - i) - math.lgamma(i)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = logc + np.log(model.pdf(x)) + np.log(model.pdf(y))
        if n - j > 0:
            out = out + (n - j) * model.logcdf(y)
        if i > 1:
            out = out + (i - 1) * model.logsf(x)
        if j - i > 1:
            sy, sx = model.sf(y), model.sf(x)
            diff = np.where(sy < 0.5, sy - sx, model.cdf(x) - model.cdf(y))
            out = out + (j - i - 1) * np.log(np.maximum(diff, 0.0))
    out = np.where(y <= x, out, -np.inf)
    return np.where(np.isfinite(out), out, -np.inf)
