"""Reference checks for the order-statistics engine (service/core/orderstats.py,
service/core/topvalues.py) and the value models it runs on.

Ranks count from the top: rank r of n is X_(n-r+1:n) in the textbook's
bottom-up numbering, so with m = n - r + 1 it is Q(U), U ~ Beta(m, r)
(David and Nagaraja, Order Statistics, 3rd ed., 2003, section 2.1).

Every number here is checked against something outside the project: a closed
form, a published table, scipy.stats, mpmath at 30 digits, or a seeded Monte
Carlo sample with a tolerance taken from its binomial standard error. The
source is written beside each check.

Tolerances: rel 1e-10 on mean and sd for parametric families, 1e-8 for the
empirical (kernel), quantile-table and mixture families (the service's targets).
"""
from __future__ import annotations

import itertools
import math

import mpmath as mp
import numpy as np
import pytest
import scipy.stats as st
from scipy import integrate, optimize

from service.core import models as M
from service.core import orderstats as O
from service.core import topvalues as T
from service.core.auction import ForwardAuction
from service.core.errors import ParameterError

INF = math.inf
PARAMETRIC_RTOL = 1e-10
NONPARAMETRIC_RTOL = 1e-8


def rel_err(got, want):
    want = float(want)
    return abs(float(got) - want) / abs(want)


def summary_mean_sd(model, n, r):
    s = O.rank_summary(model, n, r)
    assert s.mean is not None and s.var is not None, s.warnings
    return s.mean, math.sqrt(s.var)


# ---------------------------------------------------------------------------
# mpmath reference: the textbook density of rank r of n (from the top),
#   n! / ((m-1)! (r-1)!) F(x)^(m-1) S(x)^(r-1) f(x),  m = n - r + 1
# (David and Nagaraja 2003, section 2.1, in bottom-up ranks), integrated at 30
# digits with tanh-sinh quadrature, split at quantiles of the rank's own
# distribution and at the model's kinks. The split points only steer the
# quadrature; the reference checks itself (total mass 1 and mpmath's error
# estimate) before it is used.
# ---------------------------------------------------------------------------
def mp_rank_moments(F, S, f, n, r, breaks):
    """(mean, sd) of rank r of n at 30 digits; F, S, f are mpmath callables."""
    with mp.workdps(30):
        n_, r_ = mp.mpf(n), mp.mpf(r)
        m_ = n_ - r_ + 1
        logc = mp.loggamma(n_ + 1) - mp.loggamma(m_) - mp.loggamma(r_)
        cache = {}

        def dens(x):
            # the three integrals below share their nodes, so each density
            # value is computed once
            got = cache.get(x)
            if got is not None:
                return got
            fx = f(x)
            out = mp.mpf(0)
            if fx != 0:
                Fx, Sx = F(x), S(x)
                if not ((m_ > 1 and Fx <= 0) or (r_ > 1 and Sx <= 0)):
                    lg = logc
                    if m_ > 1:
                        lg += (m_ - 1) * mp.log(Fx)
                    if r_ > 1:
                        lg += (r_ - 1) * mp.log(Sx)
                    out = mp.exp(lg) * fx
            cache[x] = out
            return out

        pts = [mp.mpf(b) if math.isfinite(b) else (mp.inf if b > 0 else mp.ninf) for b in breaks]
        total, e0 = mp.quad(dens, pts, error=True)
        m1, e1 = mp.quad(lambda x: x * dens(x), pts, error=True)
        mean = m1 / total
        m2, e2 = mp.quad(lambda x: (x - mean) ** 2 * dens(x), pts, error=True)
        var = m2 / total
        # the reference must be far more accurate than the tolerance it serves
        assert abs(total - 1) < 1e-20, f"reference mass {total}"
        assert e1 < 1e-20 * abs(m1) + mp.mpf(10) ** -28, f"reference error {e1}"
        assert e2 < 1e-20 * var, f"reference error {e2}"
        return mean, mp.sqrt(var)


def quantile_breaks(isf, n, r, lower, upper, kinks=()):
    """Split points: values at Beta(r, m) quantiles of the survival V = S(X)."""
    ps = (1e-12, 1e-5, 0.01, 0.2, 0.5, 0.8, 0.99, 1 - 1e-5, 1 - 1e-12)
    v = st.beta.ppf(ps, r, n - r + 1)
    xs = [float(x) for x in isf(v) if np.isfinite(x) and lower < x < upper]
    xs += [float(k) for k in kinks if lower < k < upper]
    return [lower] + sorted(set(xs)) + [upper]


def root_isf(sf, lo, hi):
    """An isf by root finding on a scipy-built survival function (split points only)."""
    def isf(vs):
        out = []
        for v in np.atleast_1d(vs):
            try:
                out.append(optimize.brentq(lambda x: sf(x) - v, lo, hi, xtol=1e-12, rtol=1e-12))
            except ValueError:
                out.append(math.nan)
        return np.array(out)
    return isf


# mpmath versions of the families' F, S, f (standard definitions; Johnson,
# Kotz and Balakrishnan, Continuous Univariate Distributions, 2nd ed., 1994/95).
def mp_normal(mu, sd):
    mu, sd = mp.mpf(mu), mp.mpf(sd)
    return (lambda x: mp.ncdf((x - mu) / sd), lambda x: mp.ncdf((mu - x) / sd), lambda x: mp.npdf(x, mu, sd))


def mp_lognormal(median, sigma):
    mu, s = mp.log(mp.mpf(median)), mp.mpf(sigma)
    F = lambda x: mp.ncdf((mp.log(x) - mu) / s) if x > 0 else mp.mpf(0)
    S = lambda x: mp.ncdf((mu - mp.log(x)) / s) if x > 0 else mp.mpf(1)
    f = lambda x: mp.npdf(mp.log(x), mu, s) / x if x > 0 else mp.mpf(0)
    return F, S, f


def mp_gamma(k, theta):
    k, th = mp.mpf(k), mp.mpf(theta)
    F = lambda x: mp.gammainc(k, 0, x / th, regularized=True) if x > 0 else mp.mpf(0)
    S = lambda x: mp.gammainc(k, x / th, mp.inf, regularized=True) if x > 0 else mp.mpf(1)
    f = lambda x: mp.exp((k - 1) * mp.log(x / th) - x / th - mp.loggamma(k)) / th if x > 0 else mp.mpf(0)
    return F, S, f


def mp_weibull(k, lam):
    k, lam = mp.mpf(k), mp.mpf(lam)
    F = lambda x: -mp.expm1(-((x / lam) ** k)) if x > 0 else mp.mpf(0)
    S = lambda x: mp.exp(-((x / lam) ** k)) if x > 0 else mp.mpf(1)
    f = lambda x: k / lam * (x / lam) ** (k - 1) * mp.exp(-((x / lam) ** k)) if x > 0 else mp.mpf(0)
    return F, S, f


def mp_beta(a, b, lo=0.0, hi=1.0):
    a, b, lo, hi = (mp.mpf(t) for t in (a, b, lo, hi))
    w = hi - lo
    lb = mp.log(mp.beta(a, b))
    F = lambda x: mp.betainc(a, b, 0, (x - lo) / w, regularized=True) if x > lo else mp.mpf(0)
    S = lambda x: mp.betainc(b, a, 0, (hi - x) / w, regularized=True) if x < hi else mp.mpf(0)
    f = lambda x: (mp.exp((a - 1) * mp.log((x - lo) / w) + (b - 1) * mp.log((hi - x) / w) - lb) / w
                   if lo < x < hi else mp.mpf(0))
    return F, S, f


def mp_triangular(lo, c, hi):
    lo, c, hi = (mp.mpf(t) for t in (lo, c, hi))
    w = hi - lo

    def F(x):
        if x <= lo:
            return mp.mpf(0)
        if x >= hi:
            return mp.mpf(1)
        return (x - lo) ** 2 / (w * (c - lo)) if x <= c else 1 - (hi - x) ** 2 / (w * (hi - c))

    def S(x):
        if x <= lo:
            return mp.mpf(1)
        if x >= hi:
            return mp.mpf(0)
        return 1 - (x - lo) ** 2 / (w * (c - lo)) if x <= c else (hi - x) ** 2 / (w * (hi - c))

    def f(x):
        if x <= lo or x >= hi:
            return mp.mpf(0)
        return 2 * (x - lo) / (w * (c - lo)) if x <= c else 2 * (hi - x) / (w * (hi - c))

    return F, S, f


def mp_uniform(a, b):
    a, b = mp.mpf(a), mp.mpf(b)
    F = lambda x: mp.mpf(0) if x <= a else (mp.mpf(1) if x >= b else (x - a) / (b - a))
    S = lambda x: mp.mpf(1) if x <= a else (mp.mpf(0) if x >= b else (b - x) / (b - a))
    f = lambda x: 1 / (b - a) if a <= x <= b else mp.mpf(0)
    return F, S, f


def mp_mixture(parts):
    total = sum(mp.mpf(w) for w, _ in parts)
    parts = [(mp.mpf(w) / total, fs) for w, fs in parts]
    return tuple((lambda x, k=k: sum(w * fs[k](x) for w, fs in parts)) for k in range(3))


def mp_quantile_table(points):
    ps = [mp.mpf(p) for p, _ in points]
    xs = [mp.mpf(x) for _, x in points]

    def seg(x):
        for i in range(len(xs) - 1):
            if xs[i] <= x <= xs[i + 1]:
                return i
        raise AssertionError(x)

    def F(x):
        if x <= xs[0]:
            return mp.mpf(0)
        if x >= xs[-1]:
            return mp.mpf(1)
        i = seg(x)
        return ps[i] + (ps[i + 1] - ps[i]) * (x - xs[i]) / (xs[i + 1] - xs[i])

    def S(x):
        if x <= xs[0]:
            return mp.mpf(1)
        if x >= xs[-1]:
            return mp.mpf(0)
        i = seg(x)
        return (1 - ps[i]) - (ps[i + 1] - ps[i]) * (x - xs[i]) / (xs[i + 1] - xs[i])

    def f(x):
        if x < xs[0] or x > xs[-1]:
            return mp.mpf(0)
        i = seg(x)
        return (ps[i + 1] - ps[i]) / (xs[i + 1] - xs[i])

    return F, S, f


def mp_truncated(base, lo, hi):
    F0, S0, f0 = base
    lo, hi = mp.mpf(lo), (mp.inf if hi == INF else mp.mpf(hi))
    mass = S0(lo) - (S0(hi) if hi != mp.inf else 0)
    F = lambda x: mp.mpf(0) if x <= lo else (mp.mpf(1) if x >= hi else (F0(x) - F0(lo)) / mass)
    S = lambda x: mp.mpf(1) if x <= lo else (mp.mpf(0) if x >= hi else (S0(x) - (S0(hi) if hi != mp.inf else 0)) / mass)
    f = lambda x: f0(x) / mass if lo <= x <= hi else mp.mpf(0)
    return F, S, f


# ---------------------------------------------------------------------------
# 1. scipy.stats.order_statistic (scipy >= 1.15) for six parametric families.
# ---------------------------------------------------------------------------
def _scipy_family(dist, shapes, loc=0.0, scale=1.0):
    base = st.make_distribution(dist)(**shapes)
    return base * scale + loc if (loc, scale) != (0.0, 1.0) else base


SCIPY_FAMILIES = {
    "normal": (lambda: M.Normal(mean=100.0, sd=15.0), lambda: _scipy_family(st.norm, {}, 100.0, 15.0)),
    "lognormal": (lambda: M.LogNormal(median=1.0, sigma=0.5), lambda: _scipy_family(st.lognorm, {"s": 0.5})),
    "gamma": (lambda: M.Gamma(shape=2.5, scale=3.0), lambda: _scipy_family(st.gamma, {"a": 2.5}, 0.0, 3.0)),
    "weibull": (lambda: M.Weibull(shape=1.7, scale=2.0), lambda: _scipy_family(st.weibull_min, {"c": 1.7}, 0.0, 2.0)),
    "beta": (lambda: M.BetaValues(alpha=2.0, beta=5.0, low=10.0, high=30.0),
             lambda: _scipy_family(st.beta, {"a": 2.0, "b": 5.0}, 10.0, 20.0)),
    "triangular": (lambda: M.Triangular(low=1.0, mode=2.0, high=5.0),
                   lambda: _scipy_family(st.triang, {"c": 0.25}, 1.0, 4.0)),
}

# Where scipy's own numerical integration is reliable to better than 1e-12
# (checked against the mpmath reference below while writing these tests).
# Left out, and covered by mpmath instead: weibull at n = 2 (scipy off by
# 1e-11) and triangular at n = 2 and 10 (scipy off by up to 2e-8); every
# family at n = 10**6 (scipy off by up to 2e-10).
SCIPY_CASES = [
    (fam, n, r)
    for fam, ns in {
        "normal": (2, 10, 100, 1000),
        "lognormal": (2, 10, 100, 1000),
        "gamma": (2, 10, 100, 1000),
        "weibull": (10, 100, 1000),
        "beta": (2, 10, 100, 1000),
        "triangular": (100, 1000),
    }.items()
    for n in ns
    for r in (1, 2)
]


@pytest.mark.parametrize("family,n,rank", SCIPY_CASES)
def test_mean_sd_against_scipy_order_statistic(family, n, rank):
    # Source: scipy.stats.order_statistic (SciPy 1.15+ distribution infrastructure).
    make_model, make_ref = SCIPY_FAMILIES[family]
    ref = st.order_statistic(make_ref(), r=n - rank + 1, n=n)
    mean, sd = summary_mean_sd(make_model(), n, rank)
    assert rel_err(mean, ref.mean()) < PARAMETRIC_RTOL
    assert rel_err(sd, ref.standard_deviation()) < PARAMETRIC_RTOL


# ---------------------------------------------------------------------------
# 2. mpmath at 30 digits where scipy is not accurate enough, and for the
#    families scipy does not have.
# ---------------------------------------------------------------------------
def _fam_case(label, model, mp_funcs, isf, lower, upper, kinks, n, r, rtol):
    return pytest.param(model, mp_funcs, isf, lower, upper, kinks, n, r, rtol, id=f"{label}-n{n}-r{r}")


def _mixture_isf():
    sf = lambda x: 0.75 * st.norm.sf(x, 10.0, 2.0) + 0.25 * st.uniform.sf(x, 12.0, 8.0)
    return root_isf(sf, -60.0, 20.0)


QT_POINTS = [(0.0, 1.0), (0.1, 2.0), (0.5, 3.0), (0.9, 5.0), (1.0, 9.0)]
KERNEL_SAMPLE = [3.1, 4.7, 5.2, 6.0, 7.4, 8.8, 12.5]


def _kernel_case():
    model = M.empirical(KERNEL_SAMPLE, "kernel")
    # bandwidth: Silverman 1986 rule, checked separately in test_silverman_bandwidth
    h = 0.9 * min(np.std(KERNEL_SAMPLE, ddof=1), np.subtract(*np.percentile(KERNEL_SAMPLE, [75, 25])) / 1.34) * 7 ** -0.2
    funcs = mp_mixture([(1, mp_normal(c, h)) for c in KERNEL_SAMPLE])
    sf = lambda x: np.mean(st.norm.sf(x, KERNEL_SAMPLE, h))
    return model, funcs, root_isf(sf, -20.0, 40.0)


def _mp_cases():
    cases = []
    ln_isf = st.lognorm(0.5).isf
    for n in (2, 1000, 10**6):
        for r in (1, 2):
            cases.append(_fam_case("lognormal", lambda: M.LogNormal(median=1.0, sigma=0.5), lambda: mp_lognormal(1.0, 0.5),
                                   ln_isf, 0.0, INF, (), n, r, PARAMETRIC_RTOL))
    for r in (1, 2):
        cases.append(_fam_case("weibull", lambda: M.Weibull(shape=1.7, scale=2.0), lambda: mp_weibull(1.7, 2.0),
                               st.weibull_min(1.7, scale=2.0).isf, 0.0, INF, (), 2, r, PARAMETRIC_RTOL))
        for n in (2, 10):
            cases.append(_fam_case("triangular", lambda: M.Triangular(low=1.0, mode=2.0, high=5.0),
                                   lambda: mp_triangular(1.0, 2.0, 5.0), st.triang(0.25, 1.0, 4.0).isf,
                                   1.0, 5.0, (2.0,), n, r, PARAMETRIC_RTOL))
        # every scipy family at n = 10**6, where scipy's integration is not accurate enough
        n = 10**6
        cases += [
            _fam_case("normal", lambda: M.Normal(mean=100.0, sd=15.0), lambda: mp_normal(100.0, 15.0),
                      st.norm(100.0, 15.0).isf, -INF, INF, (), n, r, PARAMETRIC_RTOL),
            _fam_case("gamma", lambda: M.Gamma(shape=2.5, scale=3.0), lambda: mp_gamma(2.5, 3.0),
                      st.gamma(2.5, scale=3.0).isf, 0.0, INF, (), n, r, PARAMETRIC_RTOL),
            _fam_case("weibull", lambda: M.Weibull(shape=1.7, scale=2.0), lambda: mp_weibull(1.7, 2.0),
                      st.weibull_min(1.7, scale=2.0).isf, 0.0, INF, (), n, r, PARAMETRIC_RTOL),
            _fam_case("beta", lambda: M.BetaValues(alpha=2.0, beta=5.0, low=10.0, high=30.0),
                      lambda: mp_beta(2.0, 5.0, 10.0, 30.0), st.beta(2.0, 5.0, 10.0, 20.0).isf,
                      10.0, 30.0, (), n, r, PARAMETRIC_RTOL),
            _fam_case("triangular", lambda: M.Triangular(low=1.0, mode=2.0, high=5.0),
                      lambda: mp_triangular(1.0, 2.0, 5.0), st.triang(0.25, 1.0, 4.0).isf,
                      1.0, 5.0, (2.0,), n, r, PARAMETRIC_RTOL),
        ]
    # beta with a U-shaped density (both shapes below 1): scipy is unreliable here
    for n in (10, 1000):
        cases.append(_fam_case("beta-u-shaped", lambda: M.BetaValues(alpha=0.5, beta=0.7), lambda: mp_beta(0.5, 0.7),
                               st.beta(0.5, 0.7).isf, 0.0, 1.0, (), n, 1, PARAMETRIC_RTOL))
    # mixture of a normal and a uniform (kinks at the uniform's ends)
    for n in (2, 10, 100):
        for r in (1, 2):
            cases.append(_fam_case(
                "mixture",
                lambda: M.Mixture([(0.75, M.Normal(mean=10.0, sd=2.0)), (0.25, M.Uniform(low=12.0, high=20.0))]),
                lambda: mp_mixture([(0.75, mp_normal(10.0, 2.0)), (0.25, mp_uniform(12.0, 20.0))]),
                _mixture_isf(), -INF, INF, (12.0, 20.0), n, r, NONPARAMETRIC_RTOL))
    # quantile table: piecewise-linear CDF, kinks at the knots
    for n in (2, 10, 1000):
        for r in (1, 2):
            cases.append(_fam_case(
                "quantile_table", lambda: M.QuantileTable(QT_POINTS), lambda: mp_quantile_table(QT_POINTS),
                lambda v: np.interp(v, [0.0, 0.1, 0.5, 0.9, 1.0], [9.0, 5.0, 3.0, 2.0, 1.0]),
                1.0, 9.0, (2.0, 3.0, 5.0), n, r, NONPARAMETRIC_RTOL))
    # truncated normals: two-sided, and the half-normal (one-sided)
    for n in (2, 10, 1000):
        cases.append(_fam_case(
            "truncated-normal", lambda: M.Truncated(M.Normal(mean=50.0, sd=10.0), 45.0, 80.0),
            lambda: mp_truncated(mp_normal(50.0, 10.0), 45.0, 80.0), st.truncnorm(-0.5, 3.0, 50.0, 10.0).isf,
            45.0, 80.0, (), n, 1, PARAMETRIC_RTOL))
        cases.append(_fam_case(
            "half-normal", lambda: M.Truncated(M.Normal(mean=0.0, sd=1.0), 0.0, None),
            lambda: mp_truncated(mp_normal(0.0, 1.0), 0.0, INF), st.halfnorm.isf,
            0.0, INF, (), n, 2, PARAMETRIC_RTOL))
    # empirical, kernel smoothing: an equal-weight mixture of normals N(c_i, h^2)
    for n, r in ((10, 1), (100, 2)):
        cases.append(pytest.param("kernel", None, None, None, None, None, n, r, NONPARAMETRIC_RTOL,
                                  id=f"empirical-kernel-n{n}-r{r}"))
    return cases


@pytest.mark.parametrize("make_model,make_funcs,isf,lower,upper,kinks,n,rank,rtol", _mp_cases())
def test_mean_sd_against_mpmath(make_model, make_funcs, isf, lower, upper, kinks, n, rank, rtol):
    # Source: mpmath (30 digits) integration of the textbook order-statistic
    # density, David and Nagaraja 2003, section 2.1.
    with mp.workdps(30):  # the reference's constants (normalisers, weights) at 30 digits too
        if make_model == "kernel":
            model, funcs, isf = _kernel_case()
            lower, upper, kinks = -INF, INF, ()
        else:
            model, funcs = make_model(), make_funcs()
    want_mean, want_sd = mp_rank_moments(*funcs, n, rank, quantile_breaks(isf, n, rank, lower, upper, kinks))
    mean, sd = summary_mean_sd(model, n, rank)
    assert rel_err(mean, want_mean) < rtol
    assert rel_err(sd, want_sd) < rtol


# --- lognormal, n = 2: a closed form -----------------------------------------
# With X = exp(sigma Z) and E[exp(aZ) Phi(Z)] = exp(a^2/2) Phi(a / sqrt 2)
# (complete the square, then P(Z' <= Z + a) for independent standard normals),
# E[max(X1, X2)^p] = 2 E[X^p F(X)] = 2 exp(p^2 sigma^2 / 2) Phi(p sigma / sqrt 2).
# Derivation written here; common practice, no source. Checked to 30 digits
# against the mpmath quadrature above for sigma = 0.5.
def _lognormal_max_of_two(sigma):
    with mp.workdps(30):
        s = mp.mpf(sigma)
        m1 = 2 * mp.exp(s**2 / 2) * mp.ncdf(s / mp.sqrt(2))
        m2 = 2 * mp.exp(2 * s**2) * mp.ncdf(mp.sqrt(2) * s)
        return m1, mp.sqrt(m2 - m1**2)




@pytest.mark.parametrize("sigma", [0.5, 1.0, 2.0, 3.0])
def test_lognormal_max_of_two_closed_form(sigma):
    want_mean, want_sd = _lognormal_max_of_two(sigma)
    mean, sd = summary_mean_sd(M.LogNormal(median=1.0, sigma=sigma), 2, 1)
    assert rel_err(mean, want_mean) < PARAMETRIC_RTOL
    assert rel_err(sd, want_sd) < PARAMETRIC_RTOL


def test_lognormal_mean_beyond_double_range_is_not_a_wrong_number():
    # E[max of n] >= E[X] = exp(sigma^2 / 2) = exp(1250) for the lognormal
    # (Johnson, Kotz and Balakrishnan 1994, ch. 14): no double can hold it, so the
    # only right answer is no number. sigma 50 lies outside the declared reliable
    # range (at most 12), so the model is refused, naming sigma.
    with pytest.raises(ParameterError) as refused:
        M.LogNormal(median=1.0, sigma=50.0)
    assert refused.value.field == "sigma"


# ---------------------------------------------------------------------------
# 3. Uniform values: rank r of n is low + width * Beta(n - r + 1, r)
#    (David and Nagaraja 2003, section 2.1); reference scipy.stats.beta.
# ---------------------------------------------------------------------------
@pytest.mark.parametrize("n,rank", [(n, r) for n in (1, 2, 10, 1000, 10**6) for r in (1, 2) if r <= n])
def test_uniform_is_scaled_beta(n, rank):
    low, high = 2.0, 5.0
    model = M.Uniform(low=low, high=high)
    b = st.beta(n - rank + 1, rank)
    s = O.rank_summary(model, n, rank)
    assert rel_err(s.mean, low + (high - low) * b.mean()) < 1e-13
    assert rel_err(s.var, (high - low) ** 2 * b.var()) < 1e-12
    ps = np.array([0.001, 0.05, 0.25, 0.5, 0.75, 0.95, 0.999])
    q = O.rank_quantiles(model, n, rank, ps)
    np.testing.assert_allclose(q, low + (high - low) * b.ppf(ps), rtol=1e-13)
    # and the cdf at those points: P(V >= (high - q) / width), V ~ Beta(r, n-r+1)
    np.testing.assert_allclose(O.rank_cdf(model, n, rank, q),
                               st.beta(rank, n - rank + 1).sf((high - q) / (high - low)), rtol=1e-9)


@pytest.mark.parametrize("n,rank", [(2, 1), (6, 2), (1000, 2), (10**6, 2), (50, 7)])
def test_reflected_closed_moments_are_the_mirror_ranks(n, rank):
    # -X for X ~ Uniform(2, 5): rank r of n from the top of -X is minus rank
    # n - r + 1 from the top of X, i.e. -(2 + 3 Beta(r, n - r + 1)) (David and
    # Nagaraja 2003, section 2.1); reference scipy.stats.beta.
    b = st.beta(rank, n - rank + 1)
    mean, var = M.Reflected(M.Uniform(low=2.0, high=5.0)).closed_rank_moments(n, rank)
    assert rel_err(mean, -(2.0 + 3.0 * b.mean())) < 1e-13
    assert rel_err(var, 9.0 * b.var()) < 1e-12


# ---------------------------------------------------------------------------
# 4. Exponential values, Renyi's representation: rank r of n (from the top)
#    = shift + mean * sum_{j=r}^{n} E_j / j with E_j iid Exp(1)
#    (David and Nagaraja 2003, section 2.5), so
#    E = shift + mean * sum 1/j,  Var = mean^2 * sum 1/j^2.
# ---------------------------------------------------------------------------
@pytest.mark.parametrize("n,rank", [(n, r) for n in (1, 2, 10, 1000, 2001, 2002, 10**5, 10**6)
                                     for r in (1, 2, 5) if r <= n])
def test_exponential_renyi(n, rank):
    mean_, shift = 3.0, 1.0
    j = np.arange(rank, n + 1, dtype=float)
    want_mean = shift + mean_ * math.fsum(1.0 / j)  # fsum: exactly rounded sum
    want_var = mean_**2 * math.fsum(1.0 / j**2)
    s = O.rank_summary(M.Exponential(mean=mean_, shift=shift), n, rank)
    assert rel_err(s.mean, want_mean) < 1e-13
    assert rel_err(s.var, want_var) < 1e-13


def test_cached_rule_serves_each_model_its_own_answer():
    # The rank rule for (n, r) is built once and handed out as copies: filling one copy
    # with a model must not leak into another. Uniform(2, 5): rank 2 of 10 is
    # 2 + 3 Beta(9, 2), mean 2 + 3 * 9/11; Exponential(3), Renyi: 3 * sum_{j=2}^{10} 1/j
    # (David and Nagaraja 2003, sections 2.1 and 2.5).
    first = O.rank_quadrature(10, 2).fill(M.Uniform(low=2.0, high=5.0))
    second = O.rank_quadrature(10, 2).fill(M.Exponential(mean=3.0, shift=0.0))
    assert rel_err(first.integrate(lambda x: x)[0] / first.total(), 2.0 + 3.0 * 9.0 / 11.0) < 1e-13
    assert rel_err(second.integrate(lambda x: x)[0] / second.total(), 3.0 * math.fsum(1.0 / j for j in range(2, 11))) < 1e-13
    with pytest.raises(ValueError):
        O.rank_quadrature(10, 2).w_hi[0, 0] = 1.0  # the shared arrays are read-only


def test_exponential_against_monte_carlo():
    # Seeded Monte Carlo of the raw draws (not of the representation): the sample
    # mean of the maximum of 50 Exp(3) draws over 40 000 auctions has standard
    # error sd / sqrt(40 000); 5 standard errors allowed (common practice, no source).
    rng = np.random.default_rng(7)
    reps, n = 40_000, 50
    top = np.sort(rng.exponential(3.0, size=(reps, n)), axis=1)[:, -1]
    s = O.rank_summary(M.Exponential(mean=3.0), n, 1)
    assert abs(top.mean() - s.mean) < 5 * math.sqrt(s.var / reps)


# ---------------------------------------------------------------------------
# 5. Expected values of normal order statistics: Harter (1961), table of
#    expected values of normal order statistics. Values below are from memory
#    of that table, each confirmed here against mpmath before it is relied on;
#    the tolerance is half a unit in the last digit quoted. The remembered
#    second-highest of 10 (1.00135756) disagrees with mpmath (1.0013570446)
#    in the 7th digit, so it is left out.
# ---------------------------------------------------------------------------
HARTER_1961 = [  # (n, rank from the top, value, digits after the point)
    (2, 1, "0.56418958", 8),  # = 1/sqrt(pi)
    (5, 1, "1.16296447", 8),
    (10, 1, "1.53875273", 8),
    (20, 1, "1.86747506", 8),
    (100, 1, "2.50759", 5),
]


@pytest.mark.parametrize("n,rank,value,digits", HARTER_1961)
def test_normal_expected_values_harter_1961(n, rank, value, digits):
    # from memory, Harter 1961 table; confirmed with mpmath at 30 digits
    half_unit = 0.5 * 10.0**-digits
    exact, _ = mp_rank_moments(*mp_normal(0.0, 1.0), n, rank, quantile_breaks(st.norm.isf, n, rank, -INF, INF))
    assert abs(exact - mp.mpf(value)) <= half_unit  # the remembered digits are right
    if n == 2:
        with mp.workdps(30):
            assert abs(exact - 1 / mp.sqrt(mp.pi)) < 1e-25
    got = O.rank_summary(M.Normal(mean=0.0, sd=1.0), n, rank).mean
    assert abs(got - float(value)) <= half_unit
    assert rel_err(got, exact) < PARAMETRIC_RTOL


# ---------------------------------------------------------------------------
# 6. Pareto: X = xm V^(-1/alpha), V ~ Beta(r, n - r + 1) (the Beta
#    representation of David and Nagaraja 2003, section 2.1), so
#    E[X^p] = xm^p G(n+1) G(r - p/alpha) / (G(r) G(n+1-p/alpha)),
#    finite iff r alpha > p. Reference: mpmath gamma functions at 30 digits.
# ---------------------------------------------------------------------------
def _pareto_moments(alpha, xm, n, r):
    """(mean, sd), None where the moment does not exist."""
    with mp.workdps(30):
        def raw(p):
            c = mp.mpf(p) / mp.mpf(alpha)
            if r <= c:
                return None
            return mp.mpf(xm) ** p * mp.exp(mp.loggamma(n + 1) - mp.loggamma(n + 1 - c) + mp.loggamma(r - c) - mp.loggamma(r))

        m1, m2 = raw(1), raw(2)
        return m1, (None if m2 is None else mp.sqrt(m2 - m1**2))




@pytest.mark.parametrize("shape,n,rank", [
    *[(a, n, r) for a in (0.8, 2.5, 3.0) for n in (2, 10, 1000) for r in (1, 2)],
    (0.8, 10**6, 1),  # null mean: passes whatever the precision
    (0.8, 10**6, 2),
    (2.5, 10**6, 1),
    (2.5, 10**6, 2),
])
def test_pareto_closed_form(shape, n, rank):
    xm = 2.0
    s = O.rank_summary(M.Pareto(shape=shape, minimum=xm), n, rank)
    m1, sd = _pareto_moments(shape, xm, n, rank)
    if m1 is None:
        assert s.mean is None and s.var is None
        assert any("mean does not exist" in w for w in s.warnings)
        return
    assert rel_err(s.mean, m1) < PARAMETRIC_RTOL
    if sd is None:
        assert s.var is None
        assert any("variance does not exist" in w for w in s.warnings)
    else:
        assert rel_err(math.sqrt(s.var), sd) < PARAMETRIC_RTOL


@pytest.mark.parametrize("shape,rank,has_mean,has_var", [
    (0.8, 1, False, False),  # r * shape = 0.8 <= 1
    (1.0, 1, False, False),  # r * shape = 1 exactly: E[X] diverges (log)
    (0.5, 2, False, False),  # r * shape = 1
    (0.8, 2, True, False),   # 1 < 1.6 <= 2
    (1.0, 2, True, False),   # r * shape = 2 exactly: variance diverges
    (1.0, 3, True, True),
])
def test_pareto_moment_existence(shape, rank, has_mean, has_var):
    # E[X_r^p] < inf iff r * shape > p (from the Beta representation above)
    s = O.rank_summary(M.Pareto(shape=shape, minimum=1.0), 10, rank)
    assert (s.mean is not None) == has_mean
    assert (s.var is not None) == has_var


# ---------------------------------------------------------------------------
# 7. Power values: X = low + w U^(1/a), U ~ Beta(n - r + 1, r), so
#    E[U^c] = B(n-r+1+c, r) / B(n-r+1, r) (David and Nagaraja 2003, section
#    2.1, with the Beta moment formula). Reference: mpmath at 30 digits.
# ---------------------------------------------------------------------------
def _power_moments(a, low, high, n, r):
    with mp.workdps(30):
        k = mp.mpf(n - r + 1)

        def raw(c):
            return mp.exp(mp.loggamma(k + c) - mp.loggamma(k) + mp.loggamma(n + 1) - mp.loggamma(n + 1 + c))

        e1, e2 = raw(1 / mp.mpf(a)), raw(2 / mp.mpf(a))
        return low + (high - low) * e1, (high - low) * mp.sqrt(e2 - e1**2)




@pytest.mark.parametrize("exponent,n,rank", [
    *[(a, n, r) for a in (0.5, 3.0) for n in (1, 2, 10, 1000, 10**6) for r in (1, 2) if r <= n],
    (0.05, 1000, 1),
    (0.05, 1000, 2),
])
def test_power_closed_form(exponent, n, rank):
    want_mean, want_sd = _power_moments(exponent, 1.0, 5.0, n, rank)
    mean, sd = summary_mean_sd(M.Power(exponent=exponent, high=5.0, low=1.0), n, rank)
    assert rel_err(mean, want_mean) < PARAMETRIC_RTOL
    assert rel_err(sd, want_sd) < PARAMETRIC_RTOL


# ---------------------------------------------------------------------------
# 8. Empirical values.
# ---------------------------------------------------------------------------
STEP_SAMPLE = [3.1, 4.7, 4.7, 6.0, 7.4, 12.5]  # a tie on purpose


@pytest.mark.parametrize("n,rank", [(1, 1), (2, 1), (2, 2), (3, 1), (3, 2), (4, 1), (4, 2)])
def test_step_empirical_equals_direct_enumeration(n, rank):
    # smoothing "none": each past value has mass 1/N. Reference: enumerate all
    # N^n equally likely draws (exact discrete order statistics; David and
    # Nagaraja 2003, section 2.4, from memory), and P(max <= x_(i)) = (i/N)^n.
    model = M.empirical(STEP_SAMPLE, "none")
    draws = np.sort(np.array(list(itertools.product(STEP_SAMPLE, repeat=n))), axis=1)
    vals = draws[:, n - rank]
    s = O.rank_summary(model, n, rank)
    assert rel_err(s.mean, vals.mean()) < 1e-13
    assert abs(s.var - vals.var()) < 1e-12 * vals.var()
    N = len(STEP_SAMPLE)
    atoms = np.unique(STEP_SAMPLE)
    counts = np.array([np.sum(np.array(STEP_SAMPLE) <= a) for a in atoms])
    cdf = O.rank_cdf(model, n, rank, atoms)
    np.testing.assert_allclose(cdf, [np.mean(vals <= a) for a in atoms], rtol=1e-12)
    if rank == 1:
        np.testing.assert_allclose(cdf, (counts / N) ** n, rtol=1e-12)
    # quantiles: the smallest atom whose cumulative probability reaches p
    ps = np.array([0.01, 0.1, 0.3, 0.5, 0.7, 0.9, 0.99])
    srt = np.sort(vals)
    want = [srt[math.ceil(p * len(srt)) - 1] for p in ps]
    np.testing.assert_array_equal(O.rank_quantiles(model, n, rank, ps), want)


def test_silverman_bandwidth():
    # Silverman 1986, Density Estimation for Statistics and Data Analysis,
    # eq. 3.31 (from memory): h = 0.9 min(sd, IQR / 1.34) N^(-1/5); sample
    # quartiles by linear interpolation (Hyndman and Fan 1996, definition 7).
    x = np.array(KERNEL_SAMPLE)
    q75, q25 = np.percentile(x, [75, 25])
    want = 0.9 * min(np.std(x, ddof=1), (q75 - q25) / 1.34) * len(x) ** -0.2
    assert rel_err(M.empirical(KERNEL_SAMPLE, "kernel").h, want) < 1e-14


def test_kernel_empirical_single_bidder_moments():
    # A Gaussian kernel density estimate has mean = sample mean and variance =
    # sample variance (N-1)/N + h^2 (Silverman 1986, section 3).
    x = np.array(KERNEL_SAMPLE)
    model = M.empirical(KERNEL_SAMPLE, "kernel")
    s = O.rank_summary(model, 1, 1)
    assert rel_err(s.mean, x.mean()) < NONPARAMETRIC_RTOL
    assert rel_err(s.var, x.var(ddof=1) * (len(x) - 1) / len(x) + model.h**2) < NONPARAMETRIC_RTOL


# ---------------------------------------------------------------------------
# 9. Rank quantiles: Q(Beta(n - r + 1, r) quantile), with Q and the Beta
#    quantile from scipy.stats (David and Nagaraja 2003, section 2.1). For
#    large n the same mapping through the upper tail, isf(beta(r, m).isf(p)),
#    is used: it is the same number, free of the 1 - u rounding.
# ---------------------------------------------------------------------------
QUANTILE_FAMILIES = {
    "normal": (lambda: M.Normal(mean=100.0, sd=15.0), st.norm(100.0, 15.0)),
    "lognormal": (lambda: M.LogNormal(median=1.0, sigma=0.5), st.lognorm(0.5)),
    "lognormal-by-mean": (lambda: M.LogNormal(mean=2.0, sd=1.0),
                          st.lognorm(math.sqrt(math.log(1.25)), scale=2.0 / math.sqrt(1.25))),
    "gamma": (lambda: M.Gamma(shape=2.5, scale=3.0), st.gamma(2.5, scale=3.0)),
    "weibull": (lambda: M.Weibull(shape=1.7, scale=2.0), st.weibull_min(1.7, scale=2.0)),
    "beta": (lambda: M.BetaValues(alpha=2.0, beta=5.0, low=10.0, high=30.0), st.beta(2.0, 5.0, 10.0, 20.0)),
    "triangular": (lambda: M.Triangular(low=1.0, mode=2.0, high=5.0), st.triang(0.25, 1.0, 4.0)),
    "pareto": (lambda: M.Pareto(shape=2.5, minimum=2.0), st.pareto(2.5, scale=2.0)),
    "exponential": (lambda: M.Exponential(mean=3.0, shift=1.0), st.expon(1.0, 3.0)),
    "power": (lambda: M.Power(exponent=3.0, high=5.0, low=1.0), st.powerlaw(3.0, 1.0, 4.0)),
    "truncated-normal": (lambda: M.Truncated(M.Normal(mean=50.0, sd=10.0), 45.0, 80.0),
                         st.truncnorm(-0.5, 3.0, 50.0, 10.0)),
}
PS = np.array([0.001, 0.05, 0.25, 0.5, 0.75, 0.95, 0.999])


@pytest.mark.parametrize("family", sorted(QUANTILE_FAMILIES))
@pytest.mark.parametrize("n,rank", [(1, 1), (2, 1), (2, 2), (10, 1), (10, 2), (100, 1), (100, 2)])
def test_rank_quantiles_beta_ppf_through_model_ppf(family, n, rank):
    make, ref = QUANTILE_FAMILIES[family]
    want = ref.ppf(st.beta.ppf(PS, n - rank + 1, rank))
    np.testing.assert_allclose(O.rank_quantiles(make(), n, rank, PS), want, rtol=1e-11)


@pytest.mark.parametrize("family", sorted(QUANTILE_FAMILIES))
@pytest.mark.parametrize("n", [10, 1000, 10**6])
def test_rank_quantiles_large_n_through_upper_tail(family, n):
    make, ref = QUANTILE_FAMILIES[family]
    for rank in (1, 2):
        want = ref.isf(st.beta.isf(PS, rank, n - rank + 1))
        np.testing.assert_allclose(O.rank_quantiles(make(), n, rank, PS), want, rtol=1e-11)


@pytest.mark.parametrize("family", sorted(QUANTILE_FAMILIES))
@pytest.mark.parametrize("n", [2, 10, 1000, 10**6])
def test_rank_cdf_against_beta_cdf(family, n):
    # P(rank r of n <= x) = I_{F(x)}(n - r + 1, r) (David and Nagaraja 2003,
    # section 2.1), written as P(V >= S(x)) with V ~ Beta(r, n - r + 1) so the
    # upper tail keeps its digits; scipy.stats for S and the Beta distribution.
    make, ref = QUANTILE_FAMILIES[family]
    model = make()
    for rank in (1, 2):
        x = ref.isf(st.beta.isf(PS, rank, n - rank + 1))
        want = st.beta.sf(ref.sf(x), rank, n - rank + 1)
        np.testing.assert_allclose(O.rank_cdf(model, n, rank, x), want, rtol=1e-9)


# At n = 10^6 the points lie within 1e-9 of probability of the top of the support.
# There scipy.stats' triang survival function loses digits (1.1e-7 relative against
# mpmath), so it is no reference; and a truncated normal's S(x) = (S0(x) - S0(high)) /
# mass cancels, in ours and in scipy's truncnorm alike (1e-9 relative against mpmath).
@pytest.mark.parametrize("family,n", [(f, n) for f in sorted(QUANTILE_FAMILIES) for n in (2, 10, 1000, 10**6)
                                      if not (n == 10**6 and f in ("triangular", "truncated-normal"))])
def test_rank_sf_against_beta_cdf(family, n):
    # P(rank r of n > x) = P(V < S(x)), V ~ Beta(r, n - r + 1) (David and Nagaraja
    # 2003, section 2.1): relative digits deep in the upper tail, where 1 - cdf
    # would keep none; scipy.stats for S and the Beta distribution.
    make, ref = QUANTILE_FAMILIES[family]
    model = make()
    ps = np.concatenate((PS, [1e-12, 1e-9]))
    for rank in (1, 2):
        x = ref.isf(st.beta.isf(ps, rank, n - rank + 1))
        want = st.beta.cdf(ref.sf(x), rank, n - rank + 1)
        np.testing.assert_allclose(O.rank_sf(model, n, rank, x), want, rtol=1e-9)


@pytest.mark.parametrize("n,rank", [(1, 1), (2, 1), (3, 2), (6, 2), (6, 3), (10, 2), (9, 1)])
def test_rank_sf_binomial_sum_against_mpmath(n, rank):
    # With few terms, P(rank r of n > x) is the binomial sum P(Bin(n, S) >= r)
    # (David and Nagaraja 2003, eq. 2.1.3). Reference: mpmath's regularised incomplete
    # beta I_S(r, n - r + 1) at 40 digits, over S from where the answer nears underflow
    # to 1 - 1e-16: every term is positive, so the sum keeps its relative digits down
    # to the smallest normal double (below it, only the absolute 1e-300 is asked).
    s = np.concatenate((10.0 ** np.linspace(-150, -1, 40), np.linspace(0.05, 0.95, 19), 1.0 - 10.0 ** np.linspace(-16, -2, 15)))
    got = O._binomial_upper(n, rank, s)
    with mp.workdps(40):
        want = np.array([float(mp.betainc(rank, n - rank + 1, 0, mp.mpf(float(x)), regularized=True)) for x in s])
    normal = want >= 1e-300
    assert normal.sum() > 50
    np.testing.assert_allclose(got[normal], want[normal], rtol=4e-15, atol=0)
    np.testing.assert_allclose(got[~normal], want[~normal], rtol=0, atol=1e-300)


def test_rank_sf_routes_agree_at_the_binomial_threshold():
    # Either side of the switch from the binomial sum (n = 9, rank 1: 8 terms past the
    # first) to betainc (n = 10) the same function is taken: P(V < S), V ~ Beta(1, n),
    # with scipy.stats' Beta distribution and lognormal survival function as the
    # reference (David and Nagaraja 2003, section 2.1).
    model = M.LogNormal(median=50.0, sigma=0.4)
    x = st.lognorm.ppf(np.linspace(0.01, 0.99, 25), 0.4, scale=50.0)
    for n in (O._BINOMIAL_MAX_STEPS + 1, O._BINOMIAL_MAX_STEPS + 2):
        sf = st.lognorm.sf(x, 0.4, scale=50.0)
        np.testing.assert_allclose(O.rank_sf(model, n, 1, x), st.beta.cdf(sf, 1, n), rtol=1e-13)


def test_kept_standard_values_serve_each_model_its_own_values():
    # A normal-scale family's values at a cached rule's nodes come from standard values
    # kept with the rule: every lognormal filled from it must get its own quantiles
    # (scipy.stats.lognorm.ppf, isf in the upper tail), also after a mixture refined
    # another copy of the same rule, and the kept arrays must be read-only.
    for median, sigma in ((62000.0, 0.35), (3.0, 1.7), (62000.0, 0.35)):
        q = O.rank_quadrature(7, 2).fill(M.LogNormal(median=median, sigma=sigma))
        upper = q.v < 0.5
        want = np.where(upper, st.lognorm.isf(q.v, sigma, scale=median), st.lognorm.ppf(q.u, sigma, scale=median))
        np.testing.assert_allclose(q.values, want, rtol=1e-13)
    mixture = M.Mixture([(0.5, M.Normal(10.0, 0.01)), (0.5, M.Normal(60.0, 0.01))])
    refined = O.rank_quadrature(7, 2).fill(mixture)
    assert refined.panels > O.rank_quadrature(7, 2).panels  # the dip between the clusters was refined
    q = O.rank_quadrature(7, 2).fill(M.Normal(5.0, 2.0))
    np.testing.assert_allclose(q.values, np.where(q.v < 0.5, st.norm.isf(q.v, 5.0, 2.0), st.norm.ppf(q.u, 5.0, 2.0)), rtol=1e-13)
    kept = O.rank_quadrature(7, 2).kept(("standard", M.standard_normal_at), lambda: None)
    with pytest.raises(ValueError):
        kept[0, 0] = 1.0
    # The bid route's node arrays are kept the same way: read-only, so no request can
    # change what the next one reads.
    with pytest.raises(ValueError):
        ForwardAuction(M.LogNormal(median=3.0, sigma=0.5), 5).bids.nodes().rivals[0, 0] = 1.0


@pytest.mark.parametrize("rank", [1, 2])
def test_rank_cdf_against_monte_carlo(rank):
    # Seeded Monte Carlo: 200 000 auctions of 10 lognormal(0, 0.5) values. The
    # empirical cdf at x has binomial standard error sqrt(p(1-p)/200000)
    # (<= 0.0011); 5 standard errors allowed (common practice, no source).
    reps, n = 200_000, 10
    rng = np.random.default_rng(20240601)
    vals = np.sort(rng.lognormal(0.0, 0.5, size=(reps, n)), axis=1)[:, n - rank]
    model = M.LogNormal(median=1.0, sigma=0.5)
    x = np.quantile(vals, [0.02, 0.1, 0.25, 0.5, 0.75, 0.9, 0.98])
    p = O.rank_cdf(model, n, rank, x)
    emp = np.array([np.mean(vals <= xi) for xi in x])
    se = np.sqrt(p * (1 - p) / reps)
    assert np.all(np.abs(emp - p) < 5 * se), (emp, p)


@pytest.mark.parametrize("family", ["normal", "lognormal", "gamma", "weibull", "beta", "triangular"])
@pytest.mark.parametrize("n", [2, 10, 100])
def test_rank_logpdf_and_curve_against_scipy(family, n):
    # Source: scipy.stats.order_statistic pdf/cdf (and the textbook density,
    # David and Nagaraja 2003, section 2.1).
    make_model, make_ref = SCIPY_FAMILIES[family]
    model = make_model()
    for rank in (1, 2):
        ref = st.order_statistic(make_ref(), r=n - rank + 1, n=n)
        x, pdf, cdf = O.rank_curve(model, n, rank, 25)
        inner = slice(1, -1)  # the ends may sit on a support bound
        np.testing.assert_allclose(pdf[inner], ref.pdf(x[inner]), rtol=1e-9)
        np.testing.assert_allclose(np.exp(O.rank_logpdf(model, n, rank, x[inner])), ref.pdf(x[inner]), rtol=1e-9)
        np.testing.assert_allclose(cdf, ref.cdf(x), rtol=1e-9, atol=1e-15)


# ---------------------------------------------------------------------------
# 10. Joint density of two ranks.
# ---------------------------------------------------------------------------
@pytest.mark.parametrize("n", [2, 3, 5, 50])
def test_joint_density_uniform_top_two_closed_form(n):
    # Uniform values on [0, 1]: f(x, y) = n (n-1) y^(n-2) for 0 < y < x < 1,
    # zero for y > x (David and Nagaraja 2003, eq. 2.2.1).
    rng = np.random.default_rng(11)
    a, b = rng.uniform(0.01, 0.99, size=(2, 400))
    x, y = np.maximum(a, b), np.minimum(a, b)
    model = M.Uniform(low=0.0, high=1.0)
    got = np.exp(O.joint_logdensity(model, n, 1, 2, x, y))
    np.testing.assert_allclose(got, n * (n - 1) * y ** (n - 2), rtol=1e-12)
    assert np.all(np.exp(O.joint_logdensity(model, n, 1, 2, y, x)[x > y]) == 0.0)
    out = T.joint_density(model, n, points=list(zip(x[:20], y[:20])))
    np.testing.assert_allclose([p["density"] for p in out["points"]], n * (n - 1) * y[:20] ** (n - 2), rtol=1e-12)


@pytest.mark.parametrize("n", [3, 6, 40])
def test_joint_density_uniform_other_ranks_closed_form(n):
    # Same equation (David and Nagaraja 2003, eq. 2.2.1), ranks from the top:
    # f_ij(x, y) = n! / ((i-1)! (j-i-1)! (n-j)!) S(x)^(i-1) (F(x)-F(y))^(j-i-1) F(y)^(n-j) f(x) f(y).
    rng = np.random.default_rng(12)
    a, b = rng.uniform(0.01, 0.99, size=(2, 200))
    x, y = np.maximum(a, b), np.minimum(a, b)
    model = M.Uniform(low=0.0, high=1.0)
    got13 = np.exp(O.joint_logdensity(model, n, 1, 3, x, y))
    np.testing.assert_allclose(got13, n * (n - 1) * (n - 2) * (x - y) * y ** (n - 3), rtol=1e-11)
    got23 = np.exp(O.joint_logdensity(model, n, 2, 3, x, y))
    np.testing.assert_allclose(got23, n * (n - 1) * (n - 2) * (1 - x) * y ** (n - 3), rtol=1e-11)


def test_joint_density_against_monte_carlo_histogram():
    # Seeded Monte Carlo: 200 000 auctions of 5 lognormal(0, 0.5) values; the
    # (highest, second-highest) pairs are binned on a 9 x 9 grid. The model's
    # probability of each cell (Gauss-Legendre 12 x 12 over the cell, or over
    # its lower triangle on the diagonal) must match the cell's share within
    # 5 binomial standard errors sqrt(P(1-P)/N) (common practice, no source);
    # cells above the diagonal must be empty and have zero probability.
    reps, n = 200_000, 5
    rng = np.random.default_rng(20240602)
    draws = np.sort(rng.lognormal(0.0, 0.5, size=(reps, n)), axis=1)
    hi, lo = draws[:, -1], draws[:, -2]
    edges = np.array([0.3, 0.8, 1.0, 1.2, 1.4, 1.6, 1.9, 2.3, 3.0, 4.5])
    counts, _, _ = np.histogram2d(hi, lo, bins=[edges, edges])
    model = M.LogNormal(median=1.0, sigma=0.5)
    gx, gw = np.polynomial.legendre.leggauss(12)

    def dens(x, y):
        return np.exp(O.joint_logdensity(model, n, 1, 2, x, y))

    def cell_probability(a, b, c, d):
        x = 0.5 * (b - a) * gx + 0.5 * (b + a)
        wx = 0.5 * (b - a) * gw
        if c >= b:
            return 0.0
        if (a, b) == (c, d):  # lower triangle a <= y <= x <= b: y = a + (x - a) t
            t, wt = 0.5 * gx + 0.5, 0.5 * gw
            X = x[:, None]
            return float(np.sum(wx[:, None] * wt[None, :] * (X - a) * dens(X, a + (X - a) * t[None, :])))
        y = 0.5 * (d - c) * gx + 0.5 * (d + c)
        wy = 0.5 * (d - c) * gw
        return float(np.sum(wx[:, None] * wy[None, :] * dens(x[:, None], y[None, :])))

    checked = 0
    for i in range(len(edges) - 1):
        for j in range(len(edges) - 1):
            P = cell_probability(edges[i], edges[i + 1], edges[j], edges[j + 1])
            if j > i:
                assert P == 0.0 and counts[i, j] == 0
                continue
            se = math.sqrt(P * (1 - P) / reps)
            assert abs(counts[i, j] / reps - P) < 5 * se + 1e-12, (i, j, counts[i, j] / reps, P)
            checked += P > 1e-3
    assert checked >= 20


@pytest.mark.parametrize("family", ["lognormal", "gamma", "beta"])
def test_joint_density_marginals_match_rank_logpdf(family):
    # Integrating the joint density of (rank 1, rank 2) over one variable gives
    # the other's density (David and Nagaraja 2003, section 2.2); the integral
    # by scipy.integrate.quad.
    model = SCIPY_FAMILIES[family][0]()
    n = 5
    lo_b, hi_b = model.lower, model.upper

    def jd(x, y):
        return float(np.exp(O.joint_logdensity(model, n, 1, 2, x, y)))

    for x in O.rank_quantiles(model, n, 2, [0.1, 0.5, 0.9]).tolist() + O.rank_quantiles(model, n, 1, [0.5, 0.95]).tolist():
        f1 = integrate.quad(lambda y: jd(x, y), lo_b if math.isfinite(lo_b) else -INF, x, epsabs=0, epsrel=1e-12, limit=200)[0]
        f2 = integrate.quad(lambda u: jd(u, x), x, hi_b, epsabs=0, epsrel=1e-12, limit=200)[0]
        assert rel_err(f1, np.exp(O.rank_logpdf(model, n, 1, x))) < 1e-8
        assert rel_err(f2, np.exp(O.rank_logpdf(model, n, 2, x))) < 1e-8


# ---------------------------------------------------------------------------
# 11. A spread far smaller than where the values sit, and the top spacing.
#     The sd of a rank is taken about a reference next to it and the gap
#     E[X_(1) - X_(2)] is integrated as one quantity, so neither may depend on
#     where the model sits. References: mpmath at 30 digits (section 2's
#     textbook density; 30 digits leave 20 beside a location 1e8 times the
#     spread) and the uniform spacing (Beta means, below). Every error is
#     within the report's own abs_error.
# ---------------------------------------------------------------------------
NARROW = {
    "normal_150000_sd_0.001": (lambda: M.Normal(150000.0, 0.001), lambda: mp_normal(150000.0, 0.001),
                               st.norm(150000.0, 0.001).isf, -INF, INF),
    "lognormal_1e6_sigma_1e-8": (lambda: M.LogNormal(median=1e6, sigma=1e-8), lambda: mp_lognormal(1e6, 1e-8),
                                 st.lognorm(1e-8, scale=1e6).isf, 0.0, INF),
    "beta_2_3_at_1e6_width_1e-3": (lambda: M.BetaValues(2.0, 3.0, 1e6, 1e6 + 1e-3), None, None, None, None),
    "triangular_at_-1e8": (lambda: M.Triangular(-1e8, -1e8 + 0.25, -1e8 + 1.0), None, None, None, None),
}


def _narrow_reference(name):
    """The model, and its mpmath F, S, f built at 30 digits (normalisers included)."""
    build, make_funcs, isf, lower, upper = NARROW[name]
    model = build()
    with mp.workdps(30):
        if make_funcs is not None:
            return model, make_funcs(), isf, lower, upper
        # the parameters as the model holds them, so that the reference is the same model
        if isinstance(model, M.BetaValues):
            funcs, isf = mp_beta(2.0, 3.0, model.lower, model.upper), st.beta(2.0, 3.0, model.lower, model.width).isf
        else:
            funcs, isf = mp_triangular(model.lower, model.c, model.upper), st.triang(model.fc, model.lower, model.w).isf
    return model, funcs, isf, model.lower, model.upper


@pytest.mark.parametrize("name,n,rank", [
    ("normal_150000_sd_0.001", 1000, 2),
    ("lognormal_1e6_sigma_1e-8", 10**6, 1),
    ("lognormal_1e6_sigma_1e-8", 10**6, 2),
    ("beta_2_3_at_1e6_width_1e-3", 1000, 1),
    ("beta_2_3_at_1e6_width_1e-3", 10, 2),
    ("triangular_at_-1e8", 100, 2),
])
def test_narrow_model_rank_sd_against_mpmath(name, n, rank):
    # rel 1e-10 on the sd (the service's target for parametric families), whatever the
    # location; the mean as well.
    model, funcs, isf, lower, upper = _narrow_reference(name)
    kinks = (model.c,) if isinstance(model, M.Triangular) else ()
    want_mean, want_sd = mp_rank_moments(*funcs, n, rank, quantile_breaks(isf, n, rank, lower, upper, kinks))
    rep = T.top_values(model, n, ranks=[rank])
    got = rep["results"][0]
    assert rel_err(got["sd"], want_sd) < PARAMETRIC_RTOL
    assert rel_err(got["mean"], want_mean) < PARAMETRIC_RTOL
    bound = rep["numerics"]["abs_error"]
    assert abs(got["sd"] - float(want_sd)) <= bound and abs(got["mean"] - float(want_mean)) <= bound


@pytest.mark.parametrize("low,width,n", [
    (0.0, 1.0, 2), (1e6, 1e-3, 1000), (1e6, 1e-3, 10**6), (-1e9, 1e-3, 7), (5.0, 2e-12, 100),
])
def test_uniform_gap_is_the_beta_spacing(low, width, n):
    # U_(k:n) ~ Beta(k, n - k + 1) has mean k/(n + 1) (David and Nagaraja 2003, section 2.1),
    # so E[X_(1) - X_(2)] = (high - low)/(n + 1) for uniform values, high - low as the model
    # holds them (an exact subtraction). Rel 1e-12, within the report's abs_error.
    model = M.Uniform(low, low + width)
    want = (model.high - model.low) / (n + 1)
    rep = T.top_values(model, n)
    assert rep["expected_gap"] == pytest.approx(want, rel=1e-12)
    assert abs(rep["expected_gap"] - want) <= rep["numerics"]["abs_error"]


GAP_FAMILIES = {
    "normal": (lambda: M.Normal(100.0, 15.0), lambda: mp_normal(100.0, 15.0), st.norm(100.0, 15.0).isf, -INF, INF, ()),
    "lognormal": (lambda: M.LogNormal(median=1.0, sigma=0.5), lambda: mp_lognormal(1.0, 0.5), st.lognorm(0.5).isf, 0.0, INF, ()),
    "gamma": (lambda: M.Gamma(2.5, 3.0), lambda: mp_gamma(2.5, 3.0), st.gamma(2.5, scale=3.0).isf, 0.0, INF, ()),
    "weibull": (lambda: M.Weibull(1.7, 2.0), lambda: mp_weibull(1.7, 2.0), st.weibull_min(1.7, scale=2.0).isf, 0.0, INF, ()),
    "beta": (lambda: M.BetaValues(2.0, 5.0, 10.0, 30.0), lambda: mp_beta(2.0, 5.0, 10.0, 30.0),
             st.beta(2.0, 5.0, 10.0, 20.0).isf, 10.0, 30.0, ()),
    "triangular": (lambda: M.Triangular(1.0, 2.0, 5.0), lambda: mp_triangular(1.0, 2.0, 5.0),
                   st.triang(0.25, 1.0, 4.0).isf, 1.0, 5.0, (2.0,)),
    "truncated_normal": (lambda: M.Truncated(M.Normal(50.0, 10.0), 45.0, 80.0),
                         lambda: mp_truncated(mp_normal(50.0, 10.0), 45.0, 80.0), st.truncnorm(-0.5, 3.0, 50.0, 10.0).isf,
                         45.0, 80.0, ()),
    "mixture": (lambda: M.Mixture([(0.75, M.Normal(mean=10.0, sd=2.0)), (0.25, M.Uniform(low=12.0, high=20.0))]),
                lambda: mp_mixture([(0.75, mp_normal(10.0, 2.0)), (0.25, mp_uniform(12.0, 20.0))]), None, -INF, INF, (12.0, 20.0)),
}


@pytest.mark.parametrize("family", sorted(GAP_FAMILIES))
@pytest.mark.parametrize("n", [2, 50])
def test_gap_against_mpmath(family, n):
    # E[X_(1)] - E[X_(2)] from the two ranks' mpmath means (section 2), rel 1e-10; the
    # mixture has no precise Q' and takes the difference of its means, rel 1e-8.
    build, make_funcs, isf, lower, upper, kinks = GAP_FAMILIES[family]
    if isf is None:
        isf = _mixture_isf()
    with mp.workdps(30):  # the reference's normalisers at 30 digits too
        funcs = make_funcs()
    means = [mp_rank_moments(*funcs, n, r, quantile_breaks(isf, n, r, lower, upper, kinks))[0] for r in (1, 2)]
    want = means[0] - means[1]
    got = T.top_values(build(), n, ranks=[1])["expected_gap"]
    assert rel_err(got, want) < (NONPARAMETRIC_RTOL if family == "mixture" else PARAMETRIC_RTOL)


@pytest.mark.parametrize("shape,has_gap", [(0.8, False), (1.0, False), (1.2, True), (3.0, True)])
def test_pareto_gap_exists_with_the_top_mean(shape, has_gap):
    # E[X_(1) - X_(2)] needs E[X_(1)], shape > 1 (section 6); where it exists it is the
    # difference of the two closed-form means, rel 1e-10.
    rep = T.top_values(M.Pareto(shape, 2.0), 10)
    if not has_gap:
        assert rep["expected_gap"] is None
        assert any("mean does not exist" in w or "expected_gap is null" in w for w in rep["warnings"])
        return
    want = _pareto_moments(shape, 2.0, 10, 1)[0] - _pareto_moments(shape, 2.0, 10, 2)[0]
    assert rel_err(rep["expected_gap"], want) < PARAMETRIC_RTOL


@pytest.mark.parametrize("n", [2, 3])
def test_step_empirical_gap_equals_direct_enumeration(n):
    # The step model's gap by its atoms' spacings, against the mean of X_(1) - X_(2) over every
    # equally likely n-tuple of the sample (as in section 8's enumeration).
    draws = np.sort(np.array(list(itertools.product(STEP_SAMPLE, repeat=n))), axis=1)
    want = float(np.mean(draws[:, -1] - draws[:, -2]))
    got = T.top_values(M.empirical(STEP_SAMPLE, "none"), n)["expected_gap"]
    assert rel_err(got, want) < 1e-13
