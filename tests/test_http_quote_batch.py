"""GET /v1/quote and POST /v1/batch through the real HTTP layer.

The figures are checked against closed forms for uniform values (Krishna,
Auction Theory, 2nd ed., 2009, ch. 2) and against the POST routes they mirror.
"""
import json
import re

import pytest


def _strict(text):
    def no_constants(name):
        raise AssertionError(f"non-strict JSON constant {name}")
    return json.loads(text, parse_constant=no_constants)


@pytest.mark.parametrize("n,r", [(2, 0.0), (5, 0.5), (10, 0.3)])
def test_quote_revenue_is_the_uniform_closed_form(client, n, r):
    # Krishna 2009, ch. 2: (n-1)/(n+1) + r^n - 2n r^(n+1)/(n+1) for uniform values on [0, 1].
    expected = (n - 1) / (n + 1) + r**n - 2 * n * r ** (n + 1) / (n + 1)
    url = f"/v1/quote?metric=expected_revenue&rule=first_price&bidders={n}&reserve={r}&family=uniform&low=0&high=1"
    resp = client.get(url)
    assert resp.status_code == 200 and resp.mimetype == "text/plain"
    text = resp.get_data(as_text=True)
    assert re.fullmatch(r"-?[0-9.]+(e[+-]?[0-9]+)?", text), text
    assert float(text) == pytest.approx(expected, rel=1e-12)


def test_quote_optimal_reserve_is_one_half(client):
    # Myerson 1981: uniform values on [0, 1] and seller value 0 give the reserve 1/2 whatever n.
    resp = client.get("/v1/quote?metric=optimal_reserve&bidders=7&family=uniform&low=0&high=1")
    assert float(resp.get_data(as_text=True)) == pytest.approx(0.5, rel=1e-12)


def test_quote_top_ranks_are_beta_means(client):
    # David and Nagaraja, Order Statistics, 3rd ed., 2003, sec. 2.1: rank r of n uniforms has mean (n-r+1)/(n+1).
    n = 9
    hi = float(client.get(f"/v1/quote?metric=mean_highest&bidders={n}&family=uniform&low=0&high=1").get_data(as_text=True))
    second = float(client.get(f"/v1/quote?metric=mean_second&bidders={n}&family=uniform&low=0&high=1").get_data(as_text=True))
    low = float(client.get(f"/v1/quote?metric=mean_lowest&direction=reverse&bidders={n}&family=uniform&low=0&high=1").get_data(as_text=True))
    low2 = float(client.get(f"/v1/quote?metric=mean_second_lowest&direction=reverse&bidders={n}&family=uniform&low=0&high=1").get_data(as_text=True))
    assert hi == pytest.approx(n / (n + 1), rel=1e-13)
    assert second == pytest.approx((n - 1) / (n + 1), rel=1e-13)
    assert low == pytest.approx(1 / (n + 1), rel=1e-13)
    assert low2 == pytest.approx(2 / (n + 1), rel=1e-13)


def test_quote_matches_the_post_route(client):
    body = {"bidder_costs": {"family": "gamma", "shape": 30, "scale": 5200}, "bidders": 5, "reserve": 190000,
            "rules": ["second_price"]}
    post = client.post("/v1/revenue", json=body).get_json()["results"][0]["expected_payment"]
    got = client.get("/v1/quote?metric=expected_payment&direction=reverse&bidders=5&reserve=190000"
                     "&family=gamma&shape=30&scale=5200")
    assert float(got.get_data(as_text=True)) == post


def test_quote_json_mode(client):
    resp = client.get("/v1/quote?metric=mean_highest&bidders=3&family=uniform&low=0&high=1",
                      headers={"Accept": "application/json"})
    body = _strict(resp.get_data(as_text=True))
    assert resp.mimetype == "application/json"
    assert body["metric"] == "mean_highest" and body["value"] == pytest.approx(0.75, rel=1e-14)


@pytest.mark.parametrize("query,field", [
    ("metric=expected_revenue&bidders=6.5&family=uniform&low=0&high=1", "bidders"),
    ("metric=expected_revenue&bidders=6&family=uniform&low=0&high=nan", "high"),
    ("metric=expected_revenue&bidders=6&family=uniform&low=0&high=1,5", "high"),
    ("metric=expected_revenue&bidders=6&family=uniform&low=1&high=0", "high"),
    ("metric=expected_revenue&bidders=6&family=mixture", "family"),
    ("metric=expected_revenue&bidders=6&family=uniform&low=0&high=1&colour=red", "colour"),
    ("metric=expected_payment&bidders=6&family=uniform&low=0&high=1", "metric"),
    ("metric=nonsense&bidders=6&family=uniform&low=0&high=1", "metric"),
    ("metric=expected_revenue&bidders=6&family=normal&mean=0&sd=-1", "sd"),
])
def test_quote_errors(client, query, field):
    text = client.get("/v1/quote?" + query)
    assert text.status_code == 422 and text.mimetype == "text/plain"
    line = text.get_data(as_text=True)
    assert line.count("\n") == 1 and field in line
    js = client.get("/v1/quote?" + query, headers={"Accept": "application/json"})
    assert js.status_code == 422 and js.mimetype == "application/problem+json"
    assert field in [e["field"] for e in _strict(js.get_data(as_text=True))["errors"]]


def test_batch_answers_in_order_and_isolates_a_bad_item(client):
    good = {"bidder_values": {"family": "uniform", "low": 0, "high": 1}, "bidders": 4, "reserve": 0.5,
            "rules": ["second_price"]}
    resp = client.post("/v1/batch", json={"requests": [
        {"id": "a", "path": "/v1/revenue", "body": good},
        {"id": 2, "path": "/v1/top-values", "body": {"bidder_values": {"family": "normal", "mean": 0, "sd": -1}, "bidders": 3}},
        {"id": "c", "path": "/v1/nowhere", "body": {}},
        {"id": "d", "path": "/v1/reserve-price", "body": {"bidder_values": {"family": "uniform", "low": 0, "high": 1}, "bidders": 4}},
    ]})
    assert resp.status_code == 200
    out = _strict(resp.get_data(as_text=True))["responses"]
    assert [r["id"] for r in out] == ["a", 2, "c", "d"]
    assert [r["status"] for r in out] == [200, 422, 422, 200]
    # Krishna 2009, ch. 2 with n = 4, r = 1/2.
    n, r = 4, 0.5
    assert out[0]["body"]["results"][0]["expected_revenue"] == pytest.approx((n - 1) / (n + 1) + r**n - 2 * n * r ** (n + 1) / (n + 1), rel=1e-12)
    assert out[0]["body"] == client.post("/v1/revenue", json=good).get_json()
    assert [e["field"] for e in out[1]["body"]["errors"]] == ["bidder_values.sd"]
    assert out[2]["body"]["errors"][0]["field"] == "path"
    assert out[3]["body"]["optimal_reserve"] == pytest.approx(0.5, rel=1e-12)  # Myerson 1981


@pytest.mark.parametrize("body,field", [
    ({"requests": []}, "requests"),
    ({"requests": "x"}, "requests"),
    ({}, "requests"),
    ({"requests": [], "extra": 1}, "extra"),
])
def test_batch_envelope_errors(client, body, field):
    resp = client.post("/v1/batch", json=body)
    assert resp.status_code == 422
    assert field in [e["field"] for e in resp.get_json()["errors"]]


def test_the_readme_spreadsheet_formulas_answer(client):
    """Every fixed quote URL in README's formulas answers 200 with a bare number in the
    decimal mark it asks for, and the point and comma forms of one quote agree (the
    figure itself is checked against references elsewhere; here the doors' plumbing)."""
    from pathlib import Path

    readme = (Path(__file__).resolve().parents[1] / "README.md").read_text()
    urls = re.findall(r'WEBSERVICE\("http://localhost:8000(/v1/quote\?[^"]+)"\)', readme)
    assert len(urls) >= 3
    values = []
    for url in urls:
        resp = client.get(url)
        text = resp.get_data(as_text=True)
        assert resp.status_code == 200, (url, text)
        values.append(float(text.replace(",", ".") if "decimal=," in url else text))
        assert ("," in text) == ("decimal=," in url) and values[-1] > 0
    assert values[0] == values[1] == values[2]
