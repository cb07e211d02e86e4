"""Maximum likelihood over the parametric families.

Each family is fitted in its declared parameters (``ValueModel.parameters``): a positive
parameter through its logarithm, others as they are, from a start read off the data. A
reverse case fits the cost model C as the forward model of -C (``models.Reflected``).
Nelder-Mead, restarted from its own optimum (a standard guard against a simplex that
collapsed early; Nelder and Mead, The Computer Journal 7(4), 1965) or, where a parameter
went to a datum, with that parameter set there (``_snapped``), with tolerances
far below the sampling error; a bootstrap refit takes two Newton steps from the full
sample's optimum instead (``_newton_refit``).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import optimize

from .. import budget
from .. import models as M
from ..errors import ParameterError


def _spread(x):
    return float(np.ptp(x)) or max(abs(float(np.mean(x))), 1.0)


def _log_moments(x):
    lx = np.log(x)
    return float(np.exp(np.mean(lx))), max(float(np.std(lx)), 0.05)


@dataclass(frozen=True)
class FamilySpec:
    """How a family is fitted: the parameters held at values read off the data (``fixed``),
    a start for the rest, and whether it needs positive values."""

    start: object  # data -> {name: value} for the free parameters
    fixed: object = None  # data -> {name: value}, or None
    positive: bool = False
    fixed_from_data: bool = False  # whether ``fixed`` reads its values off the data (they count in the AIC)


def _widened(x):
    """The observed range, widened by a share 1/N of it at each end so every datum lies inside."""
    pad = _spread(x) / len(x)
    return float(np.min(x)) - pad, float(np.max(x)) + pad


#: The families /v1/fits tries by default, each with its fitting spec.
FITTED = {
    "uniform": FamilySpec(lambda x: dict(zip(("low", "high"), _widened(x)))),
    "normal": FamilySpec(lambda x: {"mean": float(np.median(x)), "sd": float(np.std(x)) or _spread(x)}),
    "lognormal": FamilySpec(lambda x: dict(zip(("median", "sigma"), _log_moments(x))), positive=True),
    "exponential": FamilySpec(lambda x: {"mean": float(np.mean(x) - np.min(x)) or 1.0, "shift": float(np.min(x)) - _spread(x) / len(x)}),
    "gamma": FamilySpec(lambda x: {"shape": float(np.mean(x) ** 2 / np.var(x)), "scale": float(np.var(x) / np.mean(x))}, positive=True),
    "weibull": FamilySpec(lambda x: {"shape": 2.0, "scale": float(np.mean(x))}, positive=True),
    "beta": FamilySpec(lambda x: {"alpha": 2.0, "beta": 2.0}, fixed=lambda x: dict(zip(("low", "high"), _widened(x))),
                       fixed_from_data=True),
    "pareto": FamilySpec(lambda x: {"shape": 3.0, "minimum": 0.9 * float(np.min(x))}, positive=True),
    "power": FamilySpec(lambda x: {"exponent": 1.0, "high": _widened(x)[1]}, fixed=lambda x: {"low": 0.0}, positive=True),
}


@dataclass(frozen=True)
class Fit:
    family: str
    params: dict  # the model's parameters, free and fixed
    free: tuple  # the names of those estimated
    log_likelihood: float
    model: object  # in the caller's direction
    theta: np.ndarray  # the free parameters not pinned, as optimised (a positive one by its logarithm)
    curvature: np.ndarray | None  # the inverse Hessian of -log L in theta at the optimum; None if not positive definite
    pinned: dict  # parameters at a datum (a support's end): {name: ("min" or "max", offset)}

    @property
    def aic(self):
        """Akaike (1974): 2k - 2 log L, k the parameters estimated (a beta's range, read off the
        data, counts too)."""
        k = len(self.free) + (len(self.params) - len(self.free) if FITTED[self.family].fixed_from_data else 0)
        return 2.0 * k - 2.0 * self.log_likelihood


def applicable(family, data):
    """Whether the family can hold the data (in the caller's direction): positive families need positive data."""
    return not FITTED[family].positive or bool(np.all(data > 0))


class _Objective:
    """-log L of a family as a function of theta (the free parameters, positive ones logged)."""

    def __init__(self, family, fixed, free, log_likelihood, sign):
        self.cls, self.fixed, self.free = M.PARAMETRIC[family], fixed, free
        self.logged = [self.cls.parameters[k].bound == "positive" for k in free]
        self.log_likelihood, self.sign = log_likelihood, sign

    def values(self, theta):
        return {k: (math.exp(t) if lg else float(t)) for k, t, lg in zip(self.free, theta, self.logged)}

    def theta(self, params):
        return np.array([math.log(params[k]) if lg else params[k] for k, lg in zip(self.free, self.logged)], float)

    def model(self, theta):
        return self.cls(**self.fixed, **self.values(theta))

    def __call__(self, theta):
        try:
            model = self.model(theta)
        except (ParameterError, OverflowError, ValueError, ZeroDivisionError):
            return math.inf
        ll = self.log_likelihood(M.Reflected(model) if self.sign < 0 else model)
        return -ll if math.isfinite(ll) else math.inf


def _steps(theta):
    """Central-difference steps in each coordinate of theta: 1e-5 of its size, at least 1e-5 (a
    first-price fit can sit near the top bid, where -log L climbs steeply on one side)."""
    return 1e-5 * np.maximum(np.abs(theta), 1.0)


def _gradient(loss, theta, h):
    """Central differences; nan where a side is impossible (inf - inf), which callers refuse."""
    e = np.eye(len(theta))
    with np.errstate(invalid="ignore"):
        return np.array([(loss(theta + h[i] * e[i]) - loss(theta - h[i] * e[i])) / (2.0 * h[i]) for i in range(len(theta))])


def _inverse_hessian(loss, theta):
    """The inverse of -log L's Hessian at theta by central differences; None unless positive definite."""
    h, k = _steps(theta), len(theta)
    e = np.eye(k)
    with np.errstate(invalid="ignore"):
        H = np.array([(_gradient(loss, theta + h[j] * e[j], h) - _gradient(loss, theta - h[j] * e[j], h)) / (2.0 * h[j])
                      for j in range(k)])
    H = 0.5 * (H + H.T)
    if not np.all(np.isfinite(H)) or np.any(np.linalg.eigvalsh(H) <= 0.0):
        return None
    return np.linalg.inv(H)


def _newton_refit(loss, start):
    """Two Newton steps from the full sample's optimum with its curvature: the k-step bootstrap
    estimator, as good as a full refit to the bootstrap's own accuracy (Davidson and MacKinnon,
    Bootstrap testing in nonlinear models, International Economic Review 40(2), 1999)."""
    theta = start.theta.copy()
    for _ in range(2):
        step = start.curvature @ _gradient(loss, theta, _steps(theta))
        if not np.all(np.isfinite(step)):
            return None
        # halved where the step leaves some datum without likelihood (past a first-price top bid)
        for _ in range(_HALVINGS):
            if math.isfinite(loss(theta - step)):
                break
            step = 0.5 * step
        theta = theta - step
    return theta if math.isfinite(loss(theta)) else None


#: How often a Newton step of a refit is halved before the refit falls back to Nelder-Mead.
_HALVINGS = 4


def _optimise(loss, theta, precise=True, rounds=2, maxfev=1500):
    """Nelder-Mead to far below the sampling error, in ``rounds`` (a restart from the last
    optimum); a resample's refit (which starts at the full sample's optimum) to 1e-6 of its
    parameters, within 300 evaluations."""
    tol = {"xatol": 1e-10, "fatol": 1e-11, "maxfev": maxfev} if precise else {"xatol": 1e-6, "fatol": 1e-8, "maxfev": 300}
    for _ in range(rounds if precise else 1):
        budget.check()
        theta = optimize.minimize(loss, theta, method="Nelder-Mead", options=tol).x
    return theta


def _pinned(values, data):
    """The parameters the optimum sets at the lowest or highest datum, within 1e-9 (a support's
    end, where the likelihood stops rather than turns), each with its end and its offset from it."""
    ends = {"min": float(np.min(data)), "max": float(np.max(data))}
    return {k: (end, v - x) for k, v in values.items() for end, x in ends.items() if abs(v - x) <= 1e-9 * max(abs(x), 1e-300)}


#: Where a family's start leaves some datum without likelihood (a first-price bid above the
#: highest bid the start allows), the start is read off the data stretched away from their
#: lowest point by these factors in turn.
START_STRETCH = (1.5, 2.5, 4.0, 8.0)


def _feasible_start(loss, spec, data):
    """theta where every datum has a positive likelihood: the family's start from the data,
    else from the data stretched (START_STRETCH) away from the forward twin's lowest point (a
    reverse case's highest cost); None where none is."""
    twin = loss.sign * data
    lo = float(np.min(twin))
    for c in (1.0,) + START_STRETCH:
        with np.errstate(all="ignore"):
            begin = spec.start(loss.sign * (lo + c * (twin - lo)))
        try:
            theta = loss.theta({k: begin[k] for k in loss.free})
        except (ValueError, OverflowError, ZeroDivisionError):  # a start off the domain (the log of a zero scale)
            continue
        if np.all(np.isfinite(theta)) and math.isfinite(loss(theta)):
            return theta
    return None


def _snapped(family, fixed, free, values, best, data, log_likelihood, sign):
    """The optimum with each parameter the optimiser left within 1e-4 of the data's spread from
    the lowest or highest datum set at that datum and the rest optimised again; None where that
    is worse or no parameter is so near. An optimum at a support's end (the uniform's ends at
    the lowest bid and at the top value the highest bid needs) is a corner that Nelder-Mead
    nears only slowly."""
    ends = (float(np.min(data)), float(np.max(data)))
    near = {k: e for k in free for e in ends if 0.0 < abs(values[k] - e) <= 1e-4 * _spread(data)}
    if not near:
        return None
    rest = tuple(k for k in free if k not in near)
    loss = _Objective(family, {**fixed, **near}, rest, log_likelihood, sign)
    theta = loss.theta(values)
    if not math.isfinite(loss(theta)):
        return None
    theta = _optimise(loss, theta) if rest else theta
    return {**values, **near, **loss.values(theta)} if loss(theta) <= best else None


def _full_fit(family, data, log_likelihood, sign):
    """The full sample's fit: Nelder-Mead from the family's start, then the curvature of -log L
    in the parameters not pinned to a datum (``_pinned``), for the resamples' Newton refits."""
    spec = FITTED[family]
    if len(data) < 2 or not np.ptp(data) > 0:
        return None  # one distinct datum: no family's spread can be estimated
    with np.errstate(all="ignore"):
        fixed = spec.fixed(data) if spec.fixed else {}
        begin = spec.start(data)
    free = tuple(k for k in begin if k not in fixed)
    loss = _Objective(family, fixed, free, log_likelihood, sign)
    theta = _feasible_start(loss, spec, data)
    if theta is None:
        return None
    theta = _optimise(loss, theta, rounds=1, maxfev=300)  # far enough to see whether a parameter goes to a datum
    best = loss(theta)
    if not math.isfinite(best):
        return None
    values = _snapped(family, fixed, free, loss.values(theta), best, data, log_likelihood, sign)
    if values is None:  # the restart, where no parameter went to a datum
        values = loss.values(_optimise(loss, theta, rounds=1))
    theta = loss.theta(values)
    best = loss(theta)
    pinned = _pinned(values, data)
    inner = _Objective(family, {**fixed, **{k: values[k] for k in pinned}}, tuple(k for k in free if k not in pinned),
                       log_likelihood, sign)
    inner_theta = inner.theta(values)
    curvature = _inverse_hessian(inner, inner_theta) if len(inner_theta) else None
    return Fit(family, {**fixed, **values}, free, -best, loss.model(theta), inner_theta, curvature, pinned)


def _refit(start, data, log_likelihood, sign):
    """A resample's fit from the full sample's: its pinned parameters at the resample's own
    datum (kept at the same offset), the rest by two Newton steps (``_newton_refit``), or by a
    short Nelder-Mead where those fail."""
    if len(data) == 0:
        return None  # a resample with nothing sold
    ends = {"min": float(np.min(data)), "max": float(np.max(data))}
    fixed = {k: v for k, v in start.params.items() if k not in start.free}
    fixed.update({k: ends[end] + offset for k, (end, offset) in start.pinned.items()})
    free = tuple(k for k in start.free if k not in start.pinned)
    loss = _Objective(start.family, fixed, free, log_likelihood, sign)
    theta = _newton_refit(loss, start) if start.curvature is not None else None
    if theta is None and not free:
        theta = np.empty(0)  # every parameter at a datum of the resample's
    if theta is None:
        begin = loss.theta(start.params)
        if not math.isfinite(loss(begin)):
            return None
        theta = _optimise(loss, begin, precise=False)
    best = loss(theta)
    if not math.isfinite(best):
        return None
    return Fit(start.family, {**fixed, **loss.values(theta)}, start.free, -best, loss.model(theta), theta, None, start.pinned)


def fit_family(family, data, log_likelihood, sign, start=None):
    """The maximum-likelihood ``Fit`` of ``family``; ``data`` (the caller's direction) sets the
    start and fixed parameters, ``log_likelihood(model)`` scores a forward-twin model, ``sign``
    is -1 for a reverse case. With ``start`` (the full sample's Fit) a bootstrap resample is
    refitted from it (``_refit``). None where no parameter value gives the data a positive likelihood."""
    if start is not None:
        return _refit(start, data, log_likelihood, sign)
    return _full_fit(family, data, log_likelihood, sign)
