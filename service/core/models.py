"""Bidder-value models: one class per family.

As in scipy.stats, the base class carries a generic numerical route
(numerical inversion of the CDF, logs of the CDF and survival function) and each
family overrides what it knows in closed form. Everything is vectorised over
numpy arrays; nothing here builds a scipy frozen distribution, because those are
slow to build and every request builds its own model.

Each family declares its parameters once (``parameters``); the web layer builds
its request schema from that declaration and the constructors check the rules
that tie parameters together, raising :class:`ParameterError` with the field.
"""
from __future__ import annotations

import functools
import inspect
import math
from dataclasses import dataclass

import numpy as np
from scipy import special as sp

from . import budget
from .errors import ParameterError
from .tables import LogTable

INF = math.inf


@dataclass(frozen=True)
class Param:
    """A family parameter: ``bound`` is ``'positive'``, ``'nonnegative'`` or None.

    ``reliable`` is the closed range (None for no limit on that side) within which the
    answers were measured against 30-digit references (tests/test_reliable_ranges.py);
    outside it the constructor refuses the value rather than answer unreliably.
    """

    required: bool = True
    default: float | None = None
    bound: str | None = None
    reliable: tuple = (None, None)
    #: What the parameter does, for anything that draws example values (the property tests):
    #: "location" (moves the values), "scale" (stretches them, positive), "shape", or None
    #: for a parameter set by a tie (a support's upper end, a mode).
    role: str | None = None
    #: For a shape, the range its ordinary values span, and whether to draw it on a log scale.
    typical: tuple | None = None


#: The smallest scale (an sd, a scale, a width) taken: below it values are subnormal
#: numbers, which carry only a few digits, and densities 1/scale overflow.
MIN_SCALE = 1e-300
#: The largest value the quadratures meet: they reach quantiles 1e-300 from either end,
#: so the value there must be finite for any mean or quantile to be trusted.
MAX_VALUE = 1e308
_SCALE = Param(bound="positive", reliable=(MIN_SCALE, None), role="scale")
_LOCATION = Param(role="location")


@dataclass(frozen=True)
class Ordered:
    """A tie between parameters: ``high`` exceeds ``low`` by at least MIN_SCALE (a support's ends)."""

    low: str = "low"
    high: str = "high"

    def check(self, v):
        if not v[self.high] > v[self.low]:
            raise ParameterError(self.high, f"must be greater than {self.low}")
        if not v[self.high] - v[self.low] >= MIN_SCALE:
            raise ParameterError(self.high, f"must exceed {self.low} by at least {MIN_SCALE:g}: narrower ranges are not reliable")


@dataclass(frozen=True)
class Between:
    """A tie between parameters: ``name`` lies in [``low``, ``high``] (a mode)."""

    name: str
    low: str = "low"
    high: str = "high"

    def check(self, v):
        if not v[self.low] <= v[self.name] <= v[self.high]:
            raise ParameterError(self.name, f"must lie between {self.low} and {self.high}")


def _check_forms(forms, v):
    """Exactly one of a family's alternative parameterisations, given whole."""
    touched = [f for f in forms if any(v.get(k) is not None for k in f)]
    if len(touched) > 1:
        raise ParameterError(forms[0][0], f"give {', or '.join(' and '.join(f) for f in forms)}, not both")
    if not touched:
        raise ParameterError(forms[0][0], f"give {', or '.join(' and '.join(f) for f in forms)}")
    form = touched[0]
    for k in form:
        if v.get(k) is None:
            raise ParameterError(k, "required with " + " and ".join(x for x in form if x != k))


_init_signature = functools.lru_cache(maxsize=None)(inspect.signature)


class ValueModel:
    """A continuous (or, for the step empirical, discrete) distribution of values.

    Subclasses set ``lower``/``upper`` (the support) and override
    ``cdf``/``sf``/``pdf`` and, where known in closed form, ``ppf``/``isf``.
    """

    family = "abstract"
    #: The family's parameters, each a Param (a parametric family declares its own).
    parameters: dict = {}
    #: The rules that tie its parameters (``Ordered``, ``Between``), checked once for every family.
    ties: tuple = ()
    #: Alternative parameterisations, each a tuple of names, of which exactly one is given whole
    #: (a lognormal by median and sigma, or by mean and sd); () when the parameters are one set.
    forms: tuple = ()
    lower = -INF
    upper = INF

    def __new__(cls, *args, **kwargs):
        # The constructor's arguments, kept as given, so that ``to_params`` can write the
        # model back as the JSON a user would send; ``_given`` holds them by name.
        self = super().__new__(cls)
        try:
            bound = _init_signature(cls.__init__).bind(None, *args, **kwargs)
        except TypeError:  # a copy (copy.copy calls __new__ with no arguments, then restores the state)
            return self
        bound.apply_defaults()
        self._given = {k: v for k, v in bound.arguments.items() if k != "self"}
        cls.check_declared(self._given)
        return self

    @classmethod
    def check_declared(cls, given):
        """Refuse, naming the parameter, what the declarations rule out: a value outside its
        reliable range, an incomplete or doubled parameterisation, a broken tie."""
        for name, p in cls.parameters.items():
            x = given.get(name)
            lo, hi = p.reliable
            if x is None or (lo is None or x >= lo) and (hi is None or x <= hi):
                continue
            span = f"at least {lo:g}" if hi is None else f"at most {hi:g}" if lo is None else f"between {lo:g} and {hi:g}"
            raise ParameterError(name, f"must be {span}: outside that range the answers are not reliable "
                                       "(the range was measured against 30-digit references)")
        if cls.forms:
            _check_forms(cls.forms, given)
        for tie in cls.ties:
            tie.check(given)

    def to_params(self):
        """The JSON object a user would send to build this model (a parametric family: its
        parameters as given, defaults included; derived models say how to write them)."""
        return {"family": self.family, **{k: _plain(v) for k, v in self._given.items()
                                          if k in self.parameters and v is not None}}
    #: Power-law index of each tail (P(X > x) ~ x^-alpha); inf for lighter tails.
    upper_tail_index = INF
    lower_tail_index = INF
    discrete = False
    #: A step model's equally likely atoms (sorted) and their number; a continuous model has none.
    atoms = None
    N = 0
    #: Whether ppf/isf are closed forms (cheap enough to probe the tails with).
    cheap_quantiles = True
    #: Whether ``closed_rank_moments`` goes through log-gamma ratios (their rounding grows with log n).
    closed_form_logs = False
    #: For a family whose values are a fixed increasing map of one parameter-free
    #: quantile function: that function, (u, v) -> standard value. Then
    #: value_at(u, v) == from_standard(standard_quantile(u, v)), and a quadrature
    #: keeps the standard values at its fixed nodes instead of recomputing them.
    standard_quantile = None

    def from_standard(self, z):
        raise NotImplementedError

    def closed_rank_moments(self, n, r):
        """(mean, variance) of rank r from the top of n in closed form; None where the family has none."""
        return None

    # --- to be overridden -------------------------------------------------
    def cdf(self, x):
        raise NotImplementedError

    def sf(self, x):
        return 1.0 - self.cdf(x)

    def pdf(self, x):
        raise NotImplementedError

    def kink_values(self):
        """Interior values where the quantile function is not smooth."""
        return []

    # --- generic routes -----------------------------------------------------
    def logcdf(self, x):
        with np.errstate(divide="ignore"):
            return np.log(self.cdf(x))

    def logsf(self, x):
        with np.errstate(divide="ignore"):
            return np.log(self.sf(x))

    def neg_log_cdf(self, x):
        """-log F(x), precise in the upper tail where F is near 1 (inf where F = 0)."""
        s, f = self.sf(x), self.cdf(x)
        with np.errstate(divide="ignore"):
            return np.where(s < 0.5, -np.log1p(-np.minimum(s, 0.5)), -np.log(f))

    def ppf(self, u):
        """Quantile function; generic route inverts the CDF numerically."""
        u = np.asarray(u, dtype=float)
        return self._invert(u, np.clip(1.0 - u, 0.0, 1.0), use_sf=False)

    def isf(self, v):
        """Inverse survival function, accurate where v is tiny (the upper tail)."""
        v = np.asarray(v, dtype=float)
        return self._invert(np.clip(1.0 - v, 0.0, 1.0), v, use_sf=True)

    def value_at(self, u, v):
        """Value with cdf u and survival v (u + v = 1), from whichever is precise."""
        u = np.asarray(u, dtype=float)
        v = np.asarray(v, dtype=float)
        upper = v < 0.5
        out = np.empty(np.broadcast(u, v).shape)
        if upper.any():
            out[upper] = self.isf(v[upper])
        if not upper.all():
            out[~upper] = self.ppf(u[~upper])
        return out

    def value_parts(self, u, v):
        """(anchor, delta) with Q(u) = anchor + delta: the anchor one of the model's own
        parameters near the value (an end of the support, a location), the delta computed
        from u and v without forming Q. Differences of nearby values (a spread, a shading)
        then keep their digits however far the model sits from zero. The generic anchor is 0."""
        return 0.0, self.value_at(u, v)

    def inverse_hazard(self, u, v, anchor, delta):
        """S(x) / f(x) = (1 - u) Q'(u), the reciprocal of the hazard rate, at the nodes
        (u, v = 1 - u) whose value parts are (anchor, delta), to full relative precision:
        integrals of spacings (a gap, a surplus, a bid's shading) are integrals of it. Taken
        as one quantity, since S and f both vanish in an upper tail where their ratio does
        not. None where the family does not know it so (a mixture or a kernel density, whose
        density can underflow between clusters): callers then fall back to differences of
        values."""
        return None

    def kinks_u(self):
        """Cumulative probabilities of the kinks, strictly inside (0, 1)."""
        ks = [k for k in self.kink_values() if self.lower < k < self.upper]
        if not ks:
            return np.empty(0)
        u = np.asarray(self.cdf(np.asarray(ks, dtype=float)), dtype=float)
        return np.unique(u[(u > 0.0) & (u < 1.0)])

    def _bracket(self, u, v):
        """Values known to lie below and above the target quantiles."""
        raise NotImplementedError

    def _invert(self, u, v, use_sf, bracket=None):
        """Safeguarded Newton on F(x) = u (or S(x) = v), vectorised, inside ``bracket``
        (lo, hi) or the model's own ``_bracket``."""
        with np.errstate(all="ignore"):
            return self._newton(u, v, use_sf, bracket)

    def _newton(self, u, v, use_sf, bracket=None):
        """Newton steps on log F = log u (log S = log v) inside a shrinking bracket,
        bisecting where a step leaves it. In log space a tail, where F falls like e^-x
        or faster, takes a step or two rather than one e-fold a step; near the root the
        step is the plain Newton step (F - u) / f. A point is done once its step is below
        rounding (where F(x) meets the target to the last digit the step lands on a
        bracket end, and is then taken as it is, not bisected away from), and is
        dropped from the later steps."""
        lo, hi = self._bracket(u, v) if bracket is None else bracket
        shape = np.shape(u)
        lo = np.array(np.broadcast_to(lo, shape), dtype=float).ravel()
        hi = np.array(np.broadcast_to(hi, shape), dtype=float).ravel()
        x = _middle(lo, hi)
        target = np.ravel(v if use_sf else u)
        sign = -1.0 if use_sf else 1.0
        live = np.arange(x.size)
        xa = x.copy()
        for _ in range(200):
            budget.check()
            p = self.sf(xa) if use_sf else self.cdf(xa)
            below = sign * (p - target) < 0
            lo, hi = np.where(below, xa, lo), np.where(below, hi, xa)
            step = sign * np.log(p / target) * p / self.pdf(xa)
            # Across a bracket of decades (a tail) the step is taken in log x, which a
            # power-law tail (F ~ x^k near a bound, S ~ x^-a far out) makes exact.
            newton = np.where(_wide(lo, hi), xa * np.exp(-step / xa), xa - step)
            step = xa - newton
            tol = 4e-16 * np.maximum(np.abs(xa), 1e-300)
            small = np.abs(step) <= tol
            ok = np.isfinite(newton) & (small | ((newton > lo) & (newton < hi)))
            x_new = np.where(ok, newton, _middle(lo, hi))
            x[live] = x_new
            going = ~(small | (np.abs(x_new - xa) <= tol) | (hi - lo <= 4e-16 * np.abs(x_new)))
            if not going.any():
                break
            live, xa, lo, hi, target = live[going], x_new[going], lo[going], hi[going], target[going]
        x = x.reshape(shape)
        x = np.where(u <= 0.0, self.lower, x)
        x = np.where(v <= 0.0, self.upper, x)
        return x


def _wide(lo, hi):
    """Brackets spanning more than a factor of 4 on one side of zero (a tail searched
    over many decades)."""
    with np.errstate(all="ignore"):
        return (lo * hi > 0) & (np.maximum(lo / hi, hi / lo) > 4.0)


def _middle(lo, hi):
    """The bisection point of brackets: geometric where a bracket is wide, else arithmetic."""
    with np.errstate(all="ignore"):
        return np.where(_wide(lo, hi), np.sign(lo) * np.sqrt(lo * hi), 0.5 * (lo + hi))


_STIRLING = (1 / 12, -1 / 360, 1 / 1260, -1 / 1680, 1 / 1188)


def log_gamma_ratio(x, c):
    """log G(x + c) - log G(x), x > 0 and x + c > 0, to full precision even where
    both log-gammas are huge (x ~ 10^6), where their plain difference loses ~10 digits."""
    shift = 0.0
    while x < 20.0 or x + c < 20.0:  # recurrence G(y + 1) = y G(y) up to where Stirling is exact
        shift -= math.log1p(c / x) if abs(c / x) < 0.5 else math.log((x + c) / x)
        x += 1.0
    main = c * math.log(x) + (x + c - 0.5) * math.log1p(c / x) - c
    series = sum(b * ((x + c) ** (1 - 2 * k) - x ** (1 - 2 * k)) for k, b in enumerate(_STIRLING, start=1))
    return main + series + shift


def _positive_pdf(logpdf):
    with np.errstate(over="ignore"):
        return np.exp(logpdf)


def _neg_log_sf(u, v):
    """-log v = -log(1 - u), from whichever of u and v holds its digits."""
    u, v = np.asarray(u, float), np.asarray(v, float)
    top = v < 0.5
    with np.errstate(divide="ignore"):
        return np.where(top, -np.log(np.where(top, v, 1.0)), -np.log1p(-np.where(top, 0.0, u)))


_DIP_PROBS = np.array([1e-12, 1e-9, 1e-6, 1e-4, 1e-3, 0.01, 0.05, 0.15, 0.3, 0.5, 0.7, 0.85, 0.95, 0.99,
                       0.999, 1 - 1e-4, 1 - 1e-6, 1 - 1e-9, 1 - 1e-12])


def density_dips(pdf, grid):
    """Local minima of a density, found on a grid of values and refined together by a
    golden-section search of log f (clipped where f underflows, so a wide gap gives a
    point inside it).

    Q'(u) = 1/f(Q(u)), so at a deep dip between far-apart clusters Q nearly jumps:
    the rise across the gap happens within a stretch of u far shorter than any panel,
    and no rule on a panel across it resolves it. Panels split there, as at a kink.
    """
    x = np.unique(np.asarray(grid, float)[np.isfinite(grid)])
    if len(x) < 3:
        return []

    def log_f(z):
        return np.log(np.maximum(pdf(z), 1e-300))

    lf = log_f(x)
    i = np.nonzero((lf[1:-1] < lf[:-2]) & (lf[1:-1] <= lf[2:]))[0] + 1
    if len(i) == 0:
        return []
    g = 0.5 * (math.sqrt(5.0) - 1.0)
    a, b = x[i - 1], x[i + 1]
    c, d = b - g * (b - a), a + g * (b - a)
    fc, fd = log_f(c), log_f(d)
    for _ in range(60):  # each step keeps 0.618 of every bracket: 60 reach 3e-13 of it
        left = fc <= fd  # the minimum lies in [a, d]; otherwise in [c, b]
        a, b = np.where(left, a, c), np.where(left, d, b)
        keep, f_keep = np.where(left, c, d), np.where(left, fc, fd)  # the surviving inner point
        new = np.where(left, b - g * (b - a), a + g * (b - a))
        f_new = log_f(new)
        c, fc = np.where(left, new, keep), np.where(left, f_new, f_keep)
        d, fd = np.where(left, keep, new), np.where(left, f_keep, f_new)
    best, f_best = np.where(fc <= fd, c, d), np.minimum(fc, fd)
    return [float(v) for v in np.where(f_best <= lf[i], best, x[i])]


class Uniform(ValueModel):
    family = "uniform"
    parameters = {"low": _LOCATION, "high": Param()}
    ties = (Ordered(),)

    def __init__(self, low, high):
        self.low, self.high = float(low), float(high)
        self.lower, self.upper = self.low, self.high
        self.width = self.high - self.low

    def cdf(self, x):
        return np.clip((np.asarray(x, float) - self.low) / self.width, 0.0, 1.0)

    def sf(self, x):
        return np.clip((self.high - np.asarray(x, float)) / self.width, 0.0, 1.0)

    def pdf(self, x):
        x = np.asarray(x, float)
        return np.where((x >= self.low) & (x <= self.high), 1.0 / self.width, 0.0)

    def ppf(self, u):
        return self.low + self.width * np.asarray(u, float)

    def isf(self, v):
        return self.high - self.width * np.asarray(v, float)

    def value_parts(self, u, v):
        """Measured from the nearer end: high - width v in the upper half, low + width u below."""
        top = np.asarray(v, float) < 0.5
        return np.where(top, self.high, self.low), np.where(top, -self.width * np.asarray(v, float), self.width * np.asarray(u, float))

    def inverse_hazard(self, u, v, anchor, delta):
        return self.width * np.asarray(v, float)

    def closed_rank_moments(self, n, r):
        """Rank r from the top is low + width * Beta(n-r+1, r)."""
        a, b = n - r + 1.0, float(r)
        mean = self.low + self.width * a / (a + b)
        var = self.width**2 * a * b / ((a + b) ** 2 * (a + b + 1.0))
        return mean, var


def standard_normal_at(u, v):
    """z with Phi(z) = u and 1 - Phi(z) = v: one ndtri call on the smaller tail
    probability, so both tails stay precise."""
    z = sp.ndtri(np.minimum(u, v))
    return np.where(v < 0.5, -z, z)


class _StandardNormalScale(ValueModel):
    """Families whose CDF is Phi(z(x)) for an increasing z: their probabilities
    and log-probabilities come from scipy's ndtr and log_ndtr."""

    standard_quantile = staticmethod(standard_normal_at)

    def cdf(self, x):
        return sp.ndtr(self._z(x))

    def sf(self, x):
        return sp.ndtr(-self._z(x))

    def logcdf(self, x):
        return sp.log_ndtr(self._z(x))

    def logsf(self, x):
        return sp.log_ndtr(-self._z(x))

    def value_at(self, u, v):
        return self.from_standard(standard_normal_at(np.asarray(u, dtype=float), np.asarray(v, dtype=float)))

    def value_parts(self, u, v):
        return self.parts_from_standard(standard_normal_at(np.asarray(u, dtype=float), np.asarray(v, dtype=float)))

    def ppf(self, u):
        return self.from_standard(sp.ndtri(u))

    def isf(self, v):
        return self.from_standard(-sp.ndtri(v))


class Normal(_StandardNormalScale):
    family = "normal"
    parameters = {"mean": _LOCATION, "sd": _SCALE}

    def __init__(self, mean, sd):
        self.mu, self.sd = float(mean), float(sd)

    def _z(self, x):
        return (np.asarray(x, float) - self.mu) / self.sd

    def pdf(self, x):
        z = self._z(x)
        return np.exp(-0.5 * z * z) / (self.sd * math.sqrt(2 * math.pi))

    def from_standard(self, z):
        return self.mu + self.sd * z

    def parts_from_standard(self, z):
        """Measured from the mean: sd z, whatever the mean."""
        return self.mu, self.sd * z

    def inverse_hazard(self, u, v, anchor, delta):
        """sd v / phi(z), z = delta / sd (sd times Mills' ratio)."""
        z = delta / self.sd
        with np.errstate(over="ignore", divide="ignore"):
            return self.sd * math.sqrt(2 * math.pi) * np.exp(np.log(v) + 0.5 * z * z)


class LogNormal(_StandardNormalScale):
    family = "lognormal"
    parameters = {
        "median": Param(required=False, bound="positive", reliable=(MIN_SCALE, None), role="scale"),
        "sigma": Param(required=False, bound="positive", reliable=(None, 12.0), role="shape", typical=(0.1, 1.5, "linear")),
        "mean": Param(required=False, bound="positive", reliable=(MIN_SCALE, None), role="scale"),
        "sd": Param(required=False, bound="positive", reliable=(MIN_SCALE, None)),
    }
    forms = (("median", "sigma"), ("mean", "sd"))
    lower = 0.0

    def __init__(self, median=None, sigma=None, mean=None, sd=None):
        by_median = median is not None  # the declared forms are checked already: exactly one is whole
        if by_median:
            self.mu, self.sigma = math.log(median), float(sigma)
        else:
            ratio = sd / mean
            # log(1 + ratio^2), written so that a huge ratio cannot overflow
            s2 = math.log1p(ratio * ratio) if ratio < 1e100 else 2.0 * math.log(ratio)
            self.mu, self.sigma = math.log(mean) - 0.5 * s2, math.sqrt(s2)
        self._check_sigma("sigma" if by_median else "sd")

    def _check_sigma(self, field):
        """sigma at most 12, and the value 1e-300 from the top, e^(mu + 37.05 sigma), finite."""
        sigma_max = self.parameters["sigma"].reliable[1]
        if self.sigma > sigma_max:
            raise ParameterError(field, f"gives a sigma (sd of the log) of {self.sigma:.6g}; it must be at most {sigma_max:g}: "
                                        "beyond, the answers are not reliable (measured against 30-digit references)")
        if self.mu + 37.05 * self.sigma > math.log(MAX_VALUE):
            raise ParameterError(field, "with this median, values a draw exceeds with chance 1e-300 pass 1e308; "
                                        "the answers are not reliable there: give a smaller sigma or median")

    def _z(self, x):
        with np.errstate(divide="ignore"):  # log 0 = -inf: no value at or below 0
            return (np.log(np.fmax(np.asarray(x, float), 0.0)) - self.mu) / self.sigma

    def pdf(self, x):
        x = np.asarray(x, float)
        z = self._z(x)
        with np.errstate(divide="ignore", invalid="ignore"):
            d = np.exp(-0.5 * z * z) / (np.where(x > 0, x, 1.0) * self.sigma * math.sqrt(2 * math.pi))
        return np.where(x > 0, d, 0.0)

    def from_standard(self, z):
        return np.exp(self.mu + self.sigma * z)

    #: Up to this sigma the values are measured from the median e^mu: even 8 sds out they
    #: lie within a factor e^0.8 of it, so a narrow lognormal keeps its spread. Wider
    #: lognormals are measured from 0, which keeps the relative digits of small values.
    _NARROW = 0.1

    def parts_from_standard(self, z):
        e = self.sigma * np.asarray(z, float)
        if self.sigma > self._NARROW:
            with np.errstate(over="ignore"):  # beyond the double range: the callers say so
                return 0.0, np.exp(self.mu + e)
        median = math.exp(self.mu)
        return median, median * np.expm1(e)

    def inverse_hazard(self, u, v, anchor, delta):
        """sigma x v / phi(z), with sigma z recovered from the parts to full precision."""
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            e = np.log(delta) - self.mu if self.sigma > self._NARROW else np.log1p(delta / anchor)
            z = e / self.sigma
            return self.sigma * math.sqrt(2 * math.pi) * np.exp(np.log(v) + self.mu + e + 0.5 * z * z)


class Exponential(ValueModel):
    family = "exponential"
    parameters = {"mean": _SCALE, "shift": Param(required=False, default=0.0, role="location")}

    def __init__(self, mean, shift=0.0):
        self.scale, self.shift = float(mean), float(shift)
        self.lower = self.shift

    def _y(self, x):
        return np.maximum((np.asarray(x, float) - self.shift) / self.scale, 0.0)

    def cdf(self, x):
        return -np.expm1(-self._y(x))

    def sf(self, x):
        return np.exp(-self._y(x))

    def logsf(self, x):
        return -self._y(x)

    def pdf(self, x):
        x = np.asarray(x, float)
        return np.where(x >= self.shift, np.exp(-self._y(x)) / self.scale, 0.0)

    def ppf(self, u):
        return self.shift - self.scale * np.log1p(-np.asarray(u, float))

    def isf(self, v):
        with np.errstate(divide="ignore"):
            return self.shift - self.scale * np.log(np.asarray(v, float))

    def value_parts(self, u, v):
        return self.shift, self.scale * _neg_log_sf(u, v)

    def inverse_hazard(self, u, v, anchor, delta):
        return np.full(np.shape(delta), self.scale)

    def closed_rank_moments(self, n, r):
        """Renyi's representation: rank r from the top is a sum of Exp(mean/j), j = r..n."""
        if n - r < 2000:
            j = np.arange(r, n + 1, dtype=float)
            h1, h2 = float(np.sum(1.0 / j[::-1])), float(np.sum(1.0 / (j[::-1] ** 2)))
        else:
            h1 = float(sp.digamma(n + 1.0) - sp.digamma(float(r)))
            h2 = float(sp.polygamma(1, float(r)) - sp.polygamma(1, n + 1.0))
        return self.shift + self.scale * h1, self.scale**2 * h2


class Gamma(ValueModel):
    family = "gamma"
    # Below shape 0.01 a draw is 0 but with chance ~shape, and a reverse auction's payment (the
    # second-lowest of many such costs, 1e-77 at shape 1e-5 and 20 bidders) is lost to the sliver.
    parameters = {"shape": Param(bound="positive", reliable=(0.01, None), role="shape", typical=(0.5, 50.0, "log")), "scale": _SCALE}
    lower = 0.0

    def __init__(self, shape, scale):
        self.k, self.theta = float(shape), float(scale)
        self._lognorm = sp.gammaln(self.k) + self.k * math.log(self.theta)

    def _y(self, x):
        return np.maximum(np.asarray(x, float) / self.theta, 0.0)

    def cdf(self, x):
        return sp.gammainc(self.k, self._y(x))

    def sf(self, x):
        return sp.gammaincc(self.k, self._y(x))

    def pdf(self, x):
        x = np.asarray(x, float)
        with np.errstate(divide="ignore", invalid="ignore"):
            lp = sp.xlogy(self.k - 1.0, np.where(x > 0, x, 1.0)) - x / self.theta - self._lognorm
        return np.where(x > 0, _positive_pdf(lp), 0.0)

    def ppf(self, u):
        return self.theta * sp.gammaincinv(self.k, u)

    def isf(self, v):
        return self.theta * sp.gammainccinv(self.k, v)

    def inverse_hazard(self, u, v, anchor, delta):
        """v / f, from the log density (both vanish in the upper tail)."""
        x = np.maximum(anchor + delta, 1e-300)
        with np.errstate(divide="ignore", over="ignore"):
            return np.exp(np.log(v) - sp.xlogy(self.k - 1.0, x) + x / self.theta + self._lognorm)


class Weibull(ValueModel):
    family = "weibull"
    # Below shape 0.03 the value 1e-300 from the top, scale 690^(1/shape), can pass 1e308, and a
    # reverse auction among a million bidders loses its first-price route.
    parameters = {"shape": Param(bound="positive", reliable=(0.03, None), role="shape", typical=(0.5, 5.0, "linear")), "scale": _SCALE}
    lower = 0.0

    def __init__(self, shape, scale):
        self.k, self.lam = float(shape), float(scale)

    def _h(self, x):
        return np.maximum(np.asarray(x, float) / self.lam, 0.0) ** self.k

    def cdf(self, x):
        return -np.expm1(-self._h(x))

    def sf(self, x):
        return np.exp(-self._h(x))

    def logsf(self, x):
        return -self._h(x)

    def pdf(self, x):
        x = np.asarray(x, float)
        y = np.maximum(x / self.lam, 0.0)
        with np.errstate(divide="ignore", invalid="ignore"):
            d = self.k / self.lam * y ** (self.k - 1.0) * np.exp(-(y**self.k))
        return np.where(x > 0, d, 0.0)

    def ppf(self, u):
        return self.lam * (-np.log1p(-np.asarray(u, float))) ** (1.0 / self.k)

    def isf(self, v):
        with np.errstate(divide="ignore"):
            return self.lam * (-np.log(np.asarray(v, float))) ** (1.0 / self.k)

    def value_parts(self, u, v):
        """lam E^(1/k), E = -log v: measured from lam where the value is above lam e^-0.5
        (a large shape makes the model narrow around lam), else from 0."""
        with np.errstate(divide="ignore"):
            e = np.log(_neg_log_sf(u, v)) / self.k
        near = e > -0.5
        with np.errstate(over="ignore"):
            return np.where(near, self.lam, 0.0), self.lam * np.where(near, np.expm1(e), np.exp(e))

    def inverse_hazard(self, u, v, anchor, delta):
        """x / (k E), E = -log v."""
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            return (anchor + delta) / (self.k * _neg_log_sf(u, v))


class BetaValues(ValueModel):
    family = "beta"
    # Outside [0.01, 1e6] the incomplete beta's inverse slows by orders of magnitude and
    # the auction routes lose digits (1e-100 took 42 s and still came out wrong).
    parameters = {
        "alpha": Param(bound="positive", reliable=(0.01, 1e6), role="shape", typical=(0.5, 20.0, "log")),
        "beta": Param(bound="positive", reliable=(0.01, 1e6), role="shape", typical=(0.5, 20.0, "log")),
        "low": Param(required=False, default=0.0, role="location"),
        "high": Param(required=False, default=1.0),
    }
    ties = (Ordered(),)

    def __init__(self, alpha, beta, low=0.0, high=1.0):
        self.a, self.b = float(alpha), float(beta)
        self.lower, self.upper = float(low), float(high)
        self.width = self.upper - self.lower
        self._lognorm = sp.betaln(self.a, self.b) + math.log(self.width)
        self._f_mid = float(sp.betainc(self.a, self.b, 0.5))  # the cdf at the middle of [low, high]

    def _y(self, x):
        return np.clip((np.asarray(x, float) - self.lower) / self.width, 0.0, 1.0)

    def cdf(self, x):
        return sp.betainc(self.a, self.b, self._y(x))

    def sf(self, x):
        """I_{1-y}(b, a), the mirror Beta at the distance from high: the same function as
        scipy's betaincc, to rounding, at a tenth of its time (a fit evaluates it hundreds of times)."""
        return sp.betainc(self.b, self.a, np.clip((self.upper - np.asarray(x, float)) / self.width, 0.0, 1.0))

    def pdf(self, x):
        x = np.asarray(x, float)
        y = self._y(x)
        inside = (y > 0) & (y < 1)
        yy = np.where(inside, y, 0.5)
        lp = sp.xlogy(self.a - 1, yy) + sp.xlog1py(self.b - 1, -yy) - self._lognorm
        return np.where(inside, np.exp(lp), 0.0)

    def _inv(self, p, a, b):
        """y with I_y(a, b) = p; where scipy gives up in the far tail (p ~ 1e-30),
        the leading term of the tail, I_y ~ y^a / (a B(a, b))."""
        p = np.asarray(p, float)
        y = sp.betaincinv(a, b, p)
        # Where the answer underflows scipy gives NaN or the smallest normal number 2.2e-308,
        # which would break the order of quantiles that the leading term puts at 0.
        bad = (np.isnan(y) & (p < 1e-8)) | (y <= np.finfo(float).tiny)
        if np.any(bad):
            with np.errstate(divide="ignore"):  # p = 0: log 0 = -inf, and y = 0 as it should be
                y = np.where(bad, np.exp((np.log(np.where(bad, p, 1.0)) + math.log(a) + sp.betaln(a, b)) / a), y)
        return y

    def value_at(self, u, v):
        """Each value measured from the end it is nearer, so that neither end's digits are
        lost: from low where the cdf is below its value at the middle of the range (a beta
        of alpha 0.01 has most of its mass within 1e-40 of low, which high - width y would
        round to low), else from high as high - width y with y from the mirrored Beta(b, a)."""
        u, v = np.broadcast_arrays(np.asarray(u, float), np.asarray(v, float))
        out = np.empty(u.shape)
        low = u <= self._f_mid
        for part, a, b, p, q, end, sign in ((low, self.a, self.b, u, v, self.lower, 1.0),
                                            (~low, self.b, self.a, v, u, self.upper, -1.0)):
            if part.any():
                out[part] = end + sign * self.width * self._from_end(p[part], q[part], a, b)
        return out

    def _from_end(self, p, q, a, b):
        """y with I_y(a, b) = p = 1 - q, from whichever of p and q is below 1/2."""
        y = np.empty(p.shape)
        small = p < 0.5
        if small.any():
            y[small] = self._inv(p[small], a, b)
        if not small.all():
            y[~small] = sp.betainccinv(a, b, q[~small])
        return y

    def ppf(self, u):
        u = np.asarray(u, float)
        return self.value_at(u, 1.0 - u)

    def isf(self, v):
        v = np.asarray(v, float)
        return self.value_at(1.0 - v, v)

    def value_parts(self, u, v):
        """Measured from the nearer end: high - width y' in the upper half (y' from the
        mirrored Beta(b, a)), low + width y below."""
        u, v = np.asarray(u, float), np.asarray(v, float)
        top = v < 0.5
        delta = np.empty(np.broadcast(u, v).shape)
        if top.any():
            delta[top] = -self.width * self._inv(v[top], self.b, self.a)
        if not top.all():
            delta[~top] = self.width * self._inv(u[~top], self.a, self.b)
        return np.where(top, self.upper, self.lower), delta

    def inverse_hazard(self, u, v, anchor, delta):
        """v width / the Beta(a, b) density at y, with y and 1 - y each taken from the part
        that holds its digits."""
        top = anchor == self.upper
        y_part = np.abs(delta) / self.width  # y below the middle, 1 - y above it
        y, y1 = np.where(top, 1.0 - y_part, y_part), np.where(top, y_part, 1.0 - y_part)
        with np.errstate(divide="ignore", over="ignore"):
            return np.exp(np.log(v) + self._lognorm - sp.xlogy(self.a - 1, y) - sp.xlogy(self.b - 1, y1))


class Triangular(ValueModel):
    family = "triangular"
    parameters = {"low": _LOCATION, "mode": Param(), "high": Param()}
    ties = (Ordered(), Between("mode"))

    def __init__(self, low, mode, high):
        self.lower, self.c, self.upper = float(low), float(mode), float(high)
        self.w = self.upper - self.lower
        self.fc = (self.c - self.lower) / self.w
        self.fb = (self.upper - self.c) / self.w  # 1 - fc, without its rounding near fc = 1
        # the two sides' widths, never 0 in a denominator (a side of width 0 is never selected)
        self._a = max(self.c - self.lower, 5e-324)
        self._b = max(self.upper - self.c, 5e-324)

    def kink_values(self):
        return [self.c]

    # Every square is taken as a product of two ratios, (x - low)/w times (x - low)/(mode - low),
    # so that a width of 1e-200 neither underflows nor overflows anything.
    def _rise(self, x):
        with np.errstate(over="ignore", invalid="ignore"):
            return ((x - self.lower) / self.w) * ((x - self.lower) / self._a)

    def _fall(self, x):
        with np.errstate(over="ignore", invalid="ignore"):
            return ((self.upper - x) / self.w) * ((self.upper - x) / self._b)

    def cdf(self, x):
        x = np.clip(np.asarray(x, float), self.lower, self.upper)
        return np.where(x <= self.c, self._rise(x), 1.0 - self._fall(x))

    def sf(self, x):
        x = np.clip(np.asarray(x, float), self.lower, self.upper)
        return np.where(x < self.c, 1.0 - self._rise(x), self._fall(x))

    def pdf(self, x):
        x = np.asarray(x, float)
        with np.errstate(over="ignore", invalid="ignore"):
            d = np.where(x <= self.c, 2.0 * ((x - self.lower) / self._a) / self.w, 2.0 * ((self.upper - x) / self._b) / self.w)
        return np.where((x >= self.lower) & (x <= self.upper), d, 0.0)

    def ppf(self, u):
        u = np.asarray(u, float)
        left = self.lower + self.w * np.sqrt(np.maximum(u, 0) * self.fc)
        right = self.upper - self.w * np.sqrt(np.maximum(1 - u, 0) * self.fb)
        return np.where(u <= self.fc, left, right)

    def isf(self, v):
        v = np.asarray(v, float)
        left = self.lower + self.w * np.sqrt(np.maximum(1 - v, 0) * self.fc)
        right = self.upper - self.w * np.sqrt(np.maximum(v, 0) * self.fb)
        return np.where(v >= 1 - self.fc, left, right)

    def value_parts(self, u, v):
        """Measured from low left of the mode and from high right of it."""
        u, v = np.asarray(u, float), np.asarray(v, float)
        left = np.where(v < 0.5, v >= 1 - self.fc, u <= self.fc)
        rise = self.w * np.sqrt(np.maximum(u, 0) * self.fc)
        fall = self.w * np.sqrt(np.maximum(v, 0) * self.fb)
        return np.where(left, self.lower, self.upper), np.where(left, rise, -fall)

    def inverse_hazard(self, u, v, anchor, delta):
        """v times dx/du: w (c - low) / (2 (x - low)) left of the mode, w (high - c) / (2 (high - x))
        right of it (there v w (high - c) = (high - x)^2, so the product is (high - x) / 2)."""
        left = anchor == self.lower
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            return np.where(left, v * self.w * ((self.c - self.lower) / (2.0 * np.abs(delta))), 0.5 * np.abs(delta))


class Pareto(ValueModel):
    family = "pareto"
    parameters = {"shape": Param(bound="positive", role="shape", typical=(2.5, 6.0, "linear")), "minimum": _SCALE}
    closed_form_logs = True  # closed_rank_moments goes through log-gamma ratios

    def __init__(self, shape, minimum):
        self.alpha, self.xm = float(shape), float(minimum)
        self.lower = self.xm
        self.upper_tail_index = self.alpha

    def _logratio(self, x):
        x = np.maximum(np.asarray(x, float), self.xm)
        with np.errstate(divide="ignore"):  # x = inf: log 0 = -inf, S = 0
            return np.log(self.xm / x)

    def cdf(self, x):
        return -np.expm1(self.alpha * self._logratio(x))

    def sf(self, x):
        return np.exp(self.alpha * self._logratio(x))

    def logsf(self, x):
        return self.alpha * self._logratio(x)

    def pdf(self, x):
        x = np.asarray(x, float)
        return np.where(x >= self.xm, self.alpha / np.maximum(x, self.xm) * np.exp(self.alpha * self._logratio(x)), 0.0)

    def ppf(self, u):
        with np.errstate(over="ignore"):  # beyond 1e308 for a tiny shape: inf, which reports turn into null
            return self.xm * np.exp(-np.log1p(-np.asarray(u, float)) / self.alpha)

    def isf(self, v):
        with np.errstate(divide="ignore", over="ignore"):
            return self.xm * np.exp(-np.log(np.asarray(v, float)) / self.alpha)

    def value_parts(self, u, v):
        """xm e^(E / shape), E = -log v, measured from xm."""
        with np.errstate(over="ignore"):
            return self.xm, self.xm * np.expm1(_neg_log_sf(u, v) / self.alpha)

    def inverse_hazard(self, u, v, anchor, delta):
        """x / shape."""
        with np.errstate(over="ignore", invalid="ignore"):  # values beyond the double range: the callers say so
            return (anchor + delta) / self.alpha

    def closed_rank_moments(self, n, r):
        """E[X^p] for rank r from the top: xm^p G(n+1) G(r-p/a) / (G(r) G(n+1-p/a)).

        Returns None when the variance would lose digits to cancellation, so
        the caller takes the quadrature route instead.
        """
        def raw(p):
            c = p / self.alpha
            if r <= c:
                return None
            return self.xm**p * math.exp(log_gamma_ratio(n + 1.0 - c, c) - log_gamma_ratio(r - c, c))

        m1 = raw(1)
        if m1 is None:
            return None
        m2 = raw(2)
        if m2 is None:
            return m1, None
        var = m2 - m1 * m1
        if not var > 1e-4 * m1 * m1:
            return None
        return m1, var


class Power(ValueModel):
    family = "power"
    closed_form_logs = True  # closed_rank_moments goes through log-gamma ratios
    # Below exponent 0.01 a draw sits at low but for a sliver of chance, and a reverse auction's
    # payment (5e-231 at exponent 0.001 and 200 bidders) is lost to it.
    parameters = {
        "exponent": Param(bound="positive", reliable=(0.01, None), role="shape", typical=(0.3, 8.0, "log")),
        "high": Param(),
        "low": Param(required=False, default=0.0, role="location"),
    }
    ties = (Ordered(),)

    def __init__(self, exponent, high, low=0.0):
        self.a = float(exponent)
        self.lower, self.upper = float(low), float(high)
        self.w = self.upper - self.lower

    def _y(self, x):
        return np.clip((np.asarray(x, float) - self.lower) / self.w, 0.0, 1.0)

    def cdf(self, x):
        return self._y(x) ** self.a

    def sf(self, x):
        return -np.expm1(self.a * np.log(np.maximum(self._y(x), 1e-320)))

    def pdf(self, x):
        x = np.asarray(x, float)
        y = self._y(x)
        with np.errstate(divide="ignore", invalid="ignore"):
            d = self.a / self.w * np.where(y > 0, y, 1.0) ** (self.a - 1.0)
        return np.where((x > self.lower) & (x <= self.upper), d, 0.0)

    def ppf(self, u):
        return self.lower + self.w * np.asarray(u, float) ** (1.0 / self.a)

    def isf(self, v):
        return self.lower + self.w * np.exp(np.log1p(-np.asarray(v, float)) / self.a)

    def value_parts(self, u, v):
        """Measured from the nearer end: high + w (u^(1/a) - 1) in the upper half, low + w u^(1/a) below."""
        u, v = np.asarray(u, float), np.asarray(v, float)
        top = v < 0.5
        return np.where(top, self.upper, self.lower), self.w * np.where(top, np.expm1(np.log1p(-np.where(top, v, 0.0)) / self.a),
                                                                        u ** (1.0 / self.a))

    def inverse_hazard(self, u, v, anchor, delta):
        """v dx/du = v (x - low) / (a u)."""
        above_low = np.where(anchor == self.upper, self.w + delta, delta)
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.asarray(v, float) * above_low / (self.a * np.asarray(u, float))

    def closed_rank_moments(self, n, r):
        """U^(1/a) with U ~ Beta(n-r+1, r): E[U^c] = B(n-r+1+c, r) / B(n-r+1, r)."""
        k = n - r + 1.0

        def raw(c):
            return math.exp(log_gamma_ratio(k, c) - log_gamma_ratio(n + 1.0, c))

        e1, e2 = raw(1.0 / self.a), raw(2.0 / self.a)
        var_u = e2 - e1 * e1
        if not var_u > 1e-4 * e1 * e1:
            return None
        return self.lower + self.w * e1, self.w**2 * var_u


class Truncated(ValueModel):
    """A parent model conditioned on low <= X <= high."""

    def __init__(self, parent, low=None, high=None):
        self.cheap_quantiles = parent.cheap_quantiles
        low = parent.lower if low is None else max(float(low), parent.lower)
        high = parent.upper if high is None else min(float(high), parent.upper)
        if not high > low:
            raise ParameterError("truncate.high", "must be greater than truncate.low and overlap the support")
        self.parent, self.family = parent, parent.family
        self.lower, self.upper = low, high
        self.fa = float(parent.cdf(low)) if math.isfinite(low) else 0.0
        self.sa = float(parent.sf(low)) if math.isfinite(low) else 1.0
        self.fb = float(parent.cdf(high)) if math.isfinite(high) else 1.0
        self.sb = float(parent.sf(high)) if math.isfinite(high) else 0.0
        self.mass = (self.sa - self.sb) if self.sa < 0.5 else (self.fb - self.fa)
        if not self.mass > 1e-300:
            raise ParameterError("truncate", "the range holds no probability under this model")
        self.upper_tail_index = parent.upper_tail_index if high == INF else INF
        self.lower_tail_index = parent.lower_tail_index if low == -INF else INF


    def to_params(self):
        """The parent's JSON with the truncation: top-level low/high for an empirical sample
        (how its JSON bounds it), a ``truncate`` object otherwise."""
        out = self.parent.to_params()
        ends = {k: _plain(self._given[k]) for k in ("low", "high") if self._given.get(k) is not None}
        if out["family"] == "empirical":
            return {**out, **ends}
        return {**out, "truncate": ends}

    def kink_values(self):
        return self.parent.kink_values()

    def cdf(self, x):
        return np.clip((self.parent.cdf(x) - self.fa) / self.mass, 0.0, 1.0)

    def sf(self, x):
        return np.clip((self.parent.sf(x) - self.sb) / self.mass, 0.0, 1.0)

    def pdf(self, x):
        x = np.asarray(x, float)
        return np.where((x >= self.lower) & (x <= self.upper), self.parent.pdf(x) / self.mass, 0.0)

    def ppf(self, u):
        u = np.asarray(u, float)
        return self._clip(self.parent.value_at(self.fa + u * self.mass, self.sb + (1.0 - u) * self.mass))

    def isf(self, v):
        v = np.asarray(v, float)
        return self._clip(self.parent.value_at(self.fa + (1.0 - v) * self.mass, self.sb + v * self.mass))

    def _clip(self, x):
        return np.clip(x, self.lower, self.upper)

    def _parent_nodes(self, u, v):
        return self.fa + np.asarray(u, float) * self.mass, self.sb + np.asarray(v, float) * self.mass

    def value_parts(self, u, v):
        anchor, delta = self.parent.value_parts(*self._parent_nodes(u, v))
        return anchor, np.clip(delta, self.lower - anchor, self.upper - anchor)

    def inverse_hazard(self, u, v, anchor, delta):
        """(S - S(high)) / f of the parent: its own S / f times v mass / S."""
        pu, pv = self._parent_nodes(u, v)
        h = self.parent.inverse_hazard(pu, pv, anchor, delta)
        return None if h is None else h * (np.asarray(v, float) * self.mass / pv)


class Reflected(ValueModel):
    """The distribution of -X: turns procurement costs into forward values."""

    def __init__(self, parent):
        self.parent, self.family = parent, parent.family
        self.cheap_quantiles = parent.cheap_quantiles
        self.lower, self.upper = -parent.upper, -parent.lower
        self.upper_tail_index = parent.lower_tail_index
        self.lower_tail_index = parent.upper_tail_index
        self.discrete = parent.discrete
        self.closed_form_logs = parent.closed_form_logs


    def to_params(self):
        """The parent's JSON: a reflected model is a cost model sent as ``bidder_costs``."""
        return self.parent.to_params()

    def kink_values(self):
        return [-k for k in self.parent.kink_values()]

    def cdf(self, x):
        return self.parent.sf(-np.asarray(x, float))

    def sf(self, x):
        return self.parent.cdf(-np.asarray(x, float))

    def logcdf(self, x):
        return self.parent.logsf(-np.asarray(x, float))

    def logsf(self, x):
        return self.parent.logcdf(-np.asarray(x, float))

    def pdf(self, x):
        return self.parent.pdf(-np.asarray(x, float))

    def ppf(self, u):
        return -self.parent.isf(u)

    def isf(self, v):
        return -self.parent.ppf(v)

    def value_parts(self, u, v):
        anchor, delta = self.parent.value_parts(v, u)
        return -anchor, -delta

    def inverse_hazard(self, u, v, anchor, delta):
        """F / f of the parent at the mirrored node: its S / f times F / S there."""
        h = self.parent.inverse_hazard(v, u, -anchor, -delta)
        with np.errstate(divide="ignore", over="ignore"):
            return None if h is None else h * (np.asarray(v, float) / np.asarray(u, float))

    @property
    def atoms(self):
        return -self.parent.atoms[::-1]

    @property
    def N(self):
        """A step model's number of equally likely atoms, the same as its parent's."""
        return self.parent.N

    def closed_rank_moments(self, n, r):
        """Rank r from the top of -X is minus rank n - r + 1 from the top of X."""
        got = self.parent.closed_rank_moments(n, n - r + 1)
        return None if got is None else (-got[0], got[1])


class QuantileTable(ValueModel):
    """A piecewise-linear CDF through analyst-supplied (p, value) points."""

    family = "quantile_table"

    def __init__(self, points, low=None, high=None):
        pts = [(float(p), float(x)) for p, x in points]
        if low is not None:
            if pts and pts[0][0] == 0.0:
                raise ParameterError("low", "give low only when the table has no p = 0 point")
            pts.insert(0, (0.0, float(low)))
        if high is not None:
            if pts and pts[-1][0] == 1.0:
                raise ParameterError("high", "give high only when the table has no p = 1 point")
            pts.append((1.0, float(high)))
        if len(pts) < 2:
            raise ParameterError("points", "need at least two points in all")
        for i in range(1, len(pts)):
            if not pts[i][0] > pts[i - 1][0]:
                raise ParameterError(f"points.{i if low is None else i - 1}.p", "p must increase strictly")
            if not pts[i][1] > pts[i - 1][1]:
                field = "high" if (high is not None and i == len(pts) - 1) else f"points.{i if low is None else i - 1}.value"
                raise ParameterError(field, "values must increase strictly")
        if pts[0][0] != 0.0:
            raise ParameterError("low", "the table has no p = 0 point: give low")
        if pts[-1][0] != 1.0:
            raise ParameterError("high", "the table has no p = 1 point: give high")
        self.p = np.array([q for q, _ in pts])
        self.x = np.array([x for _, x in pts])
        self.lower, self.upper = float(self.x[0]), float(self.x[-1])
        self.dens = np.diff(self.p) / np.diff(self.x)


    def to_params(self):
        out = {"family": self.family, "points": [{"p": _plain(p), "value": _plain(v)} for p, v in self._given["points"]]}
        return {**out, **{k: _plain(self._given[k]) for k in ("low", "high") if self._given.get(k) is not None}}

    def kink_values(self):
        return list(self.x[1:-1])

    def cdf(self, x):
        return np.interp(np.asarray(x, float), self.x, self.p)

    def sf(self, x):
        return np.interp(np.asarray(x, float), self.x, 1.0 - self.p)

    def pdf(self, x):
        x = np.asarray(x, float)
        i = np.clip(np.searchsorted(self.x, x, side="right") - 1, 0, len(self.dens) - 1)
        return np.where((x >= self.lower) & (x <= self.upper), self.dens[i], 0.0)

    def ppf(self, u):
        return np.interp(np.asarray(u, float), self.p, self.x)

    def isf(self, v):
        q = 1.0 - self.p[::-1]
        return np.interp(np.asarray(v, float), q, self.x[::-1])

    def inverse_hazard(self, u, v, anchor, delta):
        """v over the density of the node's piece, the piece found in u (or in v near the top)."""
        u, v = np.asarray(u, float), np.asarray(v, float)
        from_top = len(self.dens) - np.searchsorted((1.0 - self.p)[::-1], v, side="left")
        i = np.where(v < 0.5, from_top, np.searchsorted(self.p, u, side="right") - 1)
        return v / self.dens[np.clip(i, 0, len(self.dens) - 1)]


class _Tabulated(ValueModel):
    """A model whose exact cdf and sf (``_exact_cdf``, ``_exact_sf``) are sums over many
    terms. Its cdf, sf and quantiles come from a :class:`tables.LogTable` built on first
    use over ``_table_seeds()``; points the table does not cover go to the exact sums,
    quantiles there to Newton's method on them. With ``tabulate`` off (a mixture nested
    in another, which evaluates its leaves itself) everything is exact."""

    cheap_quantiles = False
    tabulate = True
    _table = None

    def _log_table(self):
        if self._table is None:
            seeds, split = self._table_seeds()

            def logs(exact):
                def log_exact(x):
                    with np.errstate(divide="ignore"):
                        return np.log(exact(x))
                return log_exact
            self._table = LogTable(logs(self._exact_cdf), logs(self._exact_sf), seeds, split)
        return self._table

    def _tabled(self, x, which):
        x = np.asarray(x, float)
        exact = (self._exact_cdf, self._exact_sf)[which]
        if not self.tabulate:
            return exact(x)
        flat, table = x.ravel(), self._log_table()
        inside = table.covers(flat)
        out = np.empty(flat.shape)
        if inside.any():
            out[inside] = table.cdf_sf(flat[inside])[which]
        if not inside.all():
            out[~inside] = exact(flat[~inside])
        return out.reshape(x.shape)

    def cdf(self, x):
        return self._tabled(x, 0)

    def sf(self, x):
        return self._tabled(x, 1)

    def ppf(self, u):
        if not self.tabulate:
            return super().ppf(u)
        u = np.asarray(u, float)
        return self.value_at(u, np.clip(1.0 - u, 0.0, 1.0))

    def isf(self, v):
        if not self.tabulate:
            return super().isf(v)
        v = np.asarray(v, float)
        return self.value_at(np.clip(1.0 - v, 0.0, 1.0), v)

    def value_at(self, u, v):
        if not self.tabulate:
            return super().value_at(u, v)
        shape = np.broadcast(u, v).shape
        u, v = (np.broadcast_to(np.asarray(a, float), shape).ravel() for a in (u, v))
        table = self._log_table()
        p, target = table.locate(u, v)
        on_table = p >= 0
        on_table[on_table] = ~table.exact[p[on_table]]
        x = np.empty(u.shape)
        if on_table.any():
            x[on_table] = table.invert(p[on_table], target[on_table])
        rest = np.nonzero(~on_table)[0]
        if len(rest):
            x[rest] = self._exact_quantiles(table, p[rest], u[rest], v[rest])
        x = np.where(u <= 0.0, self.lower, x)
        return np.where(v <= 0.0, self.upper, x).reshape(shape)

    def _exact_quantiles(self, table, p, u, v):
        """Newton on the exact sums: inside a panel marked exact, or beyond the table's ends.
        Beyond an end, the table's end is one side of every bracket, and the model's bracket
        of the most extreme target there the other (quantiles are monotone, so it holds all
        of them; Newton's steps in log x make up the looseness in a step or two), so that a
        mixture takes its leaves' quantiles at one point rather than at each."""
        lo, hi = table.a[np.maximum(p, 0)], table.b[np.maximum(p, 0)]
        below, above = p == -2, p == -1
        if below.any():
            j = np.nonzero(below)[0][np.argmin(u[below])]
            lo[below], hi[below] = float(np.min(self._bracket(u[j:j + 1], v[j:j + 1])[0])), table.lo
        if above.any():
            j = np.nonzero(above)[0][np.argmin(v[above])]
            lo[above], hi[above] = table.hi, float(np.max(self._bracket(u[j:j + 1], v[j:j + 1])[1]))
        x = np.empty(u.shape)
        for use_sf in (False, True):
            pick = (v < 0.5) == use_sf
            if pick.any():
                x[pick] = self._invert(u[pick], v[pick], use_sf, (lo[pick], hi[pick]))
        return x


# Families whose cdf, sf and pdf are numpy formulas in their attributes, so that one
# instance holding every component's attribute as a column evaluates them all at once.
_STACKABLE = {"uniform", "normal", "lognormal", "exponential", "gamma", "weibull", "beta", "triangular", "pareto", "power"}
# Of those, the families whose ppf and isf are numpy formulas too.
_QUANTILE_FORMULAS = _STACKABLE - {"beta"}


def _signature(model):
    """What must agree for models to be stacked: the class, its non-numeric attributes
    and its parent's signature; None for a model that cannot be stacked."""
    if type(model) is not Truncated and (type(model) not in PARAMETRIC.values() or model.family not in _STACKABLE):
        return None
    sig = [type(model)]
    for name, val in sorted(vars(model).items()):
        if name == "_given":  # what the constructor was given (to_params), not what evaluates
            continue
        if isinstance(val, ValueModel):
            inner = _signature(val)
            if inner is None:
                return None
            sig.append((name, inner))
        elif isinstance(val, (float, int)) and not isinstance(val, bool):
            sig.append((name, "number"))
        elif isinstance(val, (str, bool, type(None))):
            sig.append((name, val))
        else:
            return None
    return tuple(sig)


def _stack(models):
    """One instance of the models' class whose numeric attributes are columns (K, 1)."""
    stacked = object.__new__(type(models[0]))
    for name, val in vars(models[0]).items():
        if name == "_given":
            continue
        vals = [vars(m)[name] for m in models]
        if isinstance(val, ValueModel):
            val = _stack(vals)
        elif isinstance(val, (float, int)) and not isinstance(val, bool):
            val = np.array(vals, float)[:, None]
        setattr(stacked, name, val)
    return stacked


_CHUNK = 1 << 18  # components x points evaluated at once


class Mixture(_Tabulated):
    """A weighted mixture of value models. Nested mixtures are flattened into weighted
    leaves, and the leaves of one family are evaluated together (:func:`_stack`)."""

    family = "mixture"

    def __init__(self, components):
        weights = np.array([w for w, _ in components], dtype=float)
        total = weights.sum()
        if abs(total - 1.0) > 1e-9:
            raise ParameterError("components", f"weights must sum to 1 (they sum to {total:.12g})")
        self.weights = weights / total
        self.models = [m for _, m in components]
        live = [m for w, m in zip(self.weights, self.models) if w > 0]
        self.lower = min(m.lower for m in live)
        self.upper = max(m.upper for m in live)
        self.upper_tail_index = min(m.upper_tail_index for m in live)
        self.lower_tail_index = min(m.lower_tail_index for m in live)
        if any(m.discrete for m in live):
            raise ParameterError("components", "a step (smoothing: none) empirical model cannot be mixed")
        self._dips = None
        self._probes = self._probe_table = None
        for m in live:
            if isinstance(m, Mixture):
                m.tabulate = False
        groups = {}
        for w, m in self._leaves():
            groups.setdefault(_signature(m) or id(m), []).append((w, m))
        self._parts = [(np.array([w for w, _ in g]), _stack([m for _, m in g]) if len(g) > 1 else g[0][1], [m for _, m in g])
                       for g in groups.values()]


    def to_params(self):
        return {"family": self.family, "components": [{"weight": _plain(w), "model": m.to_params()}
                                                      for w, m in self._given["components"]]}

    def _leaves(self):
        out = []
        for w, m in zip(self.weights, self.models):
            if w > 0:
                out += [(w * wi, mi) for wi, mi in m._leaves()] if isinstance(m, Mixture) else [(w, m)]
        return out

    def _sum(self, method, x):
        x = np.asarray(x, float)
        flat = x.ravel()
        out = np.zeros(flat.shape)
        budget.check()
        for ws, m, _ in self._parts:
            if len(ws) == 1:
                out += ws[0] * getattr(m, method)(flat)
                continue
            step = max(1, _CHUNK // len(ws))
            for i in range(0, len(flat), step):
                budget.check()
                vals = getattr(m, method)(flat[None, i:i + step])
                out[i:i + step] += ws @ vals if vals.shape[0] == len(ws) else ws.sum() * vals[0]
        return out.reshape(x.shape)

    def _exact_cdf(self, x):
        return self._sum("cdf", x)

    def _exact_sf(self, x):
        return self._sum("sf", x)

    def pdf(self, x):
        return self._sum("pdf", x)

    def _probe_values(self):
        """Each component's values at a fixed set of probabilities from 1e-12 to 1 - 1e-12."""
        if self._probes is None:
            self._probes = np.concatenate([m.value_at(_DIP_PROBS, 1.0 - _DIP_PROBS)
                                           for w, m in zip(self.weights, self.models) if w > 0])
        return self._probes

    def kink_values(self):
        """The components' kinks and finite bounds, and the dips of the mixed density
        between components (see :func:`density_dips`)."""
        ks = []
        for w, m in zip(self.weights, self.models):
            if w > 0:
                ks += list(m.kink_values()) + [b for b in (m.lower, m.upper) if math.isfinite(b)]
        if self._dips is None:
            dips = density_dips(self.pdf, np.concatenate((self._probe_values(), ks)))
            self._dips = sorted(set(ks + dips))
        return list(self._dips)

    def _table_seeds(self):
        """Every third probe value and the kinks (the table's panels are halved where the
        mixture needs more), and steps out from the extreme probes, doubling, until F
        (S) is below 1e-25 or the support ends, so that the table reaches as far as it
        goes (see :class:`tables.LogTable`); the split at the first seed where F reaches 1/2."""
        probes = self._probe_values()
        probes = np.unique(probes[np.isfinite(probes)])
        span = max(probes[-1] - probes[0], 1e-300)
        steps = span * 2.0 ** np.arange(-4.0, 60.0)
        with np.errstate(over="ignore", invalid="ignore"):
            out_low = np.maximum(probes[0] - steps, self.lower)
            out_high = np.minimum(probes[-1] + steps, self.upper)
        out_low = out_low[:int(np.argmax(self._exact_cdf(out_low) < 1e-25)) + 1]
        out_high = out_high[:int(np.argmax(self._exact_sf(out_high) < 1e-25)) + 1]
        seeds = np.concatenate((probes[::3], probes[-1:], self.kink_values(), out_low, out_high))
        seeds = np.unique(seeds[np.isfinite(seeds) & (seeds >= self.lower) & (seeds <= self.upper)])
        return seeds, seeds[min(int(np.searchsorted(self._exact_cdf(seeds), 0.5)), len(seeds) - 1)]

    def _bracket(self, u, v):
        """Neighbouring probe values around each target where it lies among them (F and
        S at the probes are computed once), else the extreme quantiles of the leaves
        (never mixtures, so none needs a search of its own)."""
        if self._probe_table is None:
            x = np.unique(self._probe_values()[np.isfinite(self._probe_values())])
            self._probe_table = x, self._exact_cdf(x), self._exact_sf(x)
        x, f, s = self._probe_table
        shape = np.broadcast(u, v).shape
        u, v = (np.broadcast_to(np.asarray(a, float), shape).ravel() for a in (u, v))
        upper = v < 0.5
        # The first probe at or above the target: by F below the median, by S above it.
        j = np.where(upper, len(x) - np.searchsorted(s[::-1], v, side="right"), np.searchsorted(f, u, side="left"))
        inside = (j > 0) & (j < len(x))
        lo, hi = x[np.clip(j - 1, 0, len(x) - 1)], x[np.clip(j, 0, len(x) - 1)]
        if not inside.all():
            lo[~inside], hi[~inside] = self._leaf_quantile_range(u[~inside], v[~inside])
        return lo.reshape(shape), hi.reshape(shape)

    def _leaf_quantile_range(self, u, v):
        """The least and the greatest of the leaves' quantiles: F(x) < u below every
        leaf's quantile, F(x) > u above all of them. A stack of a family whose ppf and
        isf are formulas takes each (from the precise side) for all its leaves at once."""
        lo, hi = np.full(u.shape, np.inf), np.full(u.shape, -np.inf)
        for _, m, leaves in self._parts:
            if len(leaves) > 1 and m.family in _QUANTILE_FORMULAS and type(m) is not Truncated:
                qs, up = np.empty((len(leaves), len(u))), v < 0.5
                with np.errstate(all="ignore"):
                    qs[:, up], qs[:, ~up] = m.isf(v[None, up]), m.ppf(u[None, ~up])
            else:
                qs = np.array([leaf.value_at(u, v) for leaf in leaves])
            lo, hi = np.minimum(lo, qs.min(axis=0)), np.maximum(hi, qs.max(axis=0))
        return lo, hi


# A kernel term below e^-40 (4e-18) of the largest, n times over, is below rounding of the sum.
_KERNEL_REACH = 40.0


class KernelSmoothed(_Tabulated):
    """A Gaussian kernel density through a sample, Silverman's bandwidth rule,
    truncated to the sample's natural bounds where they are given.

    The exact sums run over the sorted sample within a window around each point, outside
    which every kernel term is below e^-40 / N of the largest (the terms below the window
    count 1 in the cdf, those above it 1 in the sf)."""

    family = "empirical"

    def __init__(self, sample, bandwidth):
        self.c = np.sort(np.asarray(sample, float))
        self.h = float(bandwidth)
        self.wt = 1.0 / len(self.c)
        self._dips = None


    def to_params(self):
        """The sample with Gaussian-kernel smoothing (its bandwidth is Silverman's, from the sample)."""
        return {"family": self.family, "sample": [_plain(x) for x in np.asarray(self._given["sample"], float)], "smoothing": "kernel"}

    def kink_values(self):
        """The dips of the density in the gaps between neighbouring sample values more
        than two bandwidths apart (two equal kernels 2h apart or closer make one mode,
        so a narrower gap holds no deep dip)."""
        if self._dips is None:
            i = np.nonzero(np.diff(self.c) > 2.0 * self.h)[0]
            grid = np.concatenate((self.c[i], 0.5 * (self.c[i] + self.c[i + 1]), self.c[i + 1]))
            self._dips = density_dips(self.pdf, grid)
        return list(self._dips)

    def _exact_cdf(self, x):
        return self._window_sums(x, "cdf")

    def _exact_sf(self, x):
        return self._window_sums(x, "sf")

    def pdf(self, x):
        return self._window_sums(x, "pdf") / (self.h * math.sqrt(2 * math.pi))

    def _window(self, x, kind):
        """Per point, the sample indices [i0, i1) whose terms count, and how many points
        beyond the window count 1 (those below it in the cdf, above it in the sf). The
        window reaches sqrt(z^2 + 2 L) bandwidths, z that of the nearest term that counts."""
        c, h = self.c, self.h
        reach = 2.0 * (_KERNEL_REACH + math.log(len(c)))
        if kind == "pdf":
            j = np.searchsorted(c, x)
            near = np.minimum(np.abs(x - c[np.maximum(j - 1, 0)]), np.abs(c[np.minimum(j, len(c) - 1)] - x)) / h
            lo_z = hi_z = np.sqrt(near * near + reach)
        elif kind == "cdf":
            z = np.maximum((c[0] - x) / h, 0.0)
            lo_z, hi_z = math.sqrt(reach), np.sqrt(z * z + reach)
        else:
            z = np.maximum((x - c[-1]) / h, 0.0)
            lo_z, hi_z = np.sqrt(z * z + reach), math.sqrt(reach)
        i0 = np.searchsorted(c, x - lo_z * h, side="left")
        i1 = np.searchsorted(c, x + hi_z * h, side="right")
        ones = i0 if kind == "cdf" else (len(c) - i1 if kind == "sf" else np.zeros(x.shape, int))
        return i0, i1, ones

    def _window_sums(self, x, kind):
        x = np.asarray(x, float)
        flat = x.ravel()
        order = np.argsort(flat)
        xs = flat[order]
        i0, i1, ones = self._window(xs, kind)
        out = ones.astype(float)
        n, start, widths = len(self.c), 0, np.maximum(i1 - i0, 1)
        while start < len(xs):
            budget.check()
            # A block of neighbouring points, padded to its widest window: where the sample
            # is sparse (a long tail) the windows are narrow, and so are its blocks.
            stop = min(len(xs), start + max(1, _CHUNK // int(widths[start])))
            stop = min(stop, start + max(1, _CHUNK // int(widths[start:stop].max())))
            idx = i0[start:stop, None] + np.arange(int(widths[start:stop].max()))
            z = (xs[start:stop, None] - self.c[np.minimum(idx, n - 1)]) / self.h
            term = sp.ndtr(z) if kind == "cdf" else sp.ndtr(-z) if kind == "sf" else np.exp(-0.5 * z * z)
            out[start:stop] += np.sum(np.where(idx < i1[start:stop, None], term, 0.0), axis=1)
            start = stop
        res = np.empty(flat.shape)
        res[order] = out * self.wt
        return res.reshape(x.shape)

    def _table_seeds(self):
        """Every other bandwidth where the sample lies, both edges of each gap wider than
        16 bandwidths, the tails out to 12 bandwidths (F below 1e-24 there, where the
        table stops), and the sample median (near F = 1/2) as the split."""
        c, h = self.c, self.h
        cells = c[0] + 2.0 * h * np.unique(np.floor((c - c[0]) / (2.0 * h)))
        gap = np.nonzero(np.diff(c) > 16.0 * h)[0]
        reach = h * np.array([12.0, 8.0, 5.0, 3.0])
        median = float(np.median(c))
        seeds = np.concatenate((cells, c[gap] + 8.0 * h, c[gap + 1] - 8.0 * h, c[0] - reach, c[-1] + reach, [c[-1], median]))
        return seeds, median

    def _bracket(self, u, v):
        # ndtr((x - c_max)/h) <= F(x) <= ndtr((x - c_min)/h); z from the small tail.
        z = np.where(v < 0.5, -sp.ndtri(v), sp.ndtri(u))
        return self.c[0] + self.h * z, self.c[-1] + self.h * z


class StepEmpirical(ValueModel):
    """The step distribution of a sample: each past value has mass 1/N."""

    family = "empirical"
    discrete = True

    def __init__(self, sample):
        self.atoms = np.sort(np.asarray(sample, float))
        self.lower, self.upper = float(self.atoms[0]), float(self.atoms[-1])
        self.N = len(self.atoms)


    def to_params(self):
        return {"family": self.family, "sample": [_plain(x) for x in np.asarray(self._given["sample"], float)], "smoothing": "none"}

    def cdf(self, x):
        return np.searchsorted(self.atoms, np.asarray(x, float), side="right") / self.N

    def sf(self, x):
        return 1.0 - self.cdf(x)

    def pdf(self, x):
        raise ParameterError("smoothing", "a step distribution has no density; use smoothing: kernel")

    def ppf(self, u):
        i = np.ceil(np.asarray(u, float) * self.N).astype(int) - 1
        return self.atoms[np.clip(i, 0, self.N - 1)]

    def isf(self, v):
        i = self.N - np.ceil(np.asarray(v, float) * self.N).astype(int)
        return self.atoms[np.clip(i, 0, self.N - 1)]


def silverman_bandwidth(sample):
    """Silverman (1986, eq. 3.31): 0.9 min(sd, IQR/1.34) N^(-1/5)."""
    x = np.asarray(sample, float)
    sd = float(np.std(x, ddof=1))
    q75, q25 = np.percentile(x, [75, 25])
    spread = min(sd, (q75 - q25) / 1.34) if q75 > q25 else sd
    return 0.9 * spread * len(x) ** (-0.2)


def _plain(x):
    """A parameter as JSON holds it: a float for a numpy or Python number."""
    return float(x) if isinstance(x, (int, float, np.floating, np.integer)) and not isinstance(x, bool) else x


def empirical(sample, smoothing="kernel", low=None, high=None):
    """Build the empirical model of a sample of past values."""
    x = np.asarray(sample, float)
    if low is not None and np.any(x < low):
        raise ParameterError("sample", "values lie below low")
    if high is not None and np.any(x > high):
        raise ParameterError("sample", "values lie above high")
    if low is not None and high is not None and not high > low:
        raise ParameterError("high", "must be greater than low")
    if smoothing == "none":
        return StepEmpirical(x)
    if not np.ptp(x) > 0:
        raise ParameterError("sample", "all values are equal: a kernel needs some spread")
    model = KernelSmoothed(x, silverman_bandwidth(x))
    if low is not None or high is not None:
        model = Truncated(model, low, high)
    return model


#: The parametric families by name; ``register_family`` adds one.
PARAMETRIC = {}


def register_family(cls):
    """Add a parametric family (a ValueModel subclass with ``family`` and ``parameters``):
    every request schema and GET door reads this registry when a request loads."""
    PARAMETRIC[cls.family] = cls
    return cls


for _cls in (Uniform, Normal, LogNormal, Exponential, Gamma, Weibull, BetaValues, Triangular, Pareto, Power):
    register_family(_cls)
