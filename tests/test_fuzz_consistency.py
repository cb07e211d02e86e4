"""The fuzz run's self-consistency checks (fuzz/consistency.py) against published closed
forms: exact answers pass, and answers that break a law are caught. A check that flagged
a correct answer would fail every fuzz run; one that missed a broken one would prove nothing."""
from __future__ import annotations

import math
import sys
from pathlib import Path

import pytest
from scipy import integrate, stats

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "fuzz"))
import consistency as C  # noqa: E402

UNIFORM = {"family": "uniform", "low": 0, "high": 1}
RULES = ("first_price", "second_price", "ascending", "descending", "all_pay")


def uniform_revenue_answer(n, r):
    """Exact figures for n bidders with values uniform on [0, 1] and reserve r (Krishna 2009, ch. 2:
    E[revenue] = (n-1)/(n+1) + r^n - 2n r^(n+1)/(n+1), the same for every rule; the highest value's
    mean over sales is n/(n+1) (1 - r^(n+1)); P(sale) = 1 - r^n)."""
    rev = (n - 1) / (n + 1) + r**n - 2 * n * r ** (n + 1) / (n + 1)
    top = n / (n + 1) * (1 - r ** (n + 1))
    fig = {"expected_revenue": rev, "probability_of_sale": 1 - r**n, "revenue_sd": 0.1,
           "expected_winner_surplus": top - rev, "expected_bidder_surplus": top - rev, "efficiency": None}
    return {"results": [dict(fig, rule=rule) for rule in RULES], "numerics": {"abs_error": 1e-15}, "warnings": []}


@pytest.mark.parametrize("n", [1, 2, 6, 50])
@pytest.mark.parametrize("r", [0.0, 0.3, 0.999])
def test_exact_uniform_revenue_passes(n, r):
    assert C.problems("/v1/revenue", {"bidder_values": UNIFORM, "bidders": n, "reserve": r}, uniform_revenue_answer(n, r)) == []


@pytest.mark.parametrize("key, value, law", [
    ("probability_of_sale", 1.01, "outside [0, 1]"),
    ("expected_bidder_surplus", -0.01, "exceeds the mean of the highest value"),
    ("expected_revenue", -0.01, "negative expected_revenue"),
    ("expected_revenue", 0.96, "above"),   # above the highest value's mean 6/7 and the bound n mean
])
def test_broken_revenue_is_caught(key, value, law):
    ans = uniform_revenue_answer(6, 0.0)
    ans["results"][1][key] = value
    found = C.problems("/v1/revenue", {"bidder_values": UNIFORM, "bidders": 6}, ans)
    assert any(law in f for f in found), found


def test_a_warning_naming_the_figure_excuses_it_and_an_unrelated_one_does_not():
    ans = uniform_revenue_answer(6, 0.0)
    ans["results"][0]["probability_of_sale"] = 1.5
    req = {"bidder_values": UNIFORM, "bidders": 6}
    assert C.problems("/v1/revenue", req, dict(ans, warnings=["first_price: probability_of_sale lost its digits"])) == []
    assert C.problems("/v1/revenue", req, dict(ans, warnings=["efficiency is null: give buyer_value"]))


def test_ranks_out_of_order_are_caught():
    # Uniform [0, 1]: rank r of n has mean (n - r + 1)/(n + 1) (Beta(n - r + 1, r); David and Nagaraja 2003, 2.2).
    ans = {"results": [{"rank": 1, "mean": 5 / 7, "quantiles": []}, {"rank": 2, "mean": 6 / 7, "quantiles": []}], "warnings": []}
    found = C.problems("/v1/top-values", {"bidder_values": UNIFORM, "bidders": 6}, ans)
    assert any("out of order" in f for f in found), found


@pytest.mark.parametrize("n", [1, 2, 3, 6, 20, 100])
def test_the_bound_on_the_highest_holds_for_closed_forms(n):
    # Exponential(1): E[highest of n] = H_n (Renyi's representation; David and Nagaraja 2003, 2.5).
    harmonic = sum(1 / k for k in range(1, n + 1))
    assert C.top_bound({"family": "exponential", "mean": 1}, n) >= harmonic
    # Gamma(3, 2): E[highest of n] by quadrature of n x F^(n-1) f with scipy.stats.gamma.
    g = stats.gamma(3, scale=2)
    top = integrate.quad(lambda x: n * x * g.cdf(x) ** (n - 1) * g.pdf(x), 0, math.inf)[0]
    assert C.top_bound({"family": "gamma", "shape": 3, "scale": 2}, n) >= top * (1 - 1e-9)


def test_beta_moments_survive_subnormal_shapes():
    # Beta(a, b) has mean a/(a+b) and variance ab/((a+b)^2 (a+b+1)); as a = b -> 0 it tends to
    # a fair coin on {0, 1}, sd 1/2 (checked against scipy.stats.beta at a = b = 1e-8).
    mean, sd = C.moments({"family": "beta", "alpha": 1e-310, "beta": 1e-310})
    ref = stats.beta(1e-8, 1e-8)
    assert mean == pytest.approx(ref.mean(), rel=1e-6) and sd == pytest.approx(ref.std(), rel=1e-6)
