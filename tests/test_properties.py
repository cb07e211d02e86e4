"""Property-based tests (Hypothesis) of the numerics core: laws that must hold
for every value model, bidder count and reserve, not just at the points the
reference tests pick.

Each property names the law it checks and where that law comes from. Sources:
"David and Nagaraja (2003)" is H. A. David and H. N. Nagaraja, Order
Statistics, 3rd ed., Wiley, 2003; "Krishna (2009)" is V. Krishna, Auction
Theory, 2nd ed., Academic Press, 2009; "Myerson (1981)" is R. Myerson, Optimal
Auction Design, Mathematics of Operations Research 6(1), 1981; "Riley and
Samuelson (1981)" is J. Riley and W. Samuelson, Optimal Auctions, American
Economic Review 71(3), 1981. Where a law is derived here from a definition, the
derivation is written beside the test.

Strategies draw a value model from every family the core has: the parametric
families' specs are generated from their declarations in service/core/models.py
(each Param's role: a location in [-100, 100], a scale log-uniform in [0.05, 200],
a shape over its declared typical range, such as lognormal sigma in [0.1, 1.5],
gamma shape in [0.5, 50], Weibull shape in [0.5, 5], Pareto shape in [2.5, 6];
the first of a family's forms; its ties honoured by construction, an upper end a
width log-uniform in [0.05, 500] above the lower end); the derived models are
drawn by hand (a 2-3 component mixture, a quantile table, a truncated normal,
and the kernel-smoothed empirical model of a drawn sample of 3-20 values); a bidder count from 1 to 10^6 (log-uniform) and a
reserve at a drawn quantile inside the support. The location-scale families are
also moved out to 10^9 times their spread (location shifts by 10^k, scale shrinks
by 10^-k), and Pareto shapes are drawn on both sides of each figure's existence
threshold.

Every test runs derandomized with no example database (the same examples on
every machine, so CI is reproducible) and no deadline. Example counts (the
whole file takes about 100 s on one CPU):

    test_rank_means_fall_with_rank                      60
    test_rank_quantiles_fall_with_rank                  40
    test_revenue_rises_with_bidders                     40
    test_revenue_equivalence                            60  (+3 pinned examples)
    test_first_price_is_less_risky                      50
    test_joint_density_mass_and_marginals               15
    test_affine_revenue                                 30
    test_affine_revenue_sd                              40
    test_affine_ranks                                   40
    test_affine_bids                                    30
    test_first_price_bids_lie_between_floor_and_value   40
    test_first_price_bids_with_reserve_from_bids_without 40
    test_mirror_revenue                                 40
    test_mirror_bids                                    30
    test_spreads_do_not_depend_on_where_the_values_sit  30  (+2 pinned examples)
    test_efficiency_is_at_most_one                      40
    test_pareto_figures_exist_by_tail_index             30
    test_known_failures                                  5 pinned examples (fixed bugs)

A property that a bug in service/ falsifies is kept as it should be and marked
xfail(strict=True) with its minimal falsifying example as an explicit @example
(so it fails at once and the same way on every run; while it does, its drawn
examples do not run). Bugs found while shrinking other properties are pinned in
test_known_failures. Remove the mark when the bug is fixed, and keep the example so
that it stays checked.

Tolerances allow for rounding and quadrature error only; each is stated beside
its check.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import mpmath as mp
import numpy as np
import pytest
from hypothesis import HealthCheck, currently_in_test_context, example, given, note, settings
from hypothesis import strategies as st
from scipy import integrate
from scipy import special as sp

import api_reports as A
from service.core import rules as core_rules
from service.core import models as M
from service.core import orderstats as O
from service.core import topvalues as T
from service.core.errors import ParameterError

RULES = core_rules.names()
WINNER_PAYS = ("first_price", "second_price", "ascending", "descending")


def props(examples):
    """Per-test settings: reproducible (derandomized, no database), no deadline."""
    return settings(max_examples=examples, deadline=None, derandomize=True, database=None,
                    suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much])


# ---------------------------------------------------------------------------
# Model specs: a drawn family and its parameters, printable in a falsifying
# example, built into a core model on demand, and (where the family allows)
# mapped by x -> a + b x or mirrored by x -> -x within the same family.
# ---------------------------------------------------------------------------
@dataclass(frozen=True)
class Spec:
    family: str
    params: tuple  # (name, value) pairs; a mixture's components are (weight, Spec) pairs

    def p(self, name):
        return dict(self.params)[name]

    def build(self):
        f, p = self.family, dict(self.params)
        if f in M.PARAMETRIC:
            return M.PARAMETRIC[f](**p)
        if f == "quantile_table":
            return M.QuantileTable(p["points"])
        if f == "truncated_normal":
            return M.Truncated(M.Normal(p["mean"], p["sd"]), p["low"], p["high"])
        if f == "mixture":
            return M.Mixture([(w, s.build()) for w, s in p["components"]])
        if f == "kernel":
            return M.empirical(list(p["sample"]))
        raise AssertionError(f)


SCALE_ONLY = {"gamma": "scale", "weibull": "scale", "lognormal": "median", "pareto": "minimum"}


def affine(spec, a, b):
    """The spec of a + b X (b > 0) in the same family, or None if the family is not
    closed under that map. Scale families (gamma, Weibull, lognormal, Pareto) are
    closed under x -> b x only (a must be 0)."""
    f, p = spec.family, dict(spec.params)
    t = lambda x: a + b * x  # noqa: E731
    if f in SCALE_ONLY:
        if a != 0.0:
            return None
        key = SCALE_ONLY[f]
        return Spec(f, tuple((k, b * v if k == key else v) for k, v in spec.params))
    if f in ("uniform", "triangular"):
        return Spec(f, tuple((k, t(v)) for k, v in spec.params))
    if f == "normal":
        return Spec(f, (("mean", t(p["mean"])), ("sd", b * p["sd"])))
    if f == "truncated_normal":
        return Spec(f, (("mean", t(p["mean"])), ("sd", b * p["sd"]), ("low", t(p["low"])), ("high", t(p["high"]))))
    if f == "exponential":
        return Spec(f, (("mean", b * p["mean"]), ("shift", t(p["shift"]))))
    if f in ("beta", "power"):
        return Spec(f, tuple((k, t(v) if k in ("low", "high") else v) for k, v in spec.params))
    if f == "quantile_table":
        return Spec(f, (("points", tuple((q, t(x)) for q, x in p["points"])),))
    if f == "kernel":
        # Silverman's bandwidth (sd and IQR) scales with b, so the kernel density of
        # a + b * sample is that of a + b X exactly (Silverman 1986, eq. 3.31).
        return Spec(f, (("sample", tuple(t(x) for x in p["sample"])),))
    if f == "mixture":
        comps = [(w, affine(s, a, b)) for w, s in p["components"]]
        if any(s is None for _, s in comps):
            return None
        return Spec(f, (("components", tuple(comps)),))
    return None


def mirror(spec):
    """The spec of -X in the same family, or None if the family does not allow it."""
    f, p = spec.family, dict(spec.params)
    if f == "normal":
        return Spec(f, (("mean", -p["mean"]), ("sd", p["sd"])))
    if f == "uniform":
        return Spec(f, (("low", -p["high"]), ("high", -p["low"])))
    if f == "triangular":
        return Spec(f, (("low", -p["high"]), ("mode", -p["mode"]), ("high", -p["low"])))
    if f == "beta":
        return Spec(f, (("alpha", p["beta"]), ("beta", p["alpha"]), ("low", -p["high"]), ("high", -p["low"])))
    if f == "truncated_normal":
        return Spec(f, (("mean", -p["mean"]), ("sd", p["sd"]), ("low", -p["high"]), ("high", -p["low"])))
    if f == "quantile_table":
        return Spec(f, (("points", tuple((1.0 - q, -x) for q, x in reversed(p["points"]))),))
    if f == "kernel":
        return Spec(f, (("sample", tuple(-x for x in p["sample"])),))
    if f == "mixture":
        comps = [(w, mirror(s)) for w, s in p["components"]]
        if any(s is None for _, s in comps):
            return None
        return Spec(f, (("components", tuple(comps)),))
    return None


# ---- strategies ------------------------------------------------------------

def log_uniform(lo, hi):
    return st.floats(math.log10(lo), math.log10(hi)).map(lambda e: 10.0**e)


LOC = st.floats(-100.0, 100.0)
WIDTH = log_uniform(0.05, 500.0)
SCALE = log_uniform(0.05, 200.0)


#: The families whose specs the declarations generate (a family registered by another test is not drawn).
PARAMETRIC = ("uniform", "normal", "lognormal", "exponential", "gamma", "weibull", "beta", "triangular", "pareto", "power")


def _draw_param(draw, p):
    """A value for a declared parameter by its role: a location, a scale, or a shape over its typical range."""
    if p.role == "location":
        return draw(LOC)
    if p.role == "scale":
        return draw(SCALE)
    lo, hi, how = p.typical
    return draw(log_uniform(lo, hi) if how == "log" else st.floats(lo, hi))


@st.composite
def parametric_specs(draw, family):
    """A spec of a registered family drawn from its declarations (models.Param roles and typical
    ranges, the first of its ``forms``, its ``ties`` honoured by construction: an ``Ordered`` upper
    end a drawn width above the lower, a ``Between`` drawn between)."""
    cls = M.PARAMETRIC[family]
    names = list(cls.forms[0]) if cls.forms else list(cls.parameters)
    values = {k: _draw_param(draw, cls.parameters[k]) for k in names if cls.parameters[k].role is not None}
    for tie in cls.ties:
        if isinstance(tie, M.Ordered):
            values[tie.high] = values[tie.low] + draw(WIDTH)
    for tie in cls.ties:
        if isinstance(tie, M.Between):
            lo, hi = values[tie.low], values[tie.high]
            values[tie.name] = min(max(lo + draw(st.floats(0.0, 1.0)) * (hi - lo), lo), hi)
    return Spec(family, tuple((k, values[k]) for k in names))


@st.composite
def quantile_table_specs(draw):
    k = draw(st.integers(1, 4))
    ps = draw(st.lists(st.floats(0.02, 0.98), min_size=k, max_size=k, unique=True))
    ps = sorted(ps)
    ps = [q for i, q in enumerate(ps) if i == 0 or q - ps[i - 1] > 0.01]
    x = draw(LOC)
    steps = draw(st.lists(log_uniform(0.05, 100.0), min_size=len(ps) + 1, max_size=len(ps) + 1))
    xs = [x]
    for s in steps:
        xs.append(xs[-1] + s)
    return Spec("quantile_table", (("points", tuple(zip([0.0, *ps, 1.0], xs))),))


@st.composite
def truncated_normal_specs(draw):
    mu, sd = draw(LOC), draw(SCALE)
    z1 = draw(st.floats(-4.0, 2.0))
    z2 = z1 + draw(st.floats(0.2, 5.0))
    return Spec("truncated_normal", (("mean", mu), ("sd", sd), ("low", mu + z1 * sd), ("high", mu + z2 * sd)))


@st.composite
def kernel_specs(draw):
    sample = draw(st.lists(st.floats(0.0, 100.0), min_size=3, max_size=20).filter(lambda s: max(s) - min(s) > 0.5))
    return Spec("kernel", (("sample", tuple(sample)),))


COMPONENT = st.one_of(parametric_specs("normal"), parametric_specs("uniform"), parametric_specs("gamma"), parametric_specs("lognormal"), parametric_specs("triangular"))


@st.composite
def mixture_specs(draw, component=COMPONENT):
    comps = draw(st.lists(component, min_size=2, max_size=3))
    w = np.array(draw(st.lists(st.floats(0.1, 1.0), min_size=len(comps), max_size=len(comps))))
    w = w / w.sum()
    return Spec("mixture", (("components", tuple((float(wi), c) for wi, c in zip(w, comps))),))


ALL_SPECS = st.one_of(
    *(parametric_specs(f) for f in PARAMETRIC), quantile_table_specs(),
    truncated_normal_specs(), mixture_specs(), kernel_specs(),
)
# Families closed under x -> a + b x (the scale families under x -> b x).
AFFINE_SPECS = st.one_of(
    *(parametric_specs(f) for f in ("uniform", "normal", "exponential", "beta", "triangular", "power")),
    quantile_table_specs(), truncated_normal_specs(), kernel_specs(),
    mixture_specs(st.one_of(parametric_specs("normal"), parametric_specs("uniform"), parametric_specs("triangular"))),
    *(parametric_specs(f) for f in ("gamma", "weibull", "lognormal", "pareto")),
)
# Families whose mirror image -X is in the same family.
MIRROR_SPECS = st.one_of(
    parametric_specs("normal"), parametric_specs("uniform"), parametric_specs("triangular"), parametric_specs("beta"), quantile_table_specs(),
    truncated_normal_specs(), kernel_specs(), mixture_specs(st.one_of(parametric_specs("normal"), parametric_specs("uniform"), parametric_specs("triangular"))),
)
BIDDERS = st.floats(0.0, 6.0).map(lambda e: int(round(10.0**e)))  # 1 .. 10^6, log-uniform
RESERVE_U = st.floats(0.01, 0.99)  # the reserve's cumulative probability


def value(model, u):
    return float(model.value_at(np.array([u]), np.array([1.0 - u]))[0])


def scale_of(model):
    """Size of the values: max(|Q(0.01)|, |Q(0.99)|, Q(0.99) - Q(0.01)); rounding
    and quadrature errors of anything computed from the values are relative to this."""
    lo, hi = value(model, 0.01), value(model, 0.99)
    return max(abs(lo), abs(hi), hi - lo)


def bidders_for(model, n):
    """A lone bidder with no reserve pays the bottom of the support, which for a model
    unbounded below does not exist (the core says so with a ParameterError); use 2 there."""
    return 2 if n == 1 and not math.isfinite(model.lower) else n


def show(**drawn):
    """Record the drawn arguments for the failure report (when run by Hypothesis)."""
    if currently_in_test_context():
        note(", ".join(f"{k}={v!r}" for k, v in drawn.items()))


def by_rule(report, key):
    return {r["rule"]: r[key] for r in report["results"]}


# ---------------------------------------------------------------------------
# Order of the ranks
# ---------------------------------------------------------------------------
@props(60)
@given(spec=ALL_SPECS, n=BIDDERS)
def test_rank_means_fall_with_rank(spec, n):
    # Follows from the definition of order statistics: X_(k) >= X_(k+1) for every
    # sample (ranks from the top), so E[X_(k)] >= E[X_(k+1)] for k = 1..4
    # (David and Nagaraja 2003, section 2.1). Tolerance: the reported abs_error of
    # both ranks plus 1e-12 of the values' scale (rounding).
    show(spec=spec, n=n)
    model = spec.build()
    n = max(n, 2)
    ranks = list(range(1, min(n, 5) + 1))
    summaries = [O.rank_summary(model, n, r) for r in ranks]
    scale = scale_of(model)
    for hi, lo in zip(summaries, summaries[1:]):
        assert hi.mean is not None and lo.mean is not None, (hi.warnings, lo.warnings)
        tol = (hi.abs_error or 0.0) + (lo.abs_error or 0.0) + 1e-12 * max(scale, abs(hi.mean))
        assert hi.mean >= lo.mean - tol, (n, hi.rank, hi.mean, lo.mean, tol)


@props(40)
@given(spec=ALL_SPECS, n=BIDDERS, ps=st.lists(st.floats(0.001, 0.999), min_size=1, max_size=4))
def test_rank_quantiles_fall_with_rank(spec, n, ps):
    # Follows from the definition of order statistics: X_(k) >= X_(k+1) pointwise,
    # so rank k stochastically dominates rank k+1 and every p-quantile falls as k
    # grows (David and Nagaraja 2003, section 2.1: rank k is Q(U), U ~ Beta(n-k+1, k),
    # whose quantiles fall in k). Checked on top_values' quantiles for ranks 1..5.
    # Tolerance 1e-12 of the values' scale (rounding in Q).
    show(spec=spec, n=n, ps=ps)
    model = spec.build()
    n = max(n, 2)
    ranks = list(range(1, min(n, 5) + 1))
    report = T.top_values(model, n, ranks=ranks, quantiles=ps)
    scale = scale_of(model)
    qs = [[q["value"] for q in item["quantiles"]] for item in report["results"]]
    for k in range(len(ranks) - 1):
        for p, a, b in zip(ps, qs[k], qs[k + 1]):
            assert a is not None and b is not None
            assert a >= b - 1e-12 * max(scale, abs(a)), (n, ranks[k], p, a, b)


# ---------------------------------------------------------------------------
# Revenue and the number of bidders
# ---------------------------------------------------------------------------
@props(40)
@given(spec=ALL_SPECS, n=BIDDERS)
def test_revenue_rises_with_bidders(spec, n):
    # With no reserve the second-price price is the second-highest value, and adding
    # bidders to a sample can only raise its second-highest value (definition of order
    # statistics: X_(2:n+1) >= X_(2:n) on a common sample), so E[revenue] rises from
    # n to n+1 and to 2n; by revenue equivalence (Myerson 1981; Riley and Samuelson
    # 1981) so does every other rule's. With one bidder the price is the bottom of
    # the support (Krishna 2009, ch. 2), below any second-highest value.
    # Tolerance: 1e-10 of the values' scale (quadrature error).
    show(spec=spec, n=n)
    model = spec.build()
    n = bidders_for(model, min(n, 500_000))
    base = by_rule(A.revenue_report(model, "forward", n), "expected_revenue")
    scale = scale_of(model)
    for m in (n + 1, 2 * n):
        more = by_rule(A.revenue_report(model, "forward", m), "expected_revenue")
        for rule in RULES:
            tol = 1e-10 * max(scale, abs(base[rule]), abs(more[rule]))
            assert more[rule] >= base[rule] - tol, (rule, n, m, base[rule], more[rule])


# ---------------------------------------------------------------------------
# Revenue equivalence and risk
# ---------------------------------------------------------------------------
RESERVES = st.one_of(st.none(), RESERVE_U)

# ---- minimal falsifying examples of bugs fixed in service/, kept as pinned examples ----
U01 = Spec("uniform", (("low", 0.0), ("high", 1.0)))
N01 = Spec("normal", (("mean", 0.0), ("sd", 1.0)))
KERNEL_CLUSTER = Spec("kernel", (("sample", (0.0, 0.0, 0.0, 1.0, 6.0)),))
KERNEL_DRAWN = Spec("kernel", (("sample", (0.0, 0.0, 0.0, 7.0, 0.5)),))
MIX_APART = Spec("mixture", (("components", ((0.5, N01), (0.5, Spec("normal", (("mean", 17.0), ("sd", 1.0)))))),))


@props(60)
@example(spec=KERNEL_CLUSTER, n=2, u=None)  # second_price and first_price 1e-7 off (an earlier quadrature)
@example(spec=KERNEL_DRAWN, n=1, u=None)  # ascending 1.8e-7 high before its value-space panels were refined
@example(spec=MIX_APART, n=2, u=None)  # ascending 6.8e-8 low, likewise
@given(spec=ALL_SPECS, n=BIDDERS, u=RESERVES)
def test_revenue_equivalence(spec, n, u):
    # Revenue equivalence (Myerson 1981; Riley and Samuelson 1981; Krishna 2009,
    # ch. 3): with independent private values, symmetric risk-neutral bidders and the
    # same reserve, all five standard rules give the same expected revenue. The core
    # computes each rule by its own route, so their spread measures its error.
    # Tolerance 1e-8 of the largest revenue, with a floor of 1e-8 of the values'
    # scale for revenues near zero.
    show(spec=spec, n=n, u=u)
    model = spec.build()
    reserve = None if u is None else value(model, u)
    n = bidders_for(model, n) if reserve is None else n
    report = A.revenue_report(model, "forward", n, reserve=reserve)
    means = list(by_rule(report, "expected_revenue").values())
    assert None not in means
    spread = report["revenue_equivalence"]
    assert spread is not None
    assert spread == pytest.approx(max(means) - min(means), abs=1e-300)
    assert spread <= 1e-8 * max(max(abs(x) for x in means), scale_of(model)), (n, reserve, means)


@props(50)
@given(spec=ALL_SPECS, n=BIDDERS, u=RESERVES)
def test_first_price_is_less_risky(spec, n, u):
    # The first-price bid is b(v) = E[max(Y, r) | Y < v], Y the highest rival value
    # (Krishna 2009, ch. 2), so on a sale the second-price price max(Y, r) is the
    # first-price price b(X1) plus noise with conditional mean zero given the winner's
    # value X1, and both are 0 without a sale. By the law of total variance the
    # second-price revenue has the larger variance (Krishna 2009, ch. 2: second-price
    # prices are a mean-preserving spread of first-price prices). Tolerance: 1e-9 of
    # the second-price sd plus 1e-9 of the values' scale.
    show(spec=spec, n=n, u=u)
    model = spec.build()
    reserve = None if u is None else value(model, u)
    n = bidders_for(model, n) if reserve is None else n
    sds = by_rule(A.revenue_report(model, "forward", n, reserve=reserve, rules=("first_price", "second_price")),
                  "revenue_sd")
    assert sds["first_price"] is not None and sds["second_price"] is not None
    tol = 1e-9 * (sds["second_price"] + scale_of(model))
    assert sds["first_price"] <= sds["second_price"] + tol, (n, reserve, sds)


# ---------------------------------------------------------------------------
# The joint density of two ranks
# ---------------------------------------------------------------------------
_GL_X, _GL_W = np.polynomial.legendre.leggauss(32)
# Cumulative probabilities that split an integral into pieces where the integrand is smooth.
_SPLITS = np.array([1e-12, 1e-10, 1e-8, 1e-6, 1e-4, 1e-3, 0.01, 0.05, 0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8,
                    0.9, 0.95, 0.99, 0.999, 1 - 1e-4, 1 - 1e-6, 1 - 1e-8, 1 - 1e-10, 1 - 1e-12])


def _beta_breaks(a, b):
    """Quantiles of Beta(a, b) at _SPLITS, each as (u, 1 - u) kept precise at both ends."""
    u = sp.betaincinv(a, b, _SPLITS)
    v = sp.betaincinv(b, a, 1.0 - _SPLITS)  # 1 - u, from the mirrored Beta
    return u, v


def _edges(model, values):
    """Sorted distinct break values with the model's kinks inside their range added."""
    xs = np.asarray(values, float)
    xs = xs[np.isfinite(xs)]
    ks = [k for k in model.kink_values() if xs.min() < k < xs.max()]
    return np.unique(np.concatenate((xs, ks)))


def _gl(edges):
    """Gauss-Legendre nodes and weights, 32 per piece between consecutive edges."""
    a, b = edges[:-1], edges[1:]
    half, mid = 0.5 * (b - a), 0.5 * (b + a)
    return (mid[:, None] + half[:, None] * _GL_X).ravel(), (half[:, None] * _GL_W).ravel()


def _rank_edges(model, n, r):
    """Values at the _SPLITS quantiles of rank r of n (Q at Beta(n-r+1, r) quantiles)."""
    return _edges(model, O.rank_quantiles(model, n, r, _SPLITS))


@pytest.mark.filterwarnings("ignore::scipy.integrate.IntegrationWarning")  # the assertions bound the error
@props(15)
@given(spec=ALL_SPECS, n=st.floats(math.log10(2), 6.0).map(lambda e: int(round(10.0**e))),
       i_gap=st.tuples(st.integers(1, 3), st.integers(1, 3)), where=st.lists(st.floats(0.05, 0.95), min_size=2, max_size=2))
def test_joint_density_mass_and_marginals(spec, n, i_gap, where):
    # The joint density of ranks i < j of n (David and Nagaraja 2003, eq. 2.2.1, in
    # ranks from the top) integrates to 1 over {y <= x}, and integrating out one rank
    # leaves the other rank's own density (definition of a marginal density; David and
    # Nagaraja 2003, section 2.1 for the single-rank density).
    # Mass: tensor Gauss-Legendre, 32 nodes per piece, pieces split at the rank
    # quantiles 1e-12 .. 1 - 1e-12 and at the model's kinks (the cut tails hold about
    # 4e-12); tolerance 1e-6. Marginals: scipy.integrate.quad on the same pieces of the
    # conditional law at two points each way; tolerance 1e-6 relative.
    show(spec=spec, n=n, i_gap=i_gap, where=where)
    model = spec.build()
    i = min(i_gap[0], n - 1)  # the higher rank, and the lower one i_gap[1] below it
    j = min(i + i_gap[1], n)

    # Mass, with x (rank i) outside and y (rank j) inside. Given X_i = x, the lower
    # rank has F(Y)/F(x) ~ Beta(n-j+1, j-i) (ranks of uniforms below x); the inner
    # pieces are cut at that law's quantiles, so they follow the mass whatever x is.
    xs, wx = _gl(_rank_edges(model, n, i))
    bu, bv = _beta_breaks(n - j + 1.0, float(j - i))
    fx, sx = model.cdf(xs), model.sf(xs)
    # F(y) = F(x) bu, and S(y) = S(x) + F(x) (1 - bu) kept precise near the top.
    ybreak = model.value_at(fx[:, None] * bu[None, :], sx[:, None] + fx[:, None] * bv[None, :])
    # Per x node, the inner edges: the breaks and the kinks, clipped into [lowest break, x]
    # (a clipped duplicate is a piece of length 0); 32 Gauss-Legendre nodes per piece.
    kinks = np.asarray(model.kink_values(), float).reshape(1, -1)
    low = np.clip(ybreak, model.lower, xs[:, None])
    low = np.where(np.isfinite(low), low, xs[:, None])
    edges = np.sort(np.concatenate((low, xs[:, None], np.clip(kinks, low.min(axis=1, keepdims=True), xs[:, None])),
                                   axis=1), axis=1)
    a, b = edges[:, :-1, None], edges[:, 1:, None]
    yy, wy = 0.5 * (a + b) + 0.5 * (b - a) * _GL_X, 0.5 * (b - a) * _GL_W
    mass = 0.0
    for rows in np.array_split(np.arange(len(xs)), max(1, len(xs) // 64)):
        dens = np.exp(O.joint_logdensity(model, n, i, j, xs[rows, None, None], yy[rows]))
        mass += float(np.sum(wx[rows, None, None] * wy[rows] * dens))
    assert mass == pytest.approx(1.0, abs=1e-6), (n, i, j, mass)

    def quad_sum(fn, edges):
        total = 0.0
        for a, b in zip(edges[:-1], edges[1:]):
            total += integrate.quad(fn, a, b, epsabs=0.0, epsrel=1e-11, limit=200)[0]
        return total

    # Marginal of the higher rank: integrate y out below x.
    for p in where:
        x = float(O.rank_quantiles(model, n, i, [p])[0])
        f_, s_ = float(model.cdf(x)), float(model.sf(x))
        ys = model.value_at(f_ * bu, s_ + f_ * bv)
        ye = _edges(model, np.append(np.clip(ys, model.lower, x), x))
        got = quad_sum(lambda y: float(np.exp(O.joint_logdensity(model, n, i, j, x, y))), ye)
        want = float(np.exp(O.rank_logpdf(model, n, i, np.array([x]))[0]))
        assert got == pytest.approx(want, rel=1e-6), ("higher", n, i, j, x, got, want)

    # Marginal of the lower rank: integrate x out above y. Given X_j = y, the higher
    # rank has S(X)/S(y) ~ Beta(i, j-i) (the i-th highest of the j-1 values above y).
    _, cv = _beta_breaks(float(j - i), float(i))  # 1 - Beta(j-i, i) quantiles: Beta(i, j-i) ones
    for p in where:
        y = float(O.rank_quantiles(model, n, j, [p])[0])
        f_, s_ = float(model.cdf(y)), float(model.sf(y))
        xs_ = model.value_at(f_ + s_ * (1.0 - cv), s_ * cv)
        xe = _edges(model, np.append(y, np.clip(xs_, y, model.upper)))
        got = quad_sum(lambda x: float(np.exp(O.joint_logdensity(model, n, i, j, x, y))), xe)
        want = float(np.exp(O.rank_logpdf(model, n, j, np.array([y]))[0]))
        assert got == pytest.approx(want, rel=1e-6), ("lower", n, i, j, y, got, want)


# ---------------------------------------------------------------------------
# Shifting and scaling
#
# Y = a + b X with b > 0, the reserve moved alike (r -> a + b r). Every rule's
# price is equivariant under the map: the second-price price max(X2, r) becomes
# a + b max(X2, r), and the first-price bid b(v) = E[max(Y, r) | Y < v]
# (Krishna 2009, ch. 2) becomes a + b b(v). The all-pay bids F(v)^(n-1) b(v) sum to
# a sum_i F(X_i)^(n-1) 1{X_i >= r} + b (the all-pay revenue of X), whose mean is
# a P(sale) + b E[rev_X], since n F^(n-1) f is the density of X_(1). The sale event
# is the same and no sale brings 0 (not a). So, derived here, for every rule:
#   E[rev(Y, a + b r)] = a P(sale) + b E[rev(X, r)],
# and for the winner-pays rules, where rev_Y = a 1{sale} + b rev_X exactly,
#   Var(rev_Y) = a^2 p (1 - p) + 2 a b (1 - p) E[rev_X] + b^2 Var(rev_X)
# (Cov(1{sale}, rev_X) = (1 - p) E[rev_X], as rev_X = 0 without a sale); with no
# reserve p = 1 and the sd is b sd(rev_X). Ranks: the rank-k value of Y is a + b
# times that of X (definition of order statistics), so rank means move to
# a + b mean, sds to b sd and quantiles to a + b quantile.
# Tolerance throughout: 1e-9 of (|a| + b * the values' scale + |the figure|).
# ---------------------------------------------------------------------------
AFFINE = dict(spec=AFFINE_SPECS, a=st.floats(-50.0, 50.0), b=log_uniform(0.1, 10.0), n=BIDDERS, u=RESERVES)


def affine_case(spec, a, b, n, u):
    """(X, Y, a, rX, rY, n, tol) for Y = a + b X, the reserve at X's u-quantile moved alike."""
    if spec.family in SCALE_ONLY:
        a = 0.0
    tspec = affine(spec, a, b)
    assert tspec is not None
    X, Y = spec.build(), tspec.build()
    rX = None if u is None else value(X, u)
    rY = None if rX is None else a + b * rX
    n = bidders_for(X, n) if u is None else n
    scale = scale_of(X)
    return X, Y, a, rX, rY, n, lambda *xs: 1e-9 * (abs(a) + b * scale + max(abs(x) for x in xs))


@props(30)
@given(**AFFINE)
def test_affine_revenue(spec, a, b, n, u):
    # E[rev(a + b X, a + b r)] = a P(sale) + b E[rev(X, r)], every rule (derived above).
    show(spec=spec, a=a, b=b, n=n, u=u)
    X, Y, a, rX, rY, n, tol = affine_case(spec, a, b, n, u)
    fX = A.revenue_report(X, "forward", n, reserve=rX)
    fY = A.revenue_report(Y, "forward", n, reserve=rY)
    for gx, gy in zip(fX["results"], fY["results"]):
        p = gx["probability_of_sale"]
        assert gy["probability_of_sale"] == pytest.approx(p, rel=1e-9, abs=1e-12), gx["rule"]
        want = a * p + b * gx["expected_revenue"]
        assert gy["expected_revenue"] == pytest.approx(want, abs=tol(want)), (gx["rule"], n, rX)


@props(40)
@given(**AFFINE)
def test_affine_revenue_sd(spec, a, b, n, u):
    # Var(rev_Y) = a^2 p (1 - p) + 2 a b (1 - p) E[rev_X] + b^2 Var(rev_X) for the
    # winner-pays rules (derived above). Compared as variances: an sd near zero is the
    # root of a small difference.
    show(spec=spec, a=a, b=b, n=n, u=u)
    X, Y, a, rX, rY, n, tol = affine_case(spec, a, b, n, u)
    fX = A.revenue_report(X, "forward", n, reserve=rX, rules=WINNER_PAYS)
    fY = A.revenue_report(Y, "forward", n, reserve=rY, rules=WINNER_PAYS)
    for gx, gy in zip(fX["results"], fY["results"]):
        p, m, s = gx["probability_of_sale"], gx["expected_revenue"], gx["revenue_sd"]
        want = math.sqrt(max(a * a * p * (1 - p) + 2 * a * b * (1 - p) * m + b * b * s * s, 0.0))
        t = tol(want)
        assert gy["revenue_sd"] ** 2 == pytest.approx(want**2, abs=t * (2 * want + t)), (
            gx["rule"], n, rX, gy["revenue_sd"], want)


@props(40)
@given(**AFFINE)
def test_affine_ranks(spec, a, b, n, u):
    # Rank k of a + b X is a + b (rank k of X): means a + b mean, sds b sd, quantiles
    # a + b quantile (definition of order statistics; derived above).
    show(spec=spec, a=a, b=b, n=n, u=u)
    X, Y, a, _, _, n, tol = affine_case(spec, a, b, max(n, 2), None)
    ranks = list(range(1, min(n, 3) + 1))
    tX = T.top_values(X, n, ranks=ranks)
    tY = T.top_values(Y, n, ranks=ranks)
    for ix, iy in zip(tX["results"], tY["results"]):
        want = a + b * ix["mean"]
        assert iy["mean"] == pytest.approx(want, abs=tol(want)), ("mean", ix["rank"])
        assert iy["sd"] == pytest.approx(b * ix["sd"], abs=tol(b * ix["sd"])), ("sd", ix["rank"])
        for qx, qy in zip(ix["quantiles"], iy["quantiles"]):
            want = a + b * qx["value"]
            assert qy["value"] == pytest.approx(want, abs=tol(want)), ("quantile", ix["rank"], qx["p"])


def bid_values(model, u):
    """Three values strictly inside the support and above the reserve at quantile u."""
    u0 = 0.0 if u is None else u
    return [value(model, u0 + (1 - u0) * w) for w in (0.1, 0.5, 0.9)]


@props(30)
@example(spec=U01, a=1.0, b=1.0, n=27, u=0.0625)
@given(**AFFINE)
def test_affine_bids(spec, a, b, n, u):
    # The first-price bid of a + b X at a + b v is a + b b(v) (derived above).
    show(spec=spec, a=a, b=b, n=n, u=u)
    X, Y, a, rX, rY, n, tol = affine_case(spec, a, b, n, u)
    vs = bid_values(X, u)
    bX = A.bid_strategy(X, "forward", n, reserve=rX, rule="first_price", at=vs)["bids"]
    bY = A.bid_strategy(Y, "forward", n, reserve=rY, rule="first_price", at=[a + b * v for v in vs])["bids"]
    for v, x, y in zip(vs, bX, bY):
        assert x is not None and y is not None, (v, x, y)
        assert y == pytest.approx(a + b * x, abs=tol(a + b * x)), ("bid", v, x, y)


@props(40)
@example(spec=U01, n=28, u=0.03125)  # wrong (below the reserve) before b6483a9
@given(spec=ALL_SPECS, n=BIDDERS, u=RESERVES)
def test_first_price_bids_lie_between_floor_and_value(spec, n, u):
    # The first-price bid b(v) = E[max(Y, r) | Y < v] (Krishna 2009, ch. 2) is a mean of
    # numbers in [floor, v], so floor <= b(v) <= v, and it rises with v (Krishna 2009,
    # ch. 2: the equilibrium bid is increasing). The floor is the reserve, or the bottom
    # of the support without one; for a support unbounded below only b(v) <= v and the
    # order are checked. Tolerance 1e-9 of the values' scale.
    show(spec=spec, n=n, u=u)
    model = spec.build()
    reserve = None if u is None else value(model, u)
    n = bidders_for(model, n) if reserve is None else n
    floor = model.lower if reserve is None else max(reserve, model.lower)
    vs = bid_values(model, u)
    bids = A.bid_strategy(model, "forward", n, reserve=reserve, rule="first_price", at=vs)["bids"]
    t = 1e-9 * scale_of(model)
    for v, bid in zip(vs, bids):
        assert bid is not None, (v, bid)
        assert bid <= v + t, (v, bid)
        if math.isfinite(floor):
            assert bid >= floor - t, (v, bid, floor)
    assert all(hi >= lo - t for lo, hi in zip(bids, bids[1:])), (vs, bids)


@props(40)
@example(spec=U01, n=1000, u=0.5)
@given(spec=ALL_SPECS, n=BIDDERS, u=RESERVE_U)
def test_first_price_bids_with_reserve_from_bids_without(spec, n, u):
    # With G = F^(n-1) the law of the highest rival value Y, the bid with reserve r is
    # b_r(v) = E[max(Y, r) | Y < v] = (r G(r) + int_r^v y dG) / G(v) (Krishna 2009,
    # ch. 2), and without one b_0(v) = int y dG / G(v) over y < v. Subtracting, derived
    # here: b_r(v) = b_0(v) + (F(r)/F(v))^(n-1) (r - b_0(r)) for v >= r. The two sides
    # come from different routes of the core (with and without a binding reserve).
    # Tolerance 1e-9 of the values' scale.
    show(spec=spec, n=n, u=u)
    model = spec.build()
    n = max(n, 2)
    r = value(model, u)
    vs = bid_values(model, u)
    with_r = A.bid_strategy(model, "forward", n, reserve=r, rule="first_price", at=vs)["bids"]
    without = A.bid_strategy(model, "forward", n, reserve=None, rule="first_price", at=[r, *vs])["bids"]
    b0_r, b0_v = without[0], without[1:]
    t = 1e-9 * scale_of(model)
    for v, got, b0 in zip(vs, with_r, b0_v):
        assert got is not None and b0 is not None and b0_r is not None, (v, got, b0, b0_r)
        ratio = math.exp((n - 1) * (float(model.logcdf(np.array(r))) - float(model.logcdf(np.array(v)))))
        want = b0 + ratio * (r - b0_r)
        assert got == pytest.approx(want, abs=t), (v, got, want)


# ---------------------------------------------------------------------------
# Forward and reverse: the mirror
#
# A reverse auction with costs C, the lowest cost winning and maximum price R is
# the forward auction of values X = -C with reserve -R: every price is the negative
# of the forward one and the award happens exactly when the sale does (definition
# of the reverse auction; the mirror of Krishna 2009, ch. 2). C is built natively as
# the mirrored family (not through the core's own reflection), so for every rule
# E[payment(C, R)] = -E[revenue(X, -R)], the sds and the chance of award equal the
# forward ones, and the ask at cost c is minus the forward bid at value -c.
# Tolerance: 1e-9 of the values' scale plus 1e-9 of the figure.
# ---------------------------------------------------------------------------
MIRROR = dict(spec=MIRROR_SPECS, n=BIDDERS, u=RESERVES)


def mirror_case(spec, n, u):
    mspec = mirror(spec)
    assert mspec is not None
    X, C = spec.build(), mspec.build()
    rX = None if u is None else value(X, u)
    R = None if rX is None else -rX
    n = bidders_for(X, n) if u is None else n
    scale = scale_of(X)
    return X, C, rX, R, n, lambda x: 1e-9 * (scale + abs(x))


@props(40)
@given(**MIRROR)
def test_mirror_revenue(spec, n, u):
    show(spec=spec, n=n, u=u)
    X, C, rX, R, n, tol = mirror_case(spec, n, u)
    fwd = A.revenue_report(X, "forward", n, reserve=rX)
    rev = A.revenue_report(C, "reverse", n, reserve=R)
    for f, r in zip(fwd["results"], rev["results"]):
        assert r["rule"] == f["rule"]
        assert r["expected_payment"] == pytest.approx(-f["expected_revenue"], abs=tol(f["expected_revenue"])), f["rule"]
        assert r["payment_sd"] == pytest.approx(f["revenue_sd"], abs=tol(f["revenue_sd"])), f["rule"]
        assert r["probability_of_award"] == pytest.approx(f["probability_of_sale"], rel=1e-9, abs=1e-12), f["rule"]


@props(30)
@example(spec=N01, n=10000, u=0.5, rule="first_price")  # OverflowError before b6483a9
@given(**MIRROR, rule=st.sampled_from(RULES))
def test_mirror_bids(spec, n, u, rule):
    # Asks at costs inside the support, on both sides of the maximum price.
    show(spec=spec, n=n, u=u, rule=rule)
    X, C, rX, R, n, tol = mirror_case(spec, n, u)
    costs = [value(C, w) for w in (0.05, 0.3, 0.6, 0.95)]
    asks = A.bid_strategy(C, "reverse", n, reserve=R, rule=rule, at=costs)["bids"]
    bids = A.bid_strategy(X, "forward", n, reserve=rX, rule=rule, at=[-c for c in costs])["bids"]
    for c, ask, bid in zip(costs, asks, bids):
        assert (ask is None) == (bid is None), (rule, c, ask, bid)
        if ask is not None:
            assert ask == pytest.approx(-bid, abs=tol(bid)), (rule, c, ask, bid)


# ---------------------------------------------------------------------------
# Where the values sit: location shifts by 10^k and scale shrinks by 10^-k
#
# Y = L + s X for a family with a location and a scale, built from Y's own rounded
# parameters; X' is the model Y holds once L is subtracted (an exact subtraction
# beside L) and s divided out, so Y = L + s X' to the last bits of its spread. By the
# definition of order statistics every rank of Y is L + s times that of X', so its sd
# is s times X''s and so is the expected gap; with the reserve and the seller's value
# moved alike, a winner-pays rule's price and every first-price bid move with the values
# (Krishna 2009, ch. 2), so the winner's and the bidders' surplus are s times X''s, the
# efficiency is X''s and, with no reserve, the revenue sd is s times X''s (derived here).
# The all-pay revenue is L sum F(X_i)^(n-1) + s times X''s, whose mean (not its spread)
# moves with L alike, so only its bidders' surplus is checked. Spreads
# must keep their digits however far the model sits: tolerance 1e-10 relative (the
# service's target for parametric families), with a floor of 1e-13 of s times X''s
# scale for a surplus near 0; 1e-10 absolute for the efficiency. L / s runs to 10^9
# times X''s scale, where Y's parameters still hold seven digits of its spread.
# ---------------------------------------------------------------------------
LOCATION_KEYS = {"uniform": ("low", "high"), "normal": ("mean",), "exponential": ("shift",), "beta": ("low", "high"),
                 "triangular": ("low", "mode", "high"), "power": ("low", "high"), "truncated_normal": ("mean", "low", "high")}
SCALE_KEYS = {"normal": ("sd",), "exponential": ("mean",), "truncated_normal": ("sd",)}
LOCATION_SCALE_SPECS = st.one_of(parametric_specs("uniform"), parametric_specs("normal"), parametric_specs("exponential"), parametric_specs("beta"), parametric_specs("triangular"),
                                 parametric_specs("power"), truncated_normal_specs())


def moved(spec, loc, s):
    """(Y, X'): Y = loc + s X from rounded parameters, and X' = (Y - loc) / s as Y holds it."""
    f = spec.family

    def to_y(k, v):
        return loc + s * v if k in LOCATION_KEYS[f] else (s * v if k in SCALE_KEYS.get(f, ()) else v)

    def back(k, v):
        return (v - loc) / s if k in LOCATION_KEYS[f] else (v / s if k in SCALE_KEYS.get(f, ()) else v)

    y = tuple((k, to_y(k, v)) for k, v in spec.params)
    return Spec(f, y), Spec(f, tuple((k, back(k, v)) for k, v in y))


@st.composite
def far_away(draw):
    """(spec, L, s): L = +-10^k (1 + X's scale), s = 10^-j, k + j <= 9."""
    spec = draw(LOCATION_SCALE_SPECS)
    j = draw(st.integers(0, 6))
    k = draw(st.integers(0, 9 - j))
    return spec, draw(st.sampled_from([-1.0, 1.0])) * 10.0**k * (1.0 + scale_of(spec.build())), 10.0**-j


@props(30)
@example(drawn=(Spec("uniform", (("low", 0.0), ("high", 1e-3))), 1e6, 1.0), n=1000, u=0.5, w=0.1)
@example(drawn=(N01, 150000.0, 1e-3), n=1000, u=0.9, w=0.2)
@given(drawn=far_away(), n=BIDDERS, u=RESERVE_U, w=st.floats(0.0, 1.0))
def test_spreads_do_not_depend_on_where_the_values_sit(drawn, n, u, w):
    spec, loc, s = drawn
    show(spec=spec, loc=loc, s=s, n=n, u=u, w=w)
    n = max(n, 2)
    y_spec, x_spec = moved(spec, loc, s)
    Y, X = y_spec.build(), x_spec.build()
    scale = scale_of(X)
    tY, tX = T.top_values(Y, n), T.top_values(X, n)
    for ry, rx in zip(tY["results"], tX["results"]):
        assert ry["sd"] == pytest.approx(s * rx["sd"], rel=1e-10), ("sd", ry["rank"], ry["sd"], s * rx["sd"])
    assert tY["expected_gap"] == pytest.approx(s * tX["expected_gap"], rel=1e-10), ("gap", tY["expected_gap"])
    sdY = by_rule(A.revenue_report(Y, "forward", n), "revenue_sd")
    sdX = by_rule(A.revenue_report(X, "forward", n), "revenue_sd")
    for rule in WINNER_PAYS:
        assert sdY[rule] == pytest.approx(s * sdX[rule], rel=1e-10), ("revenue sd", rule, sdY[rule], s * sdX[rule])
    rY, v0Y = value(Y, u), value(Y, u * w)  # the seller's value at or below the reserve
    rX, v0X = (rY - loc) / s, (v0Y - loc) / s
    fY = {r["rule"]: r for r in A.revenue_report(Y, "forward", n, reserve=rY, own_value=v0Y)["results"]}
    fX = {r["rule"]: r for r in A.revenue_report(X, "forward", n, reserve=rX, own_value=v0X)["results"]}
    for rule in RULES:
        for key in ("expected_winner_surplus", "expected_bidder_surplus") if rule in WINNER_PAYS else ("expected_bidder_surplus",):
            want = s * fX[rule][key]
            assert fY[rule][key] == pytest.approx(want, rel=1e-10, abs=1e-13 * s * scale), (rule, key, fY[rule][key], want)
        assert fY[rule]["efficiency"] == pytest.approx(fX[rule]["efficiency"], abs=1e-10), (rule, "efficiency")


# ---------------------------------------------------------------------------
# Efficiency and surplus are what they are by definition
#
# The efficiency is the realised gains from trade over the largest possible: the sale
# to the highest value at or above the reserve gains X_(1) - v0, and the best
# allocation gains (X_(1) - v0)^+. A reserve above v0 can only give up gains, so the
# efficiency lies in [0, 1]; below v0 it can also add losses (sales below v0), so it
# can fall below 0 but never exceed 1 (derived here from the definitions). Under a
# winner-pays rule the winner's surplus is an expectation of X_(1) - price >= 0 (Krishna
# 2009, ch. 2: equilibrium bids never exceed the value), and the bidders' surplus under
# every rule is, by revenue equivalence, that same figure (Myerson 1981), so both are
# at least 0. (An all-pay winner with a negative value can pay less than nothing
# beside it, so its own surplus can be negative.) Checked exactly
# (no tolerance) for the efficiency's upper bound; the others to 1e-12 of the scale.
# ---------------------------------------------------------------------------
@props(40)
@given(spec=ALL_SPECS, n=BIDDERS, u=RESERVES, w=st.floats(0.001, 0.999))
def test_efficiency_is_at_most_one(spec, n, u, w):
    show(spec=spec, n=n, u=u, w=w)
    model = spec.build()
    reserve = None if u is None else value(model, u)
    n = bidders_for(model, n) if reserve is None else n
    v0 = value(model, w)
    report = A.revenue_report(model, "forward", n, reserve=reserve, own_value=v0)
    t = 1e-12 * scale_of(model)
    for res in report["results"]:
        eff = res["efficiency"]
        if eff is None:
            assert any("efficiency is null" in x for x in report["warnings"]), report["warnings"]
            continue
        assert eff <= 1.0, (res["rule"], eff)
        if reserve is not None and reserve >= v0:
            assert eff >= 0.0, (res["rule"], eff)
        assert res["expected_bidder_surplus"] >= -t, res["rule"]
        if res["rule"] in WINNER_PAYS:
            assert res["expected_winner_surplus"] >= -t, res["rule"]


# ---------------------------------------------------------------------------
# Tail exponents on both sides of each moment's threshold
#
# Pareto values, P(X > x) = (xm/x)^a, n bidders, no reserve, seller value 0. Rank k from
# the top has tail index k a, so E[X_(k)^p] exists iff k a > p, and equals
# xm^p G(n+1) G(k - p/a) / (G(k) G(n+1-p/a)) (David and Nagaraja 2003, section 2.1; mpmath
# at 30 digits). So: the expected revenue, E[X_(2)] under every rule (revenue
# equivalence: Myerson 1981), exists iff a > 1/2, else the request is refused; the
# second-price sd iff a > 1; the first-price, descending and all-pay sds iff
# a/(1 - a) > 2, a > 2/3 (derived in test_auctions_reference.py, section 10), and the
# first-price ones never exceed the second-price sd where that exists (Krishna 2009,
# ch. 2: second-price prices are a mean-preserving spread of first-price ones); the
# surpluses and the efficiency iff E[X_(1)] exists, a > 1, and then the bidders' surplus
# is E[X_(1)] - E[X_(2)] and the efficiency 1. Drawn a = threshold (1 +- d), d in
# [0.1, 0.6]. Tolerance rel 1e-10; a null figure comes with a warning.
# ---------------------------------------------------------------------------
def pareto_raw(a, xm, n, k, p):
    with mp.workdps(30):
        c = mp.mpf(p) / mp.mpf(a)
        if k <= c:
            return None
        return float(mp.mpf(xm) ** p * mp.exp(mp.loggamma(n + 1) - mp.loggamma(n + 1 - c) + mp.loggamma(k - c) - mp.loggamma(k)))


@props(30)
@given(threshold=st.sampled_from([0.5, 2.0 / 3.0, 1.0, 2.0]), side=st.sampled_from([-1.0, 1.0]), d=st.floats(0.1, 0.6),
       n=st.integers(2, 100_000).map(lambda k: k if k <= 1000 else 10 * k), xm=SCALE)
def test_pareto_figures_exist_by_tail_index(threshold, side, d, n, xm):
    a = threshold * (1.0 + side * d)
    show(a=a, n=n, xm=xm)
    model = M.Pareto(a, xm)
    m1, m2 = pareto_raw(a, xm, n, 1, 1), pareto_raw(a, xm, n, 2, 1)
    if m2 is None:
        with pytest.raises(ParameterError):
            A.revenue_report(model, "forward", n)
        return
    report = A.revenue_report(model, "forward", n, own_value=0.0)
    warned = " ".join(report["warnings"])
    sd2 = None if pareto_raw(a, xm, n, 2, 2) is None else math.sqrt(pareto_raw(a, xm, n, 2, 2) - m2 * m2)
    for rule in RULES:
        r = next(x for x in report["results"] if x["rule"] == rule)
        assert r["expected_revenue"] == pytest.approx(m2, rel=1e-10), (rule, r["expected_revenue"], m2)
        has_sd = (a > 1.0) if rule in ("second_price", "ascending") else (a > 2.0 / 3.0)
        # just above 2/3 a bid-priced sd exists but lies mostly beyond 1e300: null, with the warning that says so
        beyond = f"{rule}: the sd is null: the moment exists, but more than 1e-12 of it comes from values beyond" in warned
        assert (r["revenue_sd"] is not None) == has_sd or (has_sd and beyond), (rule, a, r["revenue_sd"])
        if not has_sd:
            assert f"{rule}: the sd is null" in warned
        elif rule in ("second_price", "ascending"):
            assert r["revenue_sd"] == pytest.approx(sd2, rel=1e-10), rule
        elif sd2 is not None and rule != "all_pay":
            assert r["revenue_sd"] <= sd2 * (1 + 1e-10), (rule, r["revenue_sd"], sd2)
        if m1 is None:
            assert r["expected_bidder_surplus"] is None and r["efficiency"] is None
            assert "the highest value's mean does not exist" in warned
        else:
            assert r["expected_bidder_surplus"] == pytest.approx(m1 - m2, rel=1e-10), rule
            assert r["efficiency"] == 1.0


# ---------------------------------------------------------------------------
# Bugs in service/ that the drawn examples above do not happen to hit, pinned as
# the properties' own minimal falsifying examples (found by Hypothesis in longer runs or while
# shrinking). An entry carries an xfail mark while its bug is open; once fixed, the
# mark goes and the entry stays as a regression check.
# ---------------------------------------------------------------------------
@pytest.mark.parametrize("prop, drawn", [
    pytest.param(test_affine_revenue, dict(spec=MIX_APART, a=1.0, b=1.0, n=2, u=None), id="affine_revenue-mixture_apart"),
    pytest.param(test_revenue_equivalence, dict(spec=Spec("uniform", (("low", 1e-300), ("high", 1.0))), n=10, u=None),
                 id="revenue_equivalence-tiny_floor"),
    pytest.param(test_revenue_rises_with_bidders,
                 dict(spec=Spec("beta", (("alpha", 1.0), ("beta", 1.0), ("low", 7.891017578667937e-225), ("high", 1.0))), n=100),
                 id="revenue_rises-tiny_floor"),
    pytest.param(test_first_price_is_less_risky,
                 dict(spec=Spec("beta", (("alpha", 1.0), ("beta", 0.5623413251903491), ("low", 0.0), ("high", 1.0))),
                      n=1_000_000, u=None),
                 id="first_price_is_less_risky-beta_top"),
    pytest.param(test_affine_revenue_sd, dict(spec=N01, a=7.0, b=0.1, n=100_000, u=None), id="affine_revenue_sd-normal_far"),
])
def test_known_failures(prop, drawn):
    prop.hypothesis.inner_test(**drawn)
