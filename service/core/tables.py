"""Tables of log F and log S for value models whose every evaluation is expensive.

A mixture of many components, or a kernel density through thousands of past values,
costs a sum over all its terms at every point, and a request evaluates its CDF at
tens of thousands of points (every quantile is a Newton search). :class:`LogTable`
evaluates the exact functions once per model, at the nodes of panels that are halved
until a piecewise Chebyshev interpolant of degree 16 reproduces them, and answers
every later cdf, sf and quantile from the interpolants. Below a split point (near
F = 1/2) a panel holds log F, above it log S, so both tails keep their relative
precision. A panel is accepted when its interpolant meets the exact function at eight
check points between the nodes to 1e-15 of max(1, |log F|) (|log S| above the split),
plus what rounding x alone moves log F by; it then agrees with the exact function to
within a small multiple of that, relative in F (S). The table stops where log F (log S)
falls below -55 (about 1e-24). On the test models the relative error is about 3e-16
(median), at most about 1e-14 in the bulk and 3e-13 in the deepest panels (tests/
test_expensive_models.py holds it to 8e-15 of max(1, |log F|)). A panel that does not converge by the time it is
halved to a sliver (a power-law endpoint, where log F has a singularity) is marked
exact, and points there, or outside the table, go to the exact functions.
"""
from __future__ import annotations

import math

import numpy as np
from numpy.polynomial import chebyshev as C

from . import budget

DEGREE = 16
_J = np.arange(DEGREE + 1)
NODES = np.cos(np.pi * (_J + 0.5) / (DEGREE + 1))  # Chebyshev points of the first kind
# Coefficients of the interpolant through the values at NODES: values @ _TO_COEFFS.
_TO_COEFFS = (2.0 / (DEGREE + 1)) * np.cos(np.pi * np.outer(_J + 0.5, _J) / (DEGREE + 1))
_TO_COEFFS[:, 0] *= 0.5
# Check points halfway (in angle) between every other pair of neighbouring nodes, and
# the map from the node values to the interpolant's values there.
CHECKS = np.cos(np.pi * np.arange(1, DEGREE + 1, 2) / (DEGREE + 1))
_TO_CHECKS = _TO_COEFFS @ C.chebvander(CHECKS, DEGREE).T
_TOL = 1e-15
_MAX_DEPTH = 40
_DEEPEST = 55.0
_MAX_PANELS = 20000  # panels still failing past this many are left to the exact functions


def clenshaw(ct, s, slope=False):
    """Chebyshev series with coefficients ct (terms, points) at s (points), and with
    ``slope`` its derivative in s too (the differentiated recurrence alongside)."""
    two_s = 2.0 * s
    b1, b2 = ct[-1].copy(), np.zeros(s.shape)
    d1, d2 = np.zeros(s.shape), np.zeros(s.shape)
    for k in range(ct.shape[0] - 2, 0, -1):
        if slope:
            d1, d2 = two_s * d1 - d2 + 2.0 * b1, d1
        b1, b2 = two_s * b1 - b2 + ct[k], b1
    value = s * b1 - b2 + ct[0]
    return (value, b1 + s * d1 - d2) if slope else value


class LogTable:
    """Piecewise Chebyshev interpolants of log F (panels at or below ``split``) and
    log S (panels above it) over [seeds[0], seeds[-1]].

    ``log_cdf`` and ``log_sf`` are the model's exact functions, vectorised over 1-D
    arrays. ``split`` is one of the seeds."""

    def __init__(self, log_cdf, log_sf, seeds, split):
        self._exact = (log_cdf, log_sf)
        edges = np.unique(np.asarray(seeds, float)[np.isfinite(seeds)])
        self.split = float(split)
        # Only where log F (log S) is above -55: deeper, the rounding of |log F| itself
        # would cost the table its relative precision, and the exact sums take over.
        with np.errstate(all="ignore"):
            deep = self._log_exact(edges, edges <= self.split) < -_DEEPEST
        keep = np.nonzero(~deep)[0]
        if len(keep) and edges[keep[0]] <= self.split <= edges[keep[-1]]:
            ends = [self._reach(edges[keep[0]], edges[keep[0] - 1]) if keep[0] > 0 else edges[0],
                    self._reach(edges[keep[-1]], edges[keep[-1] + 1]) if keep[-1] < len(edges) - 1 else edges[-1]]
            edges = np.concatenate(([ends[0]], edges[keep[0]:keep[-1] + 1], [ends[1]]))
        else:
            edges = np.array([self.split, self.split])
        self.lo, self.hi = float(edges[0]), float(edges[-1])
        self.scale = max(abs(self.lo), abs(self.hi), 1e-300)
        a, b, coeffs, exact = self._build(edges[:-1], edges[1:])
        order = np.argsort(a)
        self.a, self.b, self.exact = a[order], b[order], exact[order]
        self.coeffs = np.ascontiguousarray(coeffs[order].T)  # (terms, panels)
        self.lower = self.b <= self.split  # panels holding log F (the others hold log S)
        self.mid, self.half = 0.5 * (self.a + self.b), 0.5 * (self.b - self.a)
        # Exact values at the panel ends, for finding the panel of a quantile, and the
        # interpolants' slopes there (in the panel's coordinate), for a first guess.
        self.end_a = self._log_exact(self.a, self.lower)
        self.end_b = self._log_exact(self.b, self.lower)
        ones = np.ones(len(self.a))
        self.slope_a = clenshaw(self.coeffs, -ones, slope=True)[1]
        self.slope_b = clenshaw(self.coeffs, ones, slope=True)[1]
        # Twice max |p''| / min |p'| over the nodes and ends: Newton's error after a step
        # of size d is about half that times d^2, so a step that small is the last.
        at = C.chebvander(np.concatenate(([-1.0], NODES, [1.0])), DEGREE)
        first = at[:, :-1] @ C.chebder(self.coeffs)
        second = at[:, :-2] @ C.chebder(self.coeffs, 2)
        with np.errstate(all="ignore"):
            self.curvature = 2.0 * np.max(np.abs(second), axis=0) / np.min(np.abs(first), axis=0)
        self.f_split = math.exp(float(self._exact[0](np.array([self.split]))[0]))

    def _reach(self, inside, outside):
        """The point between a seed where log F (log S) is above -55 and one where it is
        below, as far out as it stays above: three rounds of 16 exact evaluations."""
        lower = np.full(16, outside < self.split)
        for _ in range(3):
            x = np.linspace(inside, outside, 18)[1:-1]
            with np.errstate(all="ignore"):
                above = self._log_exact(x, lower) >= -_DEEPEST
            k = int(np.count_nonzero(np.cumprod(above)))  # the leading run still above
            inside, outside = (x[k - 1] if k else inside), (x[k] if k < len(x) else outside)
        return inside

    def _log_exact(self, x, lower):
        out = np.empty(x.shape)
        if lower.any():
            out[lower] = self._exact[0](x[lower])
        if not lower.all():
            out[~lower] = self._exact[1](x[~lower])
        return out

    def _build(self, a, b):
        """Halve every panel until its interpolant matches the exact function at the check
        points, or mark it exact."""
        done = []
        points = np.concatenate((NODES, CHECKS))
        for depth in range(_MAX_DEPTH):
            budget.check()
            if len(a) == 0:
                break
            mid, half = 0.5 * (a + b), 0.5 * (b - a)
            x = mid[:, None] + half[:, None] * points
            with np.errstate(all="ignore"):
                vals = self._log_exact(x.ravel(), np.repeat(b <= self.split, len(points))).reshape(x.shape)
                # The series of the values less their mean, so that its rounding scales
                # with the panel's variation rather than with |log F|.
                mean = np.mean(vals[:, :len(NODES)], axis=1, keepdims=True)
                rel = vals[:, :len(NODES)] - mean
                checks = vals[:, len(NODES):]
                miss = np.abs(rel @ _TO_CHECKS - (checks - mean))
                # Allowed at each check: 1e-15 of max(1, |log F|) there, plus what rounding
                # x alone moves log F by (|x| eps |d log F / dx|), which no table can beat.
                slope = np.ptp(vals, axis=1, keepdims=True) / np.maximum(2.0 * half[:, None], 1e-300)
                allowed = _TOL * np.maximum(1.0, np.abs(checks)) + 4e-16 * np.abs(x[:, len(NODES):]) * slope
                # Halved a dozen times and within 8 times the allowance: rounding in the exact
                # values themselves, which more halving does not remove.
                noisy = depth >= 12
                good = np.isfinite(vals).all(axis=1) & np.all(miss <= (8.0 if noisy else 1.0) * allowed, axis=1)
                coeffs = rel @ _TO_COEFFS
                coeffs[:, 0] += mean[:, 0]
            sliver = (half <= 1e-13 * np.maximum(np.abs(mid), self.scale * 1e-3)) | (len(a) > _MAX_PANELS)
            done.append((a[good], b[good], coeffs[good], np.zeros(np.count_nonzero(good), bool)))
            stop = ~good & sliver
            done.append((a[stop], b[stop], np.zeros((np.count_nonzero(stop), len(NODES))), np.ones(np.count_nonzero(stop), bool)))
            split = ~good & ~sliver
            a, b = np.concatenate((a[split], mid[split])), np.concatenate((mid[split], b[split]))
        done.append((a, b, np.zeros((len(a), len(NODES))), np.ones(len(a), bool)))
        return tuple(np.concatenate(parts) for parts in zip(*done))

    def covers(self, x):
        """Points inside the table, on panels that are not marked exact."""
        inside = (x >= self.lo) & (x <= self.hi)
        p = self._panel(np.where(inside, x, self.lo))
        return inside & ~self.exact[p]

    def _panel(self, x):
        return np.clip(np.searchsorted(self.a, x, side="right") - 1, 0, len(self.a) - 1)

    def log_values(self, x):
        """(log F or log S, which) at points that ``covers``: which is True for log F."""
        p = self._panel(x)
        # Clipped: on a panel a few ulps wide (seeds that nearly coincide, such as a kink
        # and a probe value next to it), rounding x - mid puts its ends outside [-1, 1],
        # where the series would be extrapolated.
        s = np.clip((x - self.mid[p]) / self.half[p], -1.0, 1.0)
        return clenshaw(self.coeffs[:, p], s), self.lower[p]

    def cdf_sf(self, x):
        """(F, S) at points that ``covers``."""
        lv, lower = self.log_values(x)
        e, m = np.exp(lv), -np.expm1(lv)
        return np.where(lower, e, m), np.where(lower, m, e)

    def locate(self, u, v):
        """For targets F = u (S = v): the panel holding each, the log target there, and
        whether the panel is interpolated; panel -1 for targets outside the table
        (-2 below its low end, -1 above its high end)."""
        lower = u < self.f_split
        with np.errstate(divide="ignore"):
            target = np.where(lower, np.log(np.where(lower, u, 1.0)), np.log(np.where(lower, 1.0, v)))
        n_low = int(np.count_nonzero(self.lower))
        p_low = np.searchsorted(self.end_b[:n_low], target, side="left")
        # Above the split log S falls as x rises: search its negation.
        p_up = n_low + np.searchsorted(-self.end_b[n_low:], -target, side="left")
        p = np.where(lower, p_low, p_up)
        below = lower & (target < self.end_a[0]) if n_low else np.zeros(u.shape, bool)
        above = p >= len(self.a)
        p = np.where(below, -2, np.where(above, -1, p))
        return p, target

    def invert(self, p, target):
        """x on interpolated panels p where the interpolant meets the log target, by
        Newton's method in the panel's coordinate s, bisecting where a step leaves
        [-1, 1]; the first guess is the inverse cubic Hermite interpolant through the
        panel's end values and slopes."""
        rising = np.where(self.lower[p], 1.0, -1.0)
        ct = self.coeffs[:, p]
        s = self._first_guess(p, target)
        lo, hi = -np.ones(p.shape), np.ones(p.shape)
        out = s.copy()
        live = np.arange(len(s))
        tol = 4e-16 * np.maximum(np.abs(self.mid[p]), 1e-300) / self.half[p]
        curvature = self.curvature[p]
        for _ in range(100):
            value, deriv = clenshaw(ct, s, slope=True)
            g = rising * (value - target)
            lo, hi = np.where(g < 0, s, lo), np.where(g < 0, hi, s)
            with np.errstate(all="ignore"):
                step = g / (rising * deriv)
                small = (np.abs(step) <= tol) | (0.5 * curvature * step * step <= tol)
            new = s - step
            ok = np.isfinite(new) & (small | ((new > lo) & (new < hi)))
            new = np.where(ok, new, 0.5 * (lo + hi))
            out[live] = new
            going = ~(small | (np.abs(new - s) <= tol) | (hi - lo <= tol))
            if not going.any():
                break
            live, s, lo, hi, target, rising = live[going], new[going], lo[going], hi[going], target[going], rising[going]
            ct, tol, curvature = ct[:, going], tol[going], curvature[going]
        x = self.mid[p] + self.half[p] * np.clip(out, -1.0, 1.0)
        return np.clip(x, self.a[p], self.b[p])

    def _first_guess(self, p, target):
        """s(L) by cubic Hermite interpolation between the panel's ends, clipped to [-1, 1]."""
        ea, eb = self.end_a[p], self.end_b[p]
        with np.errstate(all="ignore"):
            span = eb - ea
            t = (target - ea) / span
            t2, t3 = t * t, t * t * t
            s = (-(2 * t3 - 3 * t2 + 1) + (-2 * t3 + 3 * t2) + (t3 - 2 * t2 + t) * span / self.slope_a[p]
                 + (t3 - t2) * span / self.slope_b[p])
        return np.where(np.isfinite(s), np.clip(s, -1.0, 1.0), 0.0)
