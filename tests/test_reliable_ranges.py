"""The declared reliable range of each family's parameters (``Param.reliable``), measured:
at each end of a range the highest, second-highest and second-lowest of 5 values come
out right against a 30-digit mpmath reference, and every auction rule's expected
revenue (payment, in reverse) agrees with the second-highest value's (second-lowest
cost's) mean (revenue equivalence, Myerson 1981; Riley and Samuelson 1981); one step
beyond the end the constructor refuses the value, naming it.

Values beyond were seen to go wrong: a gamma of shape 1e-5 or a power function of
exponent 0.001 left a reverse auction among many bidders with a payment of 0 where it
is 1e-77 or 5e-231, a beta of alpha 1e-100 spent 42 s in the incomplete beta's inverse,
a Weibull of shape 0.02 lost the first-price route among a million bidders in reverse,
a lognormal of sigma 20 (or of median 1e150 and sigma 10) overflowed at quantiles the
quadratures need, and subnormal scales kept only a few digits.
"""
from __future__ import annotations

import math

import mpmath as mp
import pytest

import api_reports as A
from service.core import models as M
from service.core import orderstats as O
from service.core.errors import ParameterError

mp.mp.dps = 30
N = 5


def cuts(*xs):
    return [mp.mpf(x) for x in xs]


# Breakpoints for mpmath's quadrature in value space: where the tails bend, decade by decade.
GAMMA_CUTS = cuts(0, "1e-20", "1e-15", "1e-10", "1e-6", "1e-3", "0.01", "0.1", "0.5", 1, 2, 5, 10, 20, 40, 80) + [mp.inf]
UNIT_CUTS = cuts(0, "1e-40", "1e-20", "1e-10", "1e-5", "1e-3", "0.01", "0.1", "0.3", "0.5", "0.7", "0.9", "0.99", "0.999",
                 "0.99999", 1)


def rank_tail(s, n, r):
    """P(rank r of n > x) = P(Bin(n, S) >= r) (David and Nagaraja, Order Statistics, 3rd ed.,
    2003, eq. 2.1.3); at 30 digits F = 1 - S keeps all the digits a double needs."""
    return mp.fsum(mp.binomial(n, j) * s**j * (1 - s) ** (n - j) for j in range(r, n + 1))


def mp_gamma_rank_mean(k, r):
    """E = int_0^inf P(X_r > x) dx, S the regularised upper incomplete gamma (mpmath)."""
    k = mp.mpf(k)
    return mp.quad(lambda x: rank_tail(mp.gammainc(k, x, mp.inf, regularized=True), N, r), GAMMA_CUTS)


def mp_beta_rank_mean(a, b, r, breaks=UNIT_CUTS):
    """E = int_0^1 P(X_r > x) dx, S the regularised incomplete beta (mpmath); ``breaks`` may
    stop short of 1 where S is below 1e-40."""
    a, b = mp.mpf(a), mp.mpf(b)
    return mp.quad(lambda x: rank_tail(mp.betainc(a, b, x, 1, regularized=True), N, r), breaks)


BETA_1E6_CUTS = cuts(0, "1e-8", "1e-7", "1e-6", "3e-6", "1e-5", "3e-5", "1e-4")  # S(1e-4) = e^-100-ish: 0 at 30 digits


def mp_lognormal_rank_mean(median, sigma, r):
    """E = int e^(mu + sigma z) (rank-r density of the standard normal z) dz (mpmath)."""
    mu, s = mp.log(mp.mpf(median)), mp.mpf(sigma)
    m = N - r + 1
    c = mp.factorial(N) / (mp.factorial(m - 1) * mp.factorial(r - 1))
    return mp.quad(lambda z: mp.exp(mu + s * z) * c * mp.ncdf(z) ** (m - 1) * mp.ncdf(-z) ** (r - 1) * mp.npdf(z),
                   [-mp.inf, -10, -5, 0, 5, 10, 15, 20, 30, 40, mp.inf])


def mp_weibull_rank1_mean(shape, scale):
    """E[max of n] = n sum_j C(n-1, j) (-1)^j G(1 + 1/k) / (j + 1)^(1 + 1/k): with y = -log(1 - u),
    the max's density n u^(n-1) expands binomially (derived here; mpmath at 30 digits)."""
    c = 1 + 1 / mp.mpf(shape)
    return mp.mpf(scale) * N * mp.fsum(mp.binomial(N - 1, j) * (-1) ** j * mp.gamma(c) / (j + 1) ** c for j in range(N))


def mp_power_rank_mean(exponent, r):
    """X = U^(1/a) on [0, 1]; rank r of n has U ~ Beta(n-r+1, r), so E = B(n-r+1+1/a, r) / B(n-r+1, r)."""
    m, c = N - r + 1, 1 / mp.mpf(exponent)
    return mp.beta(m + c, r) / mp.beta(m, r)


def check_model(model, ref, rtol=1e-9):
    """Ranks 1 and 2 of N and, for a reverse auction (the lowest cost wins), rank N - 1: the
    second-lowest cost, which every rule pays in expectation."""
    got = {r: O.rank_summary(model, N, r).mean for r in (1, 2, N - 1)}
    for r, x in got.items():
        assert x == pytest.approx(float(ref(r)), rel=rtol), r
    # Every rule's revenue (payment) equals E[second-highest value] (E[second-lowest cost])
    # without a reserve (revenue equivalence, Myerson 1981; Riley and Samuelson 1981).
    for direction, rank in (("forward", 2), ("reverse", N - 1)):
        rep = A.revenue_report(model, direction, N, None, 0.0 if direction == "forward" else None)
        key = "expected_revenue" if direction == "forward" else "expected_payment"
        for res in rep["results"]:
            assert res[key] == pytest.approx(got[rank], rel=rtol), (direction, res["rule"])
        assert not [w for w in rep["warnings"] if "not reliable" in w]


AT_THE_ENDS = [
    # (id, model, reference mean of rank r of N)
    ("gamma-shape-0.01", lambda: M.Gamma(0.01, 1.0), lambda r: mp_gamma_rank_mean("0.01", r)),
    ("gamma-scale-1e-300", lambda: M.Gamma(2.0, 1e-300), lambda r: mp.mpf("1e-300") * mp_gamma_rank_mean(2, r)),
    ("beta-0.01-2", lambda: M.BetaValues(0.01, 2.0), lambda r: mp_beta_rank_mean("0.01", 2, r)),
    ("beta-2-0.01", lambda: M.BetaValues(2.0, 0.01), lambda r: mp_beta_rank_mean(2, "0.01", r)),
    ("beta-0.01-0.01", lambda: M.BetaValues(0.01, 0.01), lambda r: mp_beta_rank_mean("0.01", "0.01", r)),
    ("beta-2-1e6", lambda: M.BetaValues(2.0, 1e6), lambda r: mp_beta_rank_mean(2, "1e6", r, BETA_1E6_CUTS)),
    ("lognormal-sigma-12", lambda: M.LogNormal(median=1.0, sigma=12.0), lambda r: mp_lognormal_rank_mean(1, 12, r)),
    ("lognormal-1e150-9.5", lambda: M.LogNormal(median=1e150, sigma=9.5), lambda r: mp_lognormal_rank_mean("1e150", "9.5", r)),
    ("power-0.01", lambda: M.Power(0.01, 1.0), lambda r: mp_power_rank_mean("0.01", r)),
]


@pytest.mark.parametrize("case", AT_THE_ENDS, ids=lambda c: c[0])
def test_answers_are_right_at_the_ends_of_the_ranges(case):
    _, model, ref = case
    check_model(model(), ref)


def test_weibull_at_its_smallest_shape():
    # The closed form above (mpmath, 30 digits): E[max of 5], shape 0.03, scale 1e150 (about 1e188).
    model = M.Weibull(0.03, 1e150)
    assert O.rank_summary(model, N, 1).mean == pytest.approx(float(mp_weibull_rank1_mean("0.03", "1e150")), rel=1e-9)
    rep = A.revenue_report(model, "forward", N, None, 0.0)
    means = [r["expected_revenue"] for r in rep["results"]]
    assert max(means) - min(means) <= 1e-12 * max(means)  # revenue equivalence (Myerson 1981)


@pytest.mark.parametrize("build,field", [
    (lambda: M.Gamma(0.0099, 1.0), "shape"),
    (lambda: M.Gamma(2.0, 1e-301), "scale"),
    (lambda: M.Weibull(0.029, 1.0), "shape"),
    (lambda: M.Weibull(2.0, 1e-310), "scale"),
    (lambda: M.BetaValues(0.009, 2.0), "alpha"),
    (lambda: M.BetaValues(2.0, 0.009), "beta"),
    (lambda: M.BetaValues(2.0, 1.1e6), "beta"),
    (lambda: M.BetaValues(1e-310, 1e-310), "alpha"),
    (lambda: M.LogNormal(median=1.0, sigma=12.5), "sigma"),
    (lambda: M.LogNormal(median=1e150, sigma=10.0), "sigma"),  # e^(345 + 370): past 1e308 at 1e-300 from the top
    (lambda: M.LogNormal(mean=1.0, sd=1e80), "sd"),  # sigma = sqrt(log(1 + 1e160)), about 19.2
    (lambda: M.LogNormal(median=1e-310, sigma=1.0), "median"),
    (lambda: M.Normal(1e150, 1e-320), "sd"),
    (lambda: M.Exponential(1e-310), "mean"),
    (lambda: M.Pareto(3.0, 1e-310), "minimum"),
    (lambda: M.Power(0.0099, 1.0), "exponent"),
    (lambda: M.Uniform(0.0, 1e-310), "high"),
    (lambda: M.Triangular(0.0, 0.0, 1e-310), "high"),
])
def test_values_beyond_the_ranges_are_refused_by_name(build, field):
    with pytest.raises(ParameterError) as refused:
        build()
    assert refused.value.field == field
    assert "reliable" in refused.value.message


@pytest.mark.parametrize("cls", list(M.PARAMETRIC.values()), ids=lambda c: c.family)
def test_every_range_is_a_closed_interval(cls):
    for name, p in cls.parameters.items():
        lo, hi = p.reliable
        assert lo is None or math.isfinite(lo)
        assert hi is None or math.isfinite(hi)
        assert lo is None or hi is None or lo < hi, name
