"""POST /v1/top-values and /v1/top-values/joint-density through the Flask test
client: the documented fields, reference numbers through HTTP, and bad input
as RFC 9457 problem details (application/problem+json) naming the field.

Every body the service sends is parsed as strict JSON (NaN and Infinity
refused) by ``call`` below, so each test here also checks that rule.
"""
from __future__ import annotations

import json
import math

import numpy as np
import pytest
import scipy.stats as st

TOP = "/v1/top-values"
JOINT = "/v1/top-values/joint-density"
PROBLEM = "application/problem+json"


def strict_json(text):
    def refuse(name):
        raise ValueError(f"{name} is not strict JSON")

    return json.loads(text, parse_constant=refuse)


def call(client, path, body=None, raw=None, content_type="application/json", method="post"):
    """Send a request; return (response, strictly parsed body)."""
    data = raw if raw is not None else (None if body is None else json.dumps(body, allow_nan=False))
    resp = getattr(client, method)(path, data=data, content_type=content_type)
    text = resp.get_data(as_text=True)
    payload = strict_json(text)  # raises on NaN / Infinity / -Infinity
    assert resp.status_code < 500, text
    return resp, payload


def all_numbers_finite(obj):
    if isinstance(obj, dict):
        return all(all_numbers_finite(v) for v in obj.values())
    if isinstance(obj, list):
        return all(all_numbers_finite(v) for v in obj)
    if isinstance(obj, float):
        return math.isfinite(obj)
    return True


def assert_problem(resp, payload, status, field=None):
    assert resp.status_code == status
    assert resp.mimetype == PROBLEM
    for key in ("type", "title", "status", "detail"):
        assert key in payload, payload
    assert payload["status"] == status
    assert isinstance(payload["title"], str) and isinstance(payload["detail"], str)
    if status == 422:
        fields = [e["field"] for e in payload["errors"]]
        assert field in fields, fields
        assert all(isinstance(e["message"], str) and e["message"] for e in payload["errors"])


LOGNORMAL = {"family": "lognormal", "median": 1.0, "sigma": 0.5}
NORMAL = {"family": "normal", "mean": 100.0, "sd": 15.0}

FAMILIES = {
    "uniform": {"family": "uniform", "low": 10.0, "high": 20.0},
    "normal": NORMAL,
    "normal-truncated": {"family": "normal", "mean": 50.0, "sd": 10.0, "truncate": {"low": 45.0, "high": 80.0}},
    "lognormal": LOGNORMAL,
    "lognormal-by-mean": {"family": "lognormal", "mean": 2.0, "sd": 1.0},
    "exponential": {"family": "exponential", "mean": 3.0},
    "exponential-shifted": {"family": "exponential", "mean": 3.0, "shift": 1.0},
    "gamma": {"family": "gamma", "shape": 2.5, "scale": 3.0},
    "weibull": {"family": "weibull", "shape": 1.7, "scale": 2.0},
    "beta": {"family": "beta", "alpha": 2.0, "beta": 5.0},
    "beta-scaled": {"family": "beta", "alpha": 2.0, "beta": 5.0, "low": 10.0, "high": 30.0},
    "triangular": {"family": "triangular", "low": 1.0, "mode": 2.0, "high": 5.0},
    "pareto": {"family": "pareto", "shape": 2.5, "minimum": 2.0},
    "power": {"family": "power", "exponent": 3.0, "high": 5.0},
    "quantile_table": {"family": "quantile_table",
                       "points": [{"p": 0.0, "value": 1.0}, {"p": 0.5, "value": 3.0}, {"p": 1.0, "value": 5.0}]},
    "quantile_table-bounds": {"family": "quantile_table", "low": 1.0, "high": 9.0,
                              "points": [{"p": 0.1, "value": 2.0}, {"p": 0.5, "value": 3.0}, {"p": 0.9, "value": 5.0}]},
    "empirical": {"family": "empirical", "sample": [3.1, 4.7, 5.2, 6.0, 7.4, 8.8, 12.5]},
    "empirical-bounded": {"family": "empirical", "sample": [3.1, 4.7, 5.2, 6.0, 7.4, 8.8, 12.5], "low": 0.0, "high": 15.0},
    "empirical-step": {"family": "empirical", "sample": [3.1, 4.7, 5.2, 6.0, 7.4, 8.8, 12.5], "smoothing": "none"},
    "mixture": {"family": "mixture", "components": [
        {"weight": 0.75, "model": {"family": "normal", "mean": 10.0, "sd": 2.0}},
        {"weight": 0.25, "model": {"family": "uniform", "low": 12.0, "high": 20.0}}]},
}


def assert_top_values_shape(payload, bidders, ranks, n_quantiles, curve_points=0):
    assert payload["bidders"] == bidders
    assert [r["rank"] for r in payload["results"]] == ranks
    for item in payload["results"]:
        assert isinstance(item["mean"], float) and isinstance(item["sd"], float)
        assert len(item["quantiles"]) == n_quantiles
        values = [q["value"] for q in item["quantiles"]]
        assert all(isinstance(q["p"], float) for q in item["quantiles"])
        assert values == sorted(values)
        if curve_points:
            curve = item["curve"]
            assert len(curve["x"]) == len(curve["pdf"]) == len(curve["cdf"]) == curve_points
            assert all(p >= 0 for p in curve["pdf"]) and all(0 <= c <= 1 for c in curve["cdf"])
        else:
            assert "curve" not in item
    if bidders >= 2:
        assert isinstance(payload["expected_gap"], float)
    assert isinstance(payload["numerics"]["method"], str)
    assert isinstance(payload["numerics"]["abs_error"], float)
    assert isinstance(payload["warnings"], list)


# ---------------------------------------------------------------------------
# Successful requests
# ---------------------------------------------------------------------------
@pytest.mark.parametrize("name", sorted(FAMILIES))
def test_every_family_accepted_by_top_values(client, name):
    body = {"bidder_values": FAMILIES[name], "bidders": 5}
    if name != "empirical-step":  # a step distribution has no density curve
        body["curve_points"] = 11
    resp, payload = call(client, TOP, body)
    assert resp.status_code == 200 and resp.mimetype == "application/json"
    assert_top_values_shape(payload, 5, [1, 2], 5, body.get("curve_points", 0))
    mean1, mean2 = payload["results"][0]["mean"], payload["results"][1]["mean"]
    assert mean1 > mean2 and payload["expected_gap"] == pytest.approx(mean1 - mean2, rel=1e-12)


@pytest.mark.parametrize("name", sorted(set(FAMILIES) - {"empirical-step"}))
def test_every_family_accepted_by_joint_density(client, name):
    resp, payload = call(client, JOINT, {"bidder_values": FAMILIES[name], "bidders": 5, "grid_points": 21})
    assert resp.status_code == 200
    assert payload["ranks"] == [1, 2] and payload["bidders"] == 5
    assert len(payload["higher"]) == len(payload["lower"]) == 21
    assert len(payload["density"]) == 21 and all(len(row) == 21 for row in payload["density"])
    assert isinstance(payload["mass"], float) and isinstance(payload["warnings"], list)


def test_joint_density_of_step_empirical_is_refused(client):
    resp, payload = call(client, JOINT, {"bidder_values": FAMILIES["empirical-step"], "bidders": 5})
    assert_problem(resp, payload, 422, "bidder_values.smoothing")


def test_top_values_numbers_match_scipy(client):
    # Source: scipy.stats.order_statistic (SciPy >= 1.15) for the mean, sd and
    # pdf/cdf; quantiles as lognorm.isf(beta(r, n-r+1).isf(p)) (David and
    # Nagaraja, Order Statistics, 3rd ed., 2003, section 2.1).
    n, ps = 10, [0.05, 0.5, 0.95]
    resp, payload = call(client, TOP, {"bidder_values": LOGNORMAL, "bidders": n, "quantiles": ps, "curve_points": 31})
    assert resp.status_code == 200
    assert_top_values_shape(payload, n, [1, 2], 3, 31)
    means = []
    for item in payload["results"]:
        r = item["rank"]
        ref = st.order_statistic(st.make_distribution(st.lognorm)(s=0.5), r=n - r + 1, n=n)
        assert item["mean"] == pytest.approx(ref.mean(), rel=1e-10)
        assert item["sd"] == pytest.approx(ref.standard_deviation(), rel=1e-10)
        want_q = st.lognorm(0.5).isf(st.beta.isf(ps, r, n - r + 1))
        assert [q["p"] for q in item["quantiles"]] == ps
        np.testing.assert_allclose([q["value"] for q in item["quantiles"]], want_q, rtol=1e-11)
        x = np.array(item["curve"]["x"])
        np.testing.assert_allclose(item["curve"]["pdf"], ref.pdf(x), rtol=1e-9)
        np.testing.assert_allclose(item["curve"]["cdf"], ref.cdf(x), rtol=1e-9)
        means.append(ref.mean())
    assert payload["expected_gap"] == pytest.approx(means[0] - means[1], rel=1e-9)


def test_single_bidder_and_chosen_ranks(client):
    resp, payload = call(client, TOP, {"bidder_values": NORMAL, "bidders": 1})
    assert resp.status_code == 200
    assert [r["rank"] for r in payload["results"]] == [1]
    assert "expected_gap" not in payload
    # a single normal draw: mean and sd of the family itself
    assert payload["results"][0]["mean"] == pytest.approx(100.0, rel=1e-12)
    assert payload["results"][0]["sd"] == pytest.approx(15.0, rel=1e-12)
    resp, payload = call(client, TOP, {"bidder_values": NORMAL, "bidders": 10, "ranks": [3, 1]})
    assert resp.status_code == 200
    assert [r["rank"] for r in payload["results"]] == [3, 1]


def test_heavy_pareto_gives_null_mean_with_warning(client):
    # E[X_r] is finite iff rank * shape > 1 (Beta representation, David and
    # Nagaraja 2003, section 2.1): with shape 0.8 the highest has no mean, the
    # second-highest a mean but no variance (2 * 0.8 <= 2).
    body = {"bidder_values": {"family": "pareto", "shape": 0.8, "minimum": 2.0}, "bidders": 10}
    resp, payload = call(client, TOP, body)
    assert resp.status_code == 200
    top, second = payload["results"]
    assert top["mean"] is None and top["sd"] is None
    assert isinstance(second["mean"], float) and second["sd"] is None
    assert payload["expected_gap"] is None
    assert any("mean does not exist" in w for w in payload["warnings"])
    assert any("variance does not exist" in w for w in payload["warnings"])
    assert all(isinstance(q["value"], float) for q in top["quantiles"])  # quantiles always exist


def test_joint_density_grid_fields_and_zero_above_diagonal(client):
    resp, payload = call(client, JOINT, {"bidder_values": LOGNORMAL, "bidders": 5})
    assert resp.status_code == 200 and resp.mimetype == "application/json"
    for key in ("bidders", "ranks", "higher", "lower", "density", "mass", "warnings"):
        assert key in payload
    hi, lo, dens = payload["higher"], payload["lower"], payload["density"]
    assert len(hi) == len(lo) == 61  # the default grid
    assert len(dens) == 61 and all(len(row) == 61 for row in dens)
    # density[i][j] is at (higher[i], lower[j]); it is exactly 0 where lower > higher
    above = [(i, j) for i in range(61) for j in range(61) if lo[j] > hi[i]]
    assert above and all(dens[i][j] == 0.0 for i, j in above)
    assert all(dens[i][j] >= 0.0 for i in range(61) for j in range(61))
    assert any(dens[i][j] > 0.0 for i in range(61) for j in range(61) if lo[j] < hi[i])


def test_joint_density_default_grid_holds_about_all_the_mass(client):
    # The grid runs from the 5e-4 quantile of the lower rank to the 1 - 5e-4
    # quantile of the higher, so the probability inside it is at least 0.999;
    # a 61-point rule on a smooth density should land within 0.01 of it
    # (common practice, no source).
    resp, payload = call(client, JOINT, {"bidder_values": LOGNORMAL, "bidders": 5})
    assert resp.status_code == 200
    assert abs(payload["mass"] - 1.0) < 0.01
    assert payload["warnings"] == []


def test_joint_density_points_against_closed_form(client):
    # Uniform on [0, 1], top two of n: f(x, y) = n (n-1) y^(n-2) for y < x, 0 for
    # y > x (David and Nagaraja 2003, eq. 2.2.1).
    n = 6
    pts = [(0.9, 0.5), (0.7, 0.69), (0.99, 0.01), (0.5, 0.8), (0.3, 0.31)]
    body = {"bidder_values": {"family": "uniform", "low": 0.0, "high": 1.0}, "bidders": n,
            "points": [{"higher": x, "lower": y} for x, y in pts]}
    resp, payload = call(client, JOINT, body)
    assert resp.status_code == 200
    assert payload["ranks"] == [1, 2] and isinstance(payload["warnings"], list)
    assert "density" not in payload and "mass" not in payload
    for (x, y), got in zip(pts, payload["points"]):
        assert got["higher"] == x and got["lower"] == y
        if y > x:
            assert got["density"] == 0.0
        else:
            assert got["density"] == pytest.approx(n * (n - 1) * y ** (n - 2), rel=1e-12)


def test_joint_density_other_ranks(client):
    # ranks 1 and 3 of n uniform values: n (n-1) (n-2) (x - y) y^(n-3) for y < x
    # (David and Nagaraja 2003, eq. 2.2.1).
    n = 5
    body = {"bidder_values": {"family": "uniform", "low": 0.0, "high": 1.0}, "bidders": n, "ranks": [1, 3],
            "points": [{"higher": 0.9, "lower": 0.4}, {"higher": 0.4, "lower": 0.9}]}
    resp, payload = call(client, JOINT, body)
    assert resp.status_code == 200 and payload["ranks"] == [1, 3]
    assert payload["points"][0]["density"] == pytest.approx(n * (n - 1) * (n - 2) * 0.5 * 0.4 ** 2, rel=1e-12)
    assert payload["points"][1]["density"] == 0.0


EXTREME_BUT_VALID = [
    {"family": "normal", "mean": 1e308, "sd": 1e308},
    {"family": "normal", "mean": 1.0, "sd": 1e-300},
    {"family": "uniform", "low": -1e308, "high": 1e308},
    {"family": "uniform", "low": 0.0, "high": 1e-320},
    {"family": "exponential", "mean": 1e-310},
    {"family": "pareto", "shape": 1e-300, "minimum": 1.0},
    {"family": "pareto", "shape": 1e300, "minimum": 1.0},
    {"family": "pareto", "shape": 0.8, "minimum": 2.0},
    {"family": "gamma", "shape": 1e-300, "scale": 1.0},
    {"family": "gamma", "shape": 0.01, "scale": 1.0},
    {"family": "beta", "alpha": 0.01, "beta": 0.01},
    {"family": "weibull", "shape": 0.05, "scale": 1.0},
    {"family": "power", "exponent": 1e-300, "high": 1.0},
    {"family": "lognormal", "median": 1.0, "sigma": 50.0},
]


@pytest.mark.parametrize("model", EXTREME_BUT_VALID, ids=lambda m: json.dumps(m, separators=(",", ":")))
@pytest.mark.parametrize("bidders", [2, 10**6])
def test_no_nan_or_infinity_in_any_body(client, model, bidders):
    # Strict JSON (RFC 8259 has no NaN or Infinity): numbers the service cannot
    # represent come back as null, never as a non-standard token or a 500.
    for path, extra in ((TOP, {"curve_points": 5}), (JOINT, {"grid_points": 5})):
        resp, payload = call(client, path, {"bidder_values": model, "bidders": bidders, **extra})
        assert resp.status_code in (200, 422)
        assert all_numbers_finite(payload)


# ---------------------------------------------------------------------------
# Bad input: RFC 9457 problem details
# ---------------------------------------------------------------------------
MIX_BAD_WEIGHT = {"family": "mixture", "components": [
    {"weight": 0.5, "model": LOGNORMAL}, {"weight": 1.5, "model": NORMAL}]}
MIX_NOT_ONE = {"family": "mixture", "components": [
    {"weight": 0.5, "model": LOGNORMAL}, {"weight": 0.6, "model": NORMAL}]}
MIX_BAD_INNER = {"family": "mixture", "components": [
    {"weight": 0.5, "model": LOGNORMAL}, {"weight": 0.5, "model": {"family": "normal", "mean": 1.0, "sd": -1.0}}]}
UNSORTED_TABLE = {"family": "quantile_table", "points": [
    {"p": 0.0, "value": 1.0}, {"p": 0.5, "value": 3.0}, {"p": 0.4, "value": 4.0}, {"p": 1.0, "value": 5.0}]}
FALLING_TABLE = {"family": "quantile_table", "points": [
    {"p": 0.0, "value": 1.0}, {"p": 0.5, "value": 3.0}, {"p": 0.6, "value": 2.0}, {"p": 1.0, "value": 5.0}]}

BAD_422 = [
    # (id, path, body, field)
    ("unknown-family", TOP, {"bidder_values": {"family": "zipf", "a": 2.0}, "bidders": 5}, "bidder_values.family"),
    ("missing-family", TOP, {"bidder_values": {"mean": 1.0, "sd": 1.0}, "bidders": 5}, "bidder_values.family"),
    ("unknown-field", TOP, {"bidder_values": LOGNORMAL, "bidders": 5, "colour": "red"}, "colour"),
    ("unknown-model-field", TOP, {"bidder_values": dict(LOGNORMAL, scale=2.0), "bidders": 5}, "bidder_values.scale"),
    ("sd-zero", TOP, {"bidder_values": {"family": "normal", "mean": 1.0, "sd": 0.0}, "bidders": 5}, "bidder_values.sd"),
    ("sd-negative", TOP, {"bidder_values": {"family": "normal", "mean": 1.0, "sd": -2.0}, "bidders": 5},
     "bidder_values.sd"),
    ("high-equals-low", TOP, {"bidder_values": {"family": "uniform", "low": 3.0, "high": 3.0}, "bidders": 5},
     "bidder_values.high"),
    ("high-below-low", TOP, {"bidder_values": {"family": "uniform", "low": 3.0, "high": 1.0}, "bidders": 5},
     "bidder_values.high"),
    ("shape-zero", TOP, {"bidder_values": {"family": "gamma", "shape": 0.0, "scale": 1.0}, "bidders": 5},
     "bidder_values.shape"),
    ("shape-negative", TOP, {"bidder_values": {"family": "weibull", "shape": -1.0, "scale": 1.0}, "bidders": 5},
     "bidder_values.shape"),
    ("mode-outside", TOP, {"bidder_values": {"family": "triangular", "low": 1.0, "mode": 7.0, "high": 5.0},
                           "bidders": 5}, "bidder_values.mode"),
    ("weight-above-one", TOP, {"bidder_values": MIX_BAD_WEIGHT, "bidders": 5}, "bidder_values.components.1.weight"),
    ("weights-not-summing-to-1", TOP, {"bidder_values": MIX_NOT_ONE, "bidders": 5}, "bidder_values.components"),
    ("mixture-inner-model", TOP, {"bidder_values": MIX_BAD_INNER, "bidders": 5}, "bidder_values.components.1.model.sd"),
    ("table-p-unsorted", TOP, {"bidder_values": UNSORTED_TABLE, "bidders": 5}, "bidder_values.points.2.p"),
    ("table-value-falling", TOP, {"bidder_values": FALLING_TABLE, "bidders": 5}, "bidder_values.points.2.value"),
    ("sample-of-4", TOP, {"bidder_values": {"family": "empirical", "sample": [1.0, 2.0, 3.0, 4.0]}, "bidders": 5},
     "bidder_values.sample"),
    ("sample-item-string", TOP, {"bidder_values": {"family": "empirical", "sample": [1.0, 2.0, 3.0, 4.0, "5"]},
                                 "bidders": 5}, "bidder_values.sample.4"),
    ("truncate-empty", TOP, {"bidder_values": dict(NORMAL, truncate={"low": 90.0, "high": 80.0}), "bidders": 5},
     "bidder_values.truncate.high"),
    ("missing-bidders", TOP, {"bidder_values": LOGNORMAL}, "bidders"),
    ("missing-bidder-values", TOP, {"bidders": 5}, "bidder_values"),
    ("bidders-2.5", TOP, {"bidder_values": LOGNORMAL, "bidders": 2.5}, "bidders"),
    ("bidders-true", TOP, {"bidder_values": LOGNORMAL, "bidders": True}, "bidders"),
    ("bidders-string", TOP, {"bidder_values": LOGNORMAL, "bidders": "3"}, "bidders"),
    ("bidders-zero", TOP, {"bidder_values": LOGNORMAL, "bidders": 0}, "bidders"),
    ("rank-above-bidders", TOP, {"bidder_values": LOGNORMAL, "bidders": 3, "ranks": [1, 4]}, "ranks.1"),
    ("quantile-one", TOP, {"bidder_values": LOGNORMAL, "bidders": 3, "quantiles": [0.5, 1.0]}, "quantiles.1"),
    ("joint-unknown-family", JOINT, {"bidder_values": {"family": "zipf"}, "bidders": 5}, "bidder_values.family"),
    ("joint-rank-above-bidders", JOINT, {"bidder_values": LOGNORMAL, "bidders": 3, "ranks": [1, 4]}, "ranks.1"),
    ("joint-ranks-reversed", JOINT, {"bidder_values": LOGNORMAL, "bidders": 5, "ranks": [2, 1]}, "ranks.1"),
    ("joint-one-bidder", JOINT, {"bidder_values": LOGNORMAL, "bidders": 1}, "bidders"),
    ("joint-bidders-2.5", JOINT, {"bidder_values": LOGNORMAL, "bidders": 2.5}, "bidders"),
    ("joint-grid-and-points", JOINT, {"bidder_values": LOGNORMAL, "bidders": 5, "grid_points": 5,
                                      "points": [{"higher": 2.0, "lower": 1.0}]}, "points"),
    ("joint-point-missing-lower", JOINT, {"bidder_values": LOGNORMAL, "bidders": 5, "points": [{"higher": 2.0}]},
     "points.0.lower"),
    ("joint-unknown-field", JOINT, {"bidder_values": LOGNORMAL, "bidders": 5, "colour": "red"}, "colour"),
]


@pytest.mark.parametrize("path,body,field", [pytest.param(p, b, f, id=i) for i, p, b, f in BAD_422])
def test_invalid_input_is_a_422_problem_naming_the_field(client, path, body, field):
    resp, payload = call(client, path, body)
    assert_problem(resp, payload, 422, field)


@pytest.mark.parametrize("path", [TOP, JOINT])
def test_non_finite_number_is_refused(client, path):
    # 1e999 is valid JSON grammar but overflows a double: 422 at the field
    raw = '{"bidder_values": {"family": "normal", "mean": 1e999, "sd": 1}, "bidders": 5}'
    resp, payload = call(client, path, raw=raw)
    assert_problem(resp, payload, 422, "bidder_values.mean")
    raw = '{"bidder_values": {"family": "normal", "mean": 1, "sd": 1}, "bidders": -1e999}'
    resp, payload = call(client, path, raw=raw)
    assert_problem(resp, payload, 422, "bidders")


@pytest.mark.parametrize("token", ["NaN", "Infinity", "-Infinity"])
def test_nan_literal_is_a_400(client, token):
    # not JSON at all (RFC 8259, section 6)
    raw = '{"bidder_values": {"family": "normal", "mean": %s, "sd": 1}, "bidders": 5}' % token
    resp, payload = call(client, TOP, raw=raw)
    assert_problem(resp, payload, 400)


@pytest.mark.parametrize("content_type", ["text/plain", "application/x-www-form-urlencoded"])
def test_body_not_json_is_a_415(client, content_type):
    resp, payload = call(client, TOP, raw='{"bidders": 5}', content_type=content_type)
    assert_problem(resp, payload, 415)


@pytest.mark.parametrize("raw", ['{"bidders": 5', "{bad", "", "[1, 2]", '"text"'])
def test_malformed_json_is_a_400(client, raw):
    resp, payload = call(client, TOP, raw=raw)
    assert_problem(resp, payload, 400)


def test_unknown_path_is_a_404(client):
    resp, payload = call(client, "/v1/top-value", {"bidders": 5})
    assert_problem(resp, payload, 404)


@pytest.mark.parametrize("path", [TOP, JOINT])
def test_wrong_method_is_a_405(client, path):
    resp, payload = call(client, path, method="get")
    assert_problem(resp, payload, 405)
    assert "POST" in resp.headers.get("Allow", "")
