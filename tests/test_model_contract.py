"""Value models write themselves back as the JSON a user sends (``to_params``), and adding a
family is one class and one registration. The references: the model itself rebuilt from its
own JSON (the same answers, exactly), and for the toy family scipy.stats and scipy's quad."""
from __future__ import annotations

import json
import math

import numpy as np
import pytest
import scipy.integrate as si
import scipy.stats as st

from service import create_app
from service.core import models as M
from service.core import orderstats as O
from service.core.errors import ParameterError
from service.web.fields import build_value_model

SPECS = {
    "uniform": {"family": "uniform", "low": 2, "high": 5},
    "normal": {"family": "normal", "mean": 10, "sd": 3},
    "lognormal by median": {"family": "lognormal", "median": 62000, "sigma": 0.35},
    "lognormal by mean": {"family": "lognormal", "mean": 100, "sd": 20},
    "exponential": {"family": "exponential", "mean": 4, "shift": 1},
    "gamma": {"family": "gamma", "shape": 30, "scale": 5200},
    "weibull": {"family": "weibull", "shape": 1.5, "scale": 50000},
    "beta": {"family": "beta", "alpha": 2, "beta": 5, "low": 10, "high": 20},
    "triangular": {"family": "triangular", "low": 40000, "mode": 60000, "high": 90000},
    "pareto": {"family": "pareto", "shape": 3.5, "minimum": 20000},
    "power": {"family": "power", "exponent": 3, "low": 0, "high": 10},
    "truncated normal": {"family": "normal", "mean": 10, "sd": 3, "truncate": {"low": 8, "high": 20}},
    "kernel sample, bounded": {"family": "empirical", "sample": [48.5, 52.3, 55.8, 57.2, 59.9, 61.4], "smoothing": "kernel", "low": 30},
    "step sample": {"family": "empirical", "sample": [3, 5, 8, 13, 21], "smoothing": "none"},
    "quantile table": {"family": "quantile_table", "points": [{"p": 0.1, "value": 2}, {"p": 0.5, "value": 4}, {"p": 0.9, "value": 9}],
                       "low": 0, "high": 12},
    "nested mixture": {"family": "mixture", "components": [
        {"weight": 0.6, "model": {"family": "normal", "mean": 100, "sd": 5}},
        {"weight": 0.4, "model": {"family": "mixture", "components": [{"weight": 0.5, "model": {"family": "gamma", "shape": 3, "scale": 40}},
                                                                       {"weight": 0.5, "model": {"family": "uniform", "low": 90, "high": 150}}]}}]},
}


def _answers(model):
    lo, hi = model.ppf(np.array([0.01, 0.99]))
    x = np.linspace(lo, hi, 41)
    return np.concatenate((model.cdf(x), [O.rank_summary(model, 5, 1).mean, O.rank_summary(model, 5, 2).mean]))


@pytest.mark.parametrize("name", SPECS)
def test_every_model_writes_itself_back(name):
    model = build_value_model(SPECS[name])
    params = model.to_params()
    assert json.loads(json.dumps(params, allow_nan=False)) == params  # plain, strict JSON
    again = build_value_model(params)
    assert again.to_params() == params
    assert np.array_equal(_answers(again), _answers(model))


def test_a_reflected_model_writes_back_the_costs_it_came_from():
    costs = build_value_model(SPECS["gamma"])
    assert M.Reflected(costs).to_params() == costs.to_params()


class Logistic(M.ValueModel):
    """A toy family for the test: the logistic distribution, F = 1 / (1 + e^(-(x - m)/s))."""

    family = "logistic_toy"
    parameters = {"location": M.Param(role="location"), "scale": M.Param(bound="positive", role="scale")}

    def __init__(self, location, scale):
        self.m, self.s = float(location), float(scale)

    def cdf(self, x):
        return 1.0 / (1.0 + np.exp(-(np.asarray(x, float) - self.m) / self.s))

    def sf(self, x):
        return 1.0 / (1.0 + np.exp((np.asarray(x, float) - self.m) / self.s))

    def pdf(self, x):
        z = np.exp(-np.abs(np.asarray(x, float) - self.m) / self.s)
        return z / (self.s * (1.0 + z) ** 2)

    def ppf(self, u):
        u = np.asarray(u, float)
        return self.m + self.s * (np.log(u) - np.log1p(-u))

    def isf(self, v):
        v = np.asarray(v, float)
        return self.m + self.s * (np.log1p(-v) - np.log(v))


@pytest.fixture()
def toy_family():
    M.register_family(Logistic)
    yield Logistic
    M.PARAMETRIC.pop(Logistic.family)


def test_a_registered_family_is_accepted_everywhere(toy_family):
    client = create_app().test_client()
    n, body = 6, {"family": "logistic_toy", "location": 50, "scale": 4}
    # E[X_(n-1:n)] = int x n (n - 1) F^(n-2) (1 - F) f dx, by scipy's quad on scipy.stats.logistic
    ref = st.logistic(loc=50, scale=4)
    want = si.quad(lambda x: x * n * (n - 1) * ref.cdf(x) ** (n - 2) * ref.sf(x) * ref.pdf(x), -math.inf, math.inf)[0]
    out = client.post("/v1/revenue", json={"bidder_values": body, "bidders": n, "rules": ["second_price", "first_price"]}).get_json()
    assert [r["expected_revenue"] for r in out["results"]] == pytest.approx([want, want], rel=1e-9)
    quote = client.get(f"/v1/quote?metric=expected_revenue&bidders={n}&family=logistic_toy&location=50&scale=4")
    assert float(quote.get_data(as_text=True)) == pytest.approx(want, rel=1e-9)
    bad = client.post("/v1/revenue", json={"bidder_values": {**body, "scale": -1}, "bidders": n})
    assert bad.status_code == 422 and bad.get_json()["errors"][0]["field"] == "bidder_values.scale"
    assert build_value_model(body).to_params() == {"family": "logistic_toy", "location": 50.0, "scale": 4.0}


@pytest.mark.parametrize("build,field", [
    (lambda: M.Uniform(2.0, 1.0), "high"),
    (lambda: M.BetaValues(2.0, 3.0, low=5.0, high=5.0), "high"),
    (lambda: M.Power(2.0, high=-1.0), "high"),
    (lambda: M.Triangular(0.0, 0.0, 0.0), "high"),
    (lambda: M.Triangular(0.0, 2.0, 1.0), "mode"),
    (lambda: M.LogNormal(median=1.0, sigma=0.5, mean=2.0), "median"),
    (lambda: M.LogNormal(median=1.0), "sigma"),
    (lambda: M.LogNormal(sd=1.0), "mean"),
    (lambda: M.LogNormal(), "median"),
    (lambda: M.Gamma(0.001, 1.0), "shape"),
])
def test_declared_ties_forms_and_ranges_are_checked_for_every_family(build, field):
    # Each family declares its parameters' reliable ranges, the ties between them (a support's ends,
    # a mode between them) and its alternative forms once; the base class checks them all.
    with pytest.raises(ParameterError) as err:
        build()
    assert err.value.field == field


def test_every_family_declares_what_the_strategies_need():
    # The property tests draw every parametric family from its declarations: each parameter of
    # the first form has a role or is set by a tie, and every shape has a typical range.
    for family, cls in M.PARAMETRIC.items():
        names = cls.forms[0] if cls.forms else tuple(cls.parameters)
        tied = {t.high for t in cls.ties if isinstance(t, M.Ordered)} | {t.name for t in cls.ties if isinstance(t, M.Between)}
        for k in names:
            p = cls.parameters[k]
            assert p.role is not None or k in tied, (family, k)
            assert p.role != "shape" or p.typical is not None, (family, k)
