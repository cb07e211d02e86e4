"""Reference checks for the models whose every evaluation is a long sum (mixtures of
many components, nested mixtures, kernel densities through thousands of values),
and for the optimal reserve of an irregular model. These are the requests that
used to run into the time budget; the checks here are of their answers, never of
their time (make bench prints that).

References, named beside each check:

* scipy.stats distributions with array parameters, summed with the mixture's
  weights, as the mixture's cdf, sf and pdf; Gauss-Legendre quadrature (nodes from
  scipy.special.roots_legendre, at 48 and at 64, which must agree) on the pieces
  between the components' kinks, and scipy.integrate.quad over the tail, for
  E[second-highest of n] = int x n(n-1) F^(n-2) S f dx (David and Nagaraja,
  Order Statistics, 3rd ed., 2003, section 2.1), which by revenue equivalence
  (Myerson, Optimal Auction Design, Mathematics of Operations Research, 1981, section 6;
  Riley and Samuelson, Optimal Auctions, American Economic Review, 1981, section I;
  sections from memory) is every standard rule's revenue
  without a reserve, and with a reserve r is r n F(r)^(n-1) S(r) + the same
  integral from r (Krishna, Auction Theory, 2nd ed., 2009, ch. 2);
* the first-price bid b(v) = v - int F^(n-1) / F(v)^(n-1) (Krishna 2009, ch. 2),
  by the same Gauss-Legendre pieces;
* the kernel density as scipy.stats.gaussian_kde with the same bandwidth, and as
  the plain sum of all N kernel terms with scipy.special.ndtr (the brute force);
* the optimal reserve by brute force: scipy.integrate.quad of the seller's payoff
  at every reserve of a fine grid, then scipy.optimize.minimize_scalar around the
  best grid point.

The mixtures and samples are invented stress shapes, not data.
"""
from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.stats as st
from scipy import integrate, optimize
from scipy import special as sp

import api_reports as A
from service.core import models as M
from service.core import sweeps as S
from service.core.tables import LogTable
from service.web.fields import build_value_model


# ---------------------------------------------------------------------------
# Mixture specifications: the request's JSON, and the same as scipy.stats
# ---------------------------------------------------------------------------
def _shape(i):
    """Six families over a wide range, as in the load test's stress mixture (invented)."""
    return [
        {"family": "lognormal", "median": 40000 + 1000 * i, "sigma": 0.2 + 0.02 * (i % 40)},
        {"family": "gamma", "shape": 2 + i % 50, "scale": 3000},
        {"family": "pareto", "shape": 3.5 + 0.1 * (i % 50), "minimum": 20000 + 500 * i},
        {"family": "weibull", "shape": 1.5 + 0.1 * (i % 50), "scale": 50000},
        {"family": "triangular", "low": 10000 * (i % 50), "mode": 10000 * (i % 50) + 5000, "high": 10000 * (i % 50) + 20000},
        {"family": "uniform", "low": 1000 * i, "high": 1000 * i + 30000},
    ][i % 6]


def mixture_spec(k, offset=0):
    return {"family": "mixture", "components": [{"weight": 1.0 / k, "model": _shape(i + offset)} for i in range(k)]}


def nested_spec(k=50, m=50):
    return {"family": "mixture", "components": [{"weight": 1.0 / k, "model": mixture_spec(m, j)} for j in range(k)]}


def _scipy_dist(spec):
    f = spec["family"]
    if f == "lognormal":
        return st.lognorm(spec["sigma"], scale=spec["median"])
    if f == "gamma":
        return st.gamma(spec["shape"], scale=spec["scale"])
    if f == "pareto":
        return st.pareto(spec["shape"], scale=spec["minimum"])
    if f == "weibull":
        return st.weibull_min(spec["shape"], scale=spec["scale"])
    if f == "triangular":
        w = spec["high"] - spec["low"]
        return st.triang((spec["mode"] - spec["low"]) / w, loc=spec["low"], scale=w)
    if f == "uniform":
        return st.uniform(loc=spec["low"], scale=spec["high"] - spec["low"])
    if f == "normal":
        return st.norm(spec["mean"], spec["sd"])
    raise ValueError(f)


def _leaves(spec, weight=1.0):
    if spec["family"] != "mixture":
        return [(weight, spec)]
    return [leaf for c in spec["components"] for leaf in _leaves(c["model"], weight * c["weight"])]


class ScipyMixture:
    """F, S and f of a (possibly nested) mixture from scipy.stats, one vectorised call
    per family with the leaves' parameters as arrays (reference, independent of the core)."""

    def __init__(self, spec):
        groups = {}
        for w, leaf in _leaves(spec):
            groups.setdefault(leaf["family"], []).append((w, leaf))
        self.parts = []
        for family, members in groups.items():
            keys = [k for k in members[0][1] if k != "family"]
            params = {k: np.array([leaf[k] for _, leaf in members], float) for k in keys}
            dist = _scipy_dist({"family": family, **params})
            self.parts.append((np.array([w for w, _ in members]), dist))
        self.kinks = sorted({float(v) for _, leaf in _leaves(spec) if leaf["family"] in ("triangular", "uniform", "pareto")
                             for k, v in leaf.items() if k in ("low", "mode", "high", "minimum")})

    def _sum(self, method, x):
        x = np.asarray(x, float)
        return sum(getattr(d, method)(x[..., None]) @ w for w, d in self.parts)

    def cdf(self, x):
        return self._sum("cdf", x)

    def sf(self, x):
        return self._sum("sf", x)

    def pdf(self, x):
        return self._sum("pdf", x)


def quad_pieces(fn, edges, tail_from=None):
    """scipy.integrate.quad over consecutive edges, and from the last edge to infinity."""
    total = 0.0
    for a, b in zip(edges[:-1], edges[1:]):
        if b > a:
            total += integrate.quad(fn, a, b, limit=200, epsabs=0.0, epsrel=1e-12)[0]
    if tail_from is not None:
        total += integrate.quad(fn, tail_from, np.inf, limit=200, epsabs=0.0, epsrel=1e-12)[0]
    return total


class GaussPieces:
    """Gauss-Legendre quadrature (nodes from scipy.special.roots_legendre) on every piece
    between consecutive edges, where the mixture's F, S and f are smooth (the edges
    hold every kink). F, S and f are evaluated once, at 48 and at 64 nodes a piece;
    each integral is taken at both orders, which must agree to 1e-12 (the reference
    checks itself). Integrals run between edges."""

    def __init__(self, ref, edges):
        self.edges = np.unique(np.asarray(edges, float))
        a, b = self.edges[:-1], self.edges[1:]
        self.orders = []
        for k in (48, 64):
            t, w = sp.roots_legendre(k)
            x = (0.5 * (b + a))[:, None] + (0.5 * (b - a))[:, None] * t
            flat = x.ravel()
            values = [f(flat).reshape(x.shape) for f in (ref.cdf, ref.sf, ref.pdf)]
            self.orders.append((x, (0.5 * (b - a))[:, None] * w, values))

    def integral(self, fn, start, stop):
        """The integral of fn(x, F, S, f) from edge ``start`` to edge ``stop``."""
        i, j = np.searchsorted(self.edges, [start, stop])
        assert self.edges[i] == start and self.edges[j] == stop
        totals = [math.fsum((w[i:j] * fn(x[i:j], *(v[i:j] for v in values))).ravel()) for x, w, values in self.orders]
        assert totals[1] == pytest.approx(totals[0], rel=1e-12, abs=0.0)
        return totals[1]


# Beyond TOP = 1.2e9 the mixtures' heaviest tail (Pareto, index 3.5, minimum at most
# 69,000) leaves S < 2e-15, so the revenue integral beyond is below
# n (n-1) S(TOP) E[X; X > TOP] < 1e-18: the pieces stop there.
TOP = 600000.0 * 2.0**11


def mixture_edges(ref, *extra):
    """0, the kinks, a grid to 600,000, doublings to TOP, and any extra edges."""
    return sorted(set([0.0, *ref.kinks, *np.linspace(0.0, 600000.0, 13), *(600000.0 * 2.0 ** np.arange(1, 12)), *extra]))


def second_price_revenue(pieces, ref, n, reserve=0.0):
    """E[max(X2, r) 1{X1 >= r}] = r n F(r)^(n-1) S(r) + int_r x n(n-1) F^(n-2) S f dx
    (Krishna 2009, ch. 2; the density of the second-highest, David and Nagaraja 2003)."""
    above = pieces.integral(lambda x, F, Sv, f: x * n * (n - 1) * F ** (n - 2) * Sv * f, reserve, TOP)
    return above + (reserve * n * ref.cdf(reserve) ** (n - 1) * ref.sf(reserve) if reserve else 0.0)


# ---------------------------------------------------------------------------
# Large and nested mixtures
# ---------------------------------------------------------------------------
def test_stacked_components_evaluate_as_each_alone():
    # A mixture evaluates the leaves of one family together; each leaf's own cdf, sf
    # and pdf, weighted and summed one by one, are the reference (exact to rounding).
    comps = [(0.1, M.Normal(3.0, 2.0)), (0.1, M.Normal(-1.0, 0.5)), (0.1, M.LogNormal(median=2.0, sigma=0.7)),
             (0.1, M.LogNormal(mean=5.0, sd=2.0)), (0.1, M.Gamma(2.5, 1.5)), (0.05, M.Gamma(0.7, 3.0)),
             (0.05, M.Weibull(1.3, 4.0)), (0.05, M.Weibull(3.0, 2.0)), (0.05, M.BetaValues(2.0, 3.0, -1.0, 6.0)),
             (0.05, M.BetaValues(0.5, 0.8)), (0.05, M.Triangular(0.0, 1.0, 5.0)), (0.05, M.Triangular(2.0, 2.0, 3.0)),
             (0.05, M.Pareto(2.5, 1.0)), (0.02, M.Pareto(4.0, 3.0)), (0.02, M.Power(2.0, 4.0, 1.0)),
             (0.02, M.Power(0.5, 3.0)), (0.01, M.Exponential(2.0, 1.0)), (0.01, M.Uniform(-2.0, 7.0)),
             (0.01, M.Truncated(M.Normal(1.0, 3.0), 0.0, 4.0)), (0.01, M.Truncated(M.Normal(2.0, 1.0), -1.0, 3.0))]
    mix = M.Mixture(comps)
    assert len(mix._parts) < len(comps)
    x = np.linspace(-3.0, 12.0, 301)
    for method, got in (("cdf", mix._exact_cdf(x)), ("sf", mix._exact_sf(x)), ("pdf", mix.pdf(x))):
        want = sum(w * getattr(m, method)(x) for w, m in comps)
        assert np.allclose(got, want, rtol=1e-14, atol=1e-300), method


def test_nested_mixture_flattens_to_its_leaves():
    # The same mixture given nested and flat (weights multiplied out by hand): the
    # flat one's leaves are the reference.
    inner = [M.Mixture([(0.3, M.Normal(0.0, 1.0)), (0.7, M.Gamma(3.0, 2.0))]),
             M.Mixture([(0.5, M.Uniform(2.0, 9.0)), (0.5, M.LogNormal(median=4.0, sigma=0.3))])]
    nested_mix = M.Mixture([(0.4, inner[0]), (0.6, inner[1])])
    flat = M.Mixture([(0.12, M.Normal(0.0, 1.0)), (0.28, M.Gamma(3.0, 2.0)), (0.3, M.Uniform(2.0, 9.0)),
                      (0.3, M.LogNormal(median=4.0, sigma=0.3))])
    x = np.linspace(-4.0, 30.0, 200)
    for method in ("cdf", "sf", "pdf"):
        assert np.allclose(getattr(nested_mix, method)(x), getattr(flat, method)(x), rtol=1e-13, atol=1e-300), method


def test_fifty_component_mixture_revenue_against_gauss_pieces():
    # E[second-highest of 6] over the scipy.stats mixture by Gauss-Legendre pieces;
    # every rule's revenue equals it (revenue equivalence, Myerson 1981).
    spec = mixture_spec(50)
    ref = ScipyMixture(spec)
    want = second_price_revenue(GaussPieces(ref, mixture_edges(ref)), ref, 6)
    rep = A.revenue_report(build_value_model(spec), "forward", 6)
    for r in rep["results"]:
        assert r["expected_revenue"] == pytest.approx(want, rel=1e-9), r["rule"]


NESTED_BIDDERS, NESTED_RESERVES, BID_POINTS = 6, (30000.0, 90000.0), range(100, 2001, 200)


@pytest.fixture(scope="module")
def nested():
    """The mixture of 50 mixtures of 50: our model and its bids on 2,001 points, and the
    scipy.stats reference with its Gauss-Legendre pieces (edges also at the reserves
    and at the values whose bids are checked)."""
    spec = nested_spec()
    model, ref = build_value_model(spec), ScipyMixture(spec)
    bids = A.bid_strategy(model, "forward", NESTED_BIDDERS, points=2001)
    pieces = GaussPieces(ref, mixture_edges(ref, *NESTED_RESERVES, *(bids["values"][i] for i in BID_POINTS)))
    return model, ref, bids, pieces


def test_nested_mixture_revenue_against_gauss_pieces(nested):
    # As above for a mixture of 50 mixtures of 50 components.
    model, ref, _, pieces = nested
    want = second_price_revenue(pieces, ref, NESTED_BIDDERS)
    rep = A.revenue_report(model, "forward", NESTED_BIDDERS)
    for r in rep["results"]:
        assert r["expected_revenue"] == pytest.approx(want, rel=1e-9), r["rule"]


def test_nested_mixture_bids_on_2001_points_against_gauss_pieces(nested):
    # b(v) = v - int_0^v F^(n-1) / F(v)^(n-1) (Krishna 2009, ch. 2; the support starts
    # at 0), at every 200th of the 2,001 grid values.
    model, ref, bids, pieces = nested
    n = NESTED_BIDDERS
    assert len(bids["bids"]) == 2001
    for i in BID_POINTS:
        v = bids["values"][i]
        want = v - pieces.integral(lambda x, F, Sv, f: F ** (n - 1), 0.0, v) / ref.cdf(v) ** (n - 1)
        assert bids["bids"][i] == pytest.approx(want, rel=1e-9), v


def test_nested_mixture_sweep_cells_against_gauss_pieces(nested):
    # Second-price revenue with a reserve and P(sale) = 1 - F(r)^n (Krishna 2009, ch. 2);
    # first-price revenue is the same by revenue equivalence.
    model, ref, _, pieces = nested
    out = S.sweep(model, "forward", [2, 7], list(NESTED_RESERVES), ["first_price", "second_price"],
                  ["expected_revenue", "probability_of_sale"])
    assert len(out["rows"]) == 8
    for n, r, rule, revenue, p_sale in out["rows"]:
        assert revenue == pytest.approx(second_price_revenue(pieces, ref, n, r), rel=1e-9), (n, r, rule)
        assert p_sale == pytest.approx(1.0 - ref.cdf(r) ** n, rel=1e-12), (n, r, rule)


def test_mixture_quantiles_against_scipy(nested):
    # Each quantile x of the nested mixture against the scipy.stats mixture: F(x) = u
    # below the median and S(x) = v above it, to 1e-13 relative, or to what rounding
    # x itself moves F by (4e-16 |x| f).
    model, ref, _, _ = nested
    u = np.concatenate((np.geomspace(1e-30, 0.5, 300), np.linspace(0.5, 0.99, 50)))
    x = model.value_at(u, 1.0 - u)
    slack = 4e-16 * np.abs(x) * ref.pdf(x)
    assert np.all(np.abs(ref.cdf(x) - u) <= 1e-13 * u + slack)
    x_up = model.value_at(1.0 - u, u)
    slack = 4e-16 * np.abs(x_up) * ref.pdf(x_up)
    assert np.all(np.abs(ref.sf(x_up) - u) <= 1e-13 * u + slack)


# ---------------------------------------------------------------------------
# Kernel density through 10,000 values
# ---------------------------------------------------------------------------
@pytest.fixture(scope="module")
def kernel_sample():
    rng = np.random.default_rng(20261202)
    # Invented: two clusters of past values, one of them with a long right tail.
    return np.concatenate((rng.lognormal(math.log(62000.0), 0.35, 8000), rng.normal(150000.0, 4000.0, 2000)))


def _brute(sample, h, x):
    """The kernel density's F, S and f as the plain sum over all N kernel terms."""
    z = (np.asarray(x, float)[:, None] - sample) / h
    n = len(sample)
    return (np.sum(sp.ndtr(z), axis=1) / n, np.sum(sp.ndtr(-z), axis=1) / n,
            np.sum(np.exp(-0.5 * z * z), axis=1) / (n * h * math.sqrt(2.0 * math.pi)))


def test_kernel_density_against_gaussian_kde_and_brute_force(kernel_sample):
    model = M.empirical(kernel_sample, "kernel")
    h = model.h
    x = np.concatenate((np.linspace(kernel_sample.min() - 12 * h, kernel_sample.max() + 12 * h, 400),
                        np.linspace(kernel_sample.min() - 40 * h, kernel_sample.max() + 40 * h, 100)))
    F, Sv, f = _brute(kernel_sample, h, x)
    kde = st.gaussian_kde(kernel_sample, bw_method=h / np.std(kernel_sample, ddof=1))
    assert kde.covariance[0, 0] == pytest.approx(h * h, rel=1e-12)
    bulk = F > 1e-3
    # scipy.stats.gaussian_kde: pdf everywhere, cdf (integrate_box_1d) where it is not tiny
    assert np.allclose(model.pdf(x), kde.pdf(x), rtol=1e-12, atol=0.0)
    kde_cdf = np.array([kde.integrate_box_1d(-np.inf, v) for v in x[bulk]])
    assert np.allclose(model.cdf(x[bulk]), kde_cdf, rtol=1e-12, atol=0.0)
    # The brute-force sums, relative in both tails: 1e-13, or what rounding x moves F by.
    slack = 4e-16 * np.abs(x) * f
    for got, want in ((model.cdf(x), F), (model.sf(x), Sv)):
        live = want > 1e-300
        assert np.all(np.abs(got[live] - want[live]) <= 1e-13 * want[live] + slack[live])
    assert np.allclose(model.pdf(x), f, rtol=1e-13, atol=0.0)


def test_kernel_quantiles_against_brute_force(kernel_sample):
    # F(x) = u (below the median) and S(x) = v (above), the brute-force sums as reference.
    model = M.empirical(kernel_sample, "kernel")
    u = np.concatenate((np.geomspace(1e-30, 0.5, 200), np.linspace(0.5, 0.999, 50)))
    for x, target, which in ((model.value_at(u, 1.0 - u), u, 0), (model.value_at(1.0 - u, u), u, 1)):
        got = _brute(kernel_sample, model.h, x)
        slack = 4e-16 * np.abs(x) * got[2]
        assert np.all(np.abs(got[which] - target) <= 1e-13 * target + slack)


def test_kernel_sample_over_many_decades_against_brute_force():
    # Invented: 2,000 values spread over some 30 decades (lognormal, sigma 10), dense near 1
    # and far apart in the tails, so that the windowed sums' blocks of points are wide in
    # the bulk and narrow in the tails. The brute-force sums over all N terms are the
    # reference for F, S and f at the sample's values and between them, and for quantiles.
    sample = np.exp(np.random.default_rng(20261203).normal(0.0, 10.0, 2000))
    model = M.empirical(sample, "kernel")
    h = model.h
    x = np.unique(np.concatenate((np.linspace(sample.min() - 12 * h, 40 * h, 300), sample[::5] + 0.7 * h,
                                  np.geomspace(h, sample.max() + 12 * h, 300))))
    F, Sv, f = _brute(sample, h, x)
    slack = 4e-16 * np.abs(x) * f
    for got, want in ((model.cdf(x), F), (model.sf(x), Sv)):
        live = want > 1e-300
        assert np.all(np.abs(got[live] - want[live]) <= 1e-13 * want[live] + slack[live])
    assert np.allclose(model.pdf(x), f, rtol=1e-13, atol=0.0)
    u = np.concatenate((np.geomspace(1e-20, 0.5, 100), np.linspace(0.5, 0.999, 30)))
    for xq, which in ((model.value_at(u, 1.0 - u), 0), (model.value_at(1.0 - u, u), 1)):
        got = _brute(sample, h, xq)
        assert np.all(np.abs(got[which] - u) <= 1e-13 * u + 4e-16 * np.abs(xq) * got[2])


def test_kernel_ten_thousand_values_revenue_against_quad(kernel_sample):
    # scipy.integrate.quad of E[second-highest of 10] over the brute-force kernel sums;
    # every rule's revenue equals it (revenue equivalence, Myerson 1981).
    model = M.empirical(kernel_sample, "kernel")
    h, n = model.h, 10

    def density(x):
        F, Sv, f = (a[0] for a in _brute(kernel_sample, h, [x]))
        return x * n * (n - 1) * F ** (n - 2) * Sv * f

    lo, hi = kernel_sample.min() - 12 * h, kernel_sample.max() + 12 * h
    want = quad_pieces(density, list(np.linspace(lo, hi, 25)))
    rep = A.revenue_report(model, "forward", n)
    for r in rep["results"]:
        assert r["expected_revenue"] == pytest.approx(want, rel=1e-10), r["rule"]


def test_log_table_matches_its_exact_functions():
    # The table against the exact functions it interpolates (here the standard normal's
    # log cdf and log sf, scipy.special.log_ndtr): its checks allow 1e-15 of
    # max(1, |log F|) at eight points a panel, which bounds the error everywhere to
    # within a small factor; asserted here with a factor of 4.
    for seeds in (np.linspace(-12.0, 12.0, 13), np.linspace(-12.0, 12.0, 4), [-12.0, 0.0, 12.0]):
        table = LogTable(sp.log_ndtr, lambda x: sp.log_ndtr(-x), seeds, 0.0)
        x = np.linspace(table.lo, table.hi, 20001)
        assert table.covers(x).all()
        assert table.lo < -10.1 and table.hi > 10.1  # out to log F = -55, near |x| = 10.17
        F, Sv = table.cdf_sf(x)
        for got, want in ((F, sp.ndtr(x)), (Sv, sp.ndtr(-x))):
            allowed = 4e-15 * np.maximum(1.0, np.abs(np.log(want))) + 4e-16 * np.abs(x) * st.norm.pdf(x) / want
            assert np.all(np.abs(got / want - 1.0) <= allowed)


def _table_points(table):
    """Both ends of every interpolated panel of a LogTable, and 23 points inside each."""
    a, b = table.a[~table.exact], table.b[~table.exact]
    return np.concatenate((a, b, (a[:, None] + (b - a)[:, None] * np.linspace(0.01, 0.99, 23)).ravel()))


@pytest.mark.parametrize("which", ["fifty components", "nested 50 x 50", "kernel, 10,000 values"])
def test_model_tables_agree_with_their_exact_sums(which, nested, kernel_sample):
    # A model's tabled cdf and sf against its exact sums (the sums themselves are checked
    # against scipy.stats and the brute-force kernel sums above), on every panel: relative
    # to 8e-15 of max(1, |log F|) (|log S|), the table's own allowance of 1e-15 at its
    # check points times a small factor, plus what rounding x moves F by. Panels that
    # are only a few ulps wide (a kink next to a probe value) are among them.
    model = {"fifty components": lambda: build_value_model(mixture_spec(50)), "nested 50 x 50": lambda: nested[0],
             "kernel, 10,000 values": lambda: M.empirical(kernel_sample, "kernel")}[which]()
    table = model._log_table()
    assert np.count_nonzero(~table.exact) > 10
    x = _table_points(table)
    slack = 4e-16 * np.abs(x) * model.pdf(x)
    for got, want in ((model.cdf(x), model._exact_cdf(x)), (model.sf(x), model._exact_sf(x))):
        allowed = 8e-15 * np.maximum(1.0, np.abs(np.log(want))) * want + slack
        assert np.all(np.abs(got - want) <= allowed)


# ---------------------------------------------------------------------------
# The optimal reserve of an irregular model
# ---------------------------------------------------------------------------
def brute_force_reserve(ref, n, v0, lo, hi, points=481):
    """Brute force: the seller's payoff P(r) = r n F(r)^(n-1) S(r) + int_r^hi x n(n-1)
    F^(n-2) S f dx + v0 F(r)^n (Krishna 2009, ch. 2) at each reserve of a grid, the
    integral by scipy.integrate.quad cell by cell and summed from the top; then
    scipy.optimize.minimize_scalar around the best grid point, each payoff there by
    one scipy.integrate.quad."""
    def density(x):
        return x * n * (n - 1) * ref.cdf(x) ** (n - 2) * ref.sf(x) * ref.pdf(x)

    def payoff(r, above=None):
        if above is None:
            above = integrate.quad(density, r, hi, limit=200, epsabs=0.0, epsrel=1e-12)[0]
        return r * n * ref.cdf(r) ** (n - 1) * ref.sf(r) + above + v0 * ref.cdf(r) ** n

    grid = np.linspace(lo, hi, points)
    cells = [integrate.quad(density, a, b, epsabs=0.0, epsrel=1e-12)[0] for a, b in zip(grid[:-1], grid[1:])]
    above = np.append(np.cumsum(cells[::-1])[::-1], 0.0)
    values = np.array([payoff(r, a) for r, a in zip(grid, above)])
    i = int(np.argmax(values))
    res = optimize.minimize_scalar(lambda r: -payoff(r), bounds=(grid[max(i - 1, 0)], grid[min(i + 1, points - 1)]),
                                   method="bounded", options={"xatol": 1e-9})
    return float(res.x), -float(res.fun), payoff


def _normals(*comps):
    return {"family": "mixture", "components": [{"weight": w, "model": {"family": "normal", "mean": m, "sd": s}}
                                                for w, m, s in comps]}


RESERVE_CASES = [
    # (mixture, bidders, seller value, the cluster whose local maximum the brute force finds
    # to be the global one: the cases cover both)
    pytest.param(_normals((0.5, 100.0, 5.0), (0.5, 140.0, 5.0)), 7, 0.0, "second", id="100-140-n7"),
    pytest.param(_normals((0.5, 100.0, 5.0), (0.5, 183.6, 5.0)), 7, 105.7, "second", id="100-183.6-n7-v105.7"),
    pytest.param(_normals((0.6, 100.0, 5.0), (0.4, 150.0, 5.0)), 2, 80.0, "second", id="two-interior-second"),
    pytest.param(_normals((0.7, 100.0, 5.0), (0.3, 150.0, 10.0)), 3, 0.0, "first", id="two-interior-first"),
    pytest.param(_normals((0.5, 100.0, 5.0), (0.5, 150.0, 10.0)), 5, 0.0, "second", id="unequal-spread"),
]


@pytest.mark.parametrize("spec,n,v0,winner", RESERVE_CASES)
def test_irregular_reserve_against_brute_force(spec, n, v0, winner):
    model, ref = build_value_model(spec), ScipyMixture(spec)
    rep = A.reserve_report(model, "forward", n, v0)
    assert rep["regular"] is False
    r_brute, p_brute, payoff = brute_force_reserve(ref, n, v0, 60.0, 230.0)
    low_mean = spec["components"][0]["model"]["mean"]
    high_mean = spec["components"][1]["model"]["mean"]
    assert (r_brute > 0.5 * (low_mean + high_mean)) == (winner == "second")  # the case is what it claims to be
    r_ours = rep["optimal_reserve"]
    # The payoff is flat at its top, so the brute force places the reserve only to
    # about the square root of its quadrature's precision; ours is at least as good.
    assert r_ours == pytest.approx(r_brute, rel=1e-5)
    assert payoff(r_ours) >= p_brute - 1e-11 * p_brute
    assert rep["expected_payoff_at_optimum"] == pytest.approx(payoff(r_ours), rel=1e-10)


@pytest.mark.parametrize("spec", [
    _normals((0.5, 100.0, 5.0), (0.5, 140.0, 5.0)),
    _normals((0.7, 100.0, 5.0), (0.3, 150.0, 10.0)),
], ids=["100-140", "two-interior-first"])  # beta shapes of 1e-310 are refused (tests/test_reliable_ranges.py)
def test_reserve_is_never_worse_than_none(spec):
    # Setting no reserve is always a choice open to the seller (Krishna 2009, ch. 2), so
    # with a seller's value of 0 the payoff at the optimum is at least the revenue without
    # one, whatever the search's grid looks like.
    rep = A.reserve_report(build_value_model(spec), "forward", 6, 0.0)
    assert rep["expected_payoff_at_optimum"] >= rep["expected_revenue_without_reserve"] * (1.0 - 1e-14)


def test_irregular_reserve_reverse_against_brute_force():
    # Procurement: costs from the mixture, the buyer's value B. The buyer's payoff with
    # maximum price p is B P(award) - E[payment], P(award) = 1 - S(p)^n and, under
    # second price, E[payment] = p n F(p) S(p)^(n-1) + int^p c n(n-1) F S^(n-2) f dc
    # (the mirror of Krishna 2009, ch. 2): the integral by scipy.integrate.quad cell by
    # cell on a grid of p, summed from the bottom, then scipy.optimize.minimize_scalar
    # around the best grid point.
    spec, n, buyer = _normals((0.5, 100.0, 5.0), (0.5, 140.0, 5.0)), 4, 150.0
    ref = ScipyMixture(spec)

    def density(c):
        return c * n * (n - 1) * ref.cdf(c) * ref.sf(c) ** (n - 2) * ref.pdf(c)

    def payoff(p, below=None):
        if below is None:
            below = integrate.quad(density, 40.0, p, limit=200, epsabs=0.0, epsrel=1e-12)[0]
        return buyer * (1.0 - ref.sf(p) ** n) - below - p * n * ref.cdf(p) * ref.sf(p) ** (n - 1)

    grid = np.linspace(40.0, 160.0, 241)
    cells = [integrate.quad(density, a, b, epsabs=0.0, epsrel=1e-12)[0] for a, b in zip(grid[:-1], grid[1:])]
    below = np.concatenate(([0.0], np.cumsum(cells)))
    i = int(np.argmax([payoff(p, c) for p, c in zip(grid, below)]))
    res = optimize.minimize_scalar(lambda p: -payoff(p), bounds=(grid[max(i - 1, 0)], grid[min(i + 1, 240)]),
                                   method="bounded", options={"xatol": 1e-9})
    rep = A.reserve_report(build_value_model(spec), "reverse", n, buyer)
    assert rep["regular"] is False
    assert rep["optimal_reserve"] == pytest.approx(res.x, rel=1e-5)
    assert payoff(rep["optimal_reserve"]) >= -res.fun - 1e-11 * abs(res.fun)
    assert rep["expected_payoff_at_optimum"] == pytest.approx(payoff(rep["optimal_reserve"]), rel=1e-10)
