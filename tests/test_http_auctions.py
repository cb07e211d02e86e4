"""The auction endpoints through the Flask test client: POST /v1/revenue,
/v1/bid-strategy and /v1/reserve-price, forward (``bidder_values``) and reverse
(``bidder_costs``).

Shapes follow openapi.yaml; the few numbers checked here are there to show the
request fields reach the core (reserve, seller/buyer value, rules, grid) and
come from published closed forms for values uniform on [0, 1]: V. Krishna,
Auction Theory, 2nd ed., 2009, ch. 2 (revenue, first-price bid) and R. Myerson,
Optimal Auction Design, 1981 (optimal reserve). Bad input must be a 422
application/problem+json naming the field (RFC 9457, Problem Details for HTTP
APIs, 2023, section 3); no body may hold NaN or Infinity (RFC 8259, section 6:
they are not JSON numbers).
"""
from __future__ import annotations

import json

import numpy as np
import pytest

PROBLEM = "application/problem+json"
U01 = {"family": "uniform", "low": 0, "high": 1}
STEP = {"family": "empirical", "sample": [3.1, 4.0, 4.4, 5.2, 6.8, 7.5], "smoothing": "none"}
FORWARD_RESULT = {"rule", "expected_revenue", "revenue_sd", "revenue_quantiles", "probability_of_sale",
                  "expected_winner_surplus", "expected_bidder_surplus", "efficiency"}
REVERSE_RESULT = {"rule", "expected_payment", "payment_sd", "payment_quantiles", "probability_of_award",
                  "expected_winner_surplus", "expected_bidder_surplus", "efficiency"}
REVENUE_TOP = {"direction", "assumptions", "results", "revenue_equivalence", "numerics", "warnings"}
RULES = ["first_price", "second_price", "ascending", "descending", "all_pay"]


def _no_constants(name):
    raise AssertionError(f"{name} in a response body")


def strict_json(resp):
    """The body parsed as strict JSON: NaN, Infinity and -Infinity are refused."""
    return json.loads(resp.get_data(as_text=True), parse_constant=_no_constants)


def post(client, path, body):
    resp = client.post(path, json=body)
    assert resp.status_code < 500, resp.get_data(as_text=True)
    return resp, strict_json(resp)


def krishna_revenue(n, r):
    """Krishna (2009), ch. 2: (n-1)/(n+1) + r^n - 2n r^(n+1)/(n+1), uniform [0,1], r in [0,1]."""
    return (n - 1) / (n + 1) + r**n - 2 * n * r ** (n + 1) / (n + 1)


# =====================================================================================
# Response shapes and wiring
# =====================================================================================

def test_revenue_forward_fields(client):
    resp, body = post(client, "/v1/revenue", {"bidder_values": U01, "bidders": 4, "reserve": 0.3,
                                               "seller_value": 0.1, "quantiles": [0.1, 0.5, 0.9]})
    assert resp.status_code == 200 and resp.mimetype == "application/json"
    assert REVENUE_TOP <= set(body)
    assert body["direction"] == "forward"
    assert isinstance(body["assumptions"], list) and all(isinstance(a, str) for a in body["assumptions"])
    assert isinstance(body["warnings"], list)
    assert set(body["numerics"]) >= {"method", "abs_error"}
    assert [r["rule"] for r in body["results"]] == RULES  # all five by default, in this order
    for res in body["results"]:
        assert set(res) == FORWARD_RESULT
        # Krishna (2009), ch. 2, every rule; P(sale) = 1 - r^n.
        assert res["expected_revenue"] == pytest.approx(krishna_revenue(4, 0.3), rel=1e-9)
        assert res["probability_of_sale"] == pytest.approx(1 - 0.3**4, rel=1e-12)
        assert res["revenue_sd"] > 0
        assert 0 < res["efficiency"] < 1
        if res["rule"] == "all_pay":
            assert res["revenue_quantiles"] is None
        else:
            assert [q["p"] for q in res["revenue_quantiles"]] == [0.1, 0.5, 0.9]
            assert all(set(q) == {"p", "value"} for q in res["revenue_quantiles"])
    assert 0 <= body["revenue_equivalence"] <= 1e-9
    assert any("all_pay" in w for w in body["warnings"])


def test_revenue_reverse_fields(client):
    resp, body = post(client, "/v1/revenue", {"bidder_costs": U01, "bidders": 3, "reserve": 0.6,
                                               "buyer_value": 1.0, "rules": ["second_price", "first_price"]})
    assert resp.status_code == 200
    assert REVENUE_TOP <= set(body)
    assert body["direction"] == "reverse"
    assert [r["rule"] for r in body["results"]] == ["second_price", "first_price"]  # in the order asked
    # Mirror of Krishna (2009), ch. 2 with X' = 1 - C, r' = 1 - R:
    # E[payment] = P(award) - revenue(n, 1 - R), P(award) = 1 - (1 - R)^n (derived in
    # tests/test_auctions_reference.py).
    p_award = 1 - 0.4**3
    for res in body["results"]:
        assert set(res) == REVERSE_RESULT
        assert res["expected_payment"] == pytest.approx(p_award - krishna_revenue(3, 0.4), rel=1e-9)
        assert res["probability_of_award"] == pytest.approx(p_award, rel=1e-12)
        assert res["payment_sd"] > 0 and res["efficiency"] is not None
        assert len(res["payment_quantiles"]) == 5  # the default levels


def test_revenue_reverse_without_buyer_value_has_null_efficiency(client):
    resp, body = post(client, "/v1/revenue", {"bidder_costs": U01, "bidders": 3})
    assert resp.status_code == 200
    assert all(r["efficiency"] is None for r in body["results"])
    assert any("efficiency" in w for w in body["warnings"])
    # No maximum price: E[second-lowest cost] = 2/(n+1) (order statistics of uniforms, from memory).
    assert body["results"][0]["expected_payment"] == pytest.approx(0.5, rel=1e-9)


def test_bid_strategy_forward_fields(client):
    resp, body = post(client, "/v1/bid-strategy", {"bidder_values": U01, "bidders": 3, "reserve": 0.3, "points": 5})
    assert resp.status_code == 200
    assert {"direction", "rule", "values", "bids", "note", "assumptions", "warnings"} <= set(body)
    assert body["direction"] == "forward" and body["rule"] == "first_price"  # the default rule
    assert "costs" not in body
    assert body["values"] == pytest.approx([0.0, 0.25, 0.5, 0.75, 1.0])
    assert isinstance(body["note"], str) and body["note"]
    # Null below the reserve; above it Krishna (2009), ch. 2: b(v) = 2v/3 + r^3/(3 v^2).
    assert body["bids"][:2] == [None, None]
    for v, b in zip(body["values"][2:], body["bids"][2:]):
        assert b == pytest.approx(2 * v / 3 + 0.3**3 / (3 * v**2), rel=1e-9)
    assert body["warnings"]


def test_bid_strategy_reverse_fields(client):
    resp, body = post(client, "/v1/bid-strategy", {"bidder_costs": U01, "bidders": 3, "reserve": 0.7,
                                                    "rule": "second_price", "at": [0.1, 0.5, 0.9]})
    assert resp.status_code == 200
    assert {"direction", "rule", "costs", "bids", "note", "assumptions", "warnings"} <= set(body)
    assert body["direction"] == "reverse" and body["rule"] == "second_price"
    assert "values" not in body
    assert body["costs"] == [0.1, 0.5, 0.9]
    # Truthful under second_price (Vickrey 1961); null above the maximum price.
    assert body["bids"] == [pytest.approx(0.1), pytest.approx(0.5), None]


def test_bid_strategy_default_grid(client):
    resp, body = post(client, "/v1/bid-strategy", {"bidder_values": U01, "bidders": 2, "rule": "ascending"})
    assert resp.status_code == 200
    assert len(body["values"]) == len(body["bids"]) == 51
    assert body["bids"] == pytest.approx(body["values"])  # truthful (Vickrey 1961)


def test_reserve_price_forward_fields(client):
    resp, body = post(client, "/v1/reserve-price", {"bidder_values": U01, "bidders": 3, "seller_value": 0.2})
    assert resp.status_code == 200
    keys = {"direction", "optimal_reserve", "expected_revenue_at_optimum", "expected_revenue_without_reserve",
            "probability_of_sale_at_optimum", "expected_payoff_at_optimum", "regular", "note"}
    assert keys <= set(body)
    assert not any("payment" in k or "award" in k for k in body)
    assert body["direction"] == "forward" and body["regular"] is True
    # Myerson (1981): 2r - 1 = v0, r* = 0.6; revenue by Krishna (2009), ch. 2; payoff adds v0 r*^n.
    assert body["optimal_reserve"] == pytest.approx(0.6, rel=1e-7)
    assert body["expected_revenue_at_optimum"] == pytest.approx(krishna_revenue(3, 0.6), rel=1e-9)
    assert body["expected_revenue_without_reserve"] == pytest.approx(0.5, rel=1e-9)
    assert body["probability_of_sale_at_optimum"] == pytest.approx(1 - 0.6**3, rel=1e-9)
    assert body["expected_payoff_at_optimum"] == pytest.approx(krishna_revenue(3, 0.6) + 0.2 * 0.6**3, rel=1e-9)
    assert isinstance(body["note"], str) and body["note"]


def test_reserve_price_reverse_fields(client):
    resp, body = post(client, "/v1/reserve-price", {"bidder_costs": U01, "bidders": 4, "buyer_value": 1.2})
    assert resp.status_code == 200
    keys = {"direction", "optimal_reserve", "expected_payment_at_optimum", "expected_payment_without_reserve",
            "probability_of_award_at_optimum", "expected_payoff_at_optimum", "regular", "note"}
    assert keys <= set(body)
    assert not any("revenue" in k or "_sale_" in k for k in body)
    assert body["direction"] == "reverse"
    # Virtual cost 2c = B (Myerson 1981, mirrored): optimal maximum price 0.6.
    assert body["optimal_reserve"] == pytest.approx(0.6, rel=1e-7)
    p_award = 1 - 0.4**4
    pay = p_award - krishna_revenue(4, 0.4)
    assert body["probability_of_award_at_optimum"] == pytest.approx(p_award, rel=1e-9)
    assert body["expected_payment_at_optimum"] == pytest.approx(pay, rel=1e-9)
    assert body["expected_payment_without_reserve"] == pytest.approx(2 / 5, rel=1e-9)
    assert body["expected_payoff_at_optimum"] == pytest.approx(1.2 * p_award - pay, rel=1e-9)


# =====================================================================================
# Bad input: 422 problem+json naming the field
# =====================================================================================

BAD = [
    # (id, path, body, fields that must be named)
    ("both-models", "/v1/revenue", {"bidder_values": U01, "bidder_costs": U01, "bidders": 3}, {"bidder_values", "bidder_costs"}),
    ("neither-model", "/v1/revenue", {"bidders": 3}, {"bidder_values", "bidder_costs"}),
    ("neither-model-bids", "/v1/bid-strategy", {"bidders": 3}, {"bidder_values", "bidder_costs"}),
    ("neither-model-reserve", "/v1/reserve-price", {"bidders": 3}, {"bidder_values", "bidder_costs"}),
    ("both-models-reserve", "/v1/reserve-price", {"bidder_values": U01, "bidder_costs": U01, "bidders": 3}, {"bidder_values", "bidder_costs"}),
    ("buyer-value-forward", "/v1/revenue", {"bidder_values": U01, "bidders": 3, "buyer_value": 1.0}, {"buyer_value"}),
    ("buyer-value-forward-bids", "/v1/bid-strategy", {"bidder_values": U01, "bidders": 3, "buyer_value": 1.0}, {"buyer_value"}),
    ("buyer-value-forward-reserve", "/v1/reserve-price", {"bidder_values": U01, "bidders": 3, "buyer_value": 1.0}, {"buyer_value"}),
    ("seller-value-reverse", "/v1/revenue", {"bidder_costs": U01, "bidders": 3, "seller_value": 0.2}, {"seller_value"}),
    ("seller-value-reverse-reserve", "/v1/reserve-price", {"bidder_costs": U01, "bidders": 3, "seller_value": 0.2, "buyer_value": 1.0}, {"seller_value"}),
    ("unknown-rule", "/v1/revenue", {"bidder_values": U01, "bidders": 3, "rules": ["first_price", "sealed_tender"]}, {"rules.1"}),
    ("unknown-rule-bids", "/v1/bid-strategy", {"bidder_values": U01, "bidders": 3, "rule": "candle"}, {"rule"}),
    ("repeated-rule", "/v1/revenue", {"bidder_values": U01, "bidders": 3, "rules": ["all_pay", "all_pay"]}, {"rules"}),
    ("bidders-zero", "/v1/revenue", {"bidder_values": U01, "bidders": 0}, {"bidders"}),
    ("bidders-fraction", "/v1/revenue", {"bidder_values": U01, "bidders": 2.5}, {"bidders"}),
    ("bidders-zero-bids", "/v1/bid-strategy", {"bidder_costs": U01, "bidders": 0}, {"bidders"}),
    ("bidders-fraction-reserve", "/v1/reserve-price", {"bidder_values": U01, "bidders": 2.5}, {"bidders"}),
    ("bidders-missing", "/v1/revenue", {"bidder_values": U01}, {"bidders"}),
    ("reserve-string", "/v1/revenue", {"bidder_values": U01, "bidders": 3, "reserve": "0.5"}, {"reserve"}),
    ("reserve-string-bids", "/v1/bid-strategy", {"bidder_costs": U01, "bidders": 3, "reserve": "0.5"}, {"reserve"}),
    ("points-and-at", "/v1/bid-strategy", {"bidder_values": U01, "bidders": 3, "points": 5, "at": [0.5]}, {"at"}),
    ("reverse-reserve-price-no-buyer-value", "/v1/reserve-price", {"bidder_costs": U01, "bidders": 3}, {"buyer_value"}),
    ("step-empirical-revenue", "/v1/revenue", {"bidder_values": STEP, "bidders": 3}, {"bidder_values.smoothing"}),
    ("step-empirical-revenue-reverse", "/v1/revenue", {"bidder_costs": STEP, "bidders": 3}, {"bidder_costs.smoothing"}),
    ("step-empirical-bids", "/v1/bid-strategy", {"bidder_values": STEP, "bidders": 3}, {"bidder_values.smoothing"}),
    ("step-empirical-reserve", "/v1/reserve-price", {"bidder_values": STEP, "bidders": 3}, {"bidder_values.smoothing"}),
    ("step-empirical-reserve-reverse", "/v1/reserve-price", {"bidder_costs": STEP, "bidders": 3, "buyer_value": 8.0}, {"bidder_costs.smoothing"}),
]


@pytest.mark.parametrize("path,body,names", [pytest.param(p, b, f, id=i) for i, p, b, f in BAD])
def test_bad_input_is_a_422_problem_naming_the_field(client, path, body, names):
    # RFC 9457, section 3: type, title, status, detail; the service adds errors [{field, message}].
    resp, problem = post(client, path, body)
    assert resp.status_code == 422
    assert resp.mimetype == PROBLEM
    assert {"type", "title", "status", "detail", "errors"} <= set(problem)
    assert problem["status"] == 422
    named = {e["field"] for e in problem["errors"]}
    assert names <= named, problem
    assert all(isinstance(e["message"], str) and e["message"] for e in problem["errors"])
    assert "Traceback" not in resp.get_data(as_text=True)


# =====================================================================================
# Strict JSON on awkward but valid requests
# =====================================================================================

AWKWARD = [
    # heavy tail: the first-price revenue of Pareto(1.5) values has a mean but no variance
    ("/v1/revenue", {"bidder_values": {"family": "pareto", "shape": 1.5, "minimum": 1.0}, "bidders": 3}),
    ("/v1/revenue", {"bidder_costs": {"family": "pareto", "shape": 1.5, "minimum": 1.0}, "bidders": 3, "reserve": 2.0}),
    # reserve above the support: no sale at all
    ("/v1/revenue", {"bidder_values": U01, "bidders": 3, "reserve": 2.0}),
    # maximum price below the support: no award at all
    ("/v1/revenue", {"bidder_costs": U01, "bidders": 3, "reserve": -1.0, "buyer_value": 1.0}),
    ("/v1/bid-strategy", {"bidder_values": {"family": "normal", "mean": 0, "sd": 1}, "bidders": 3, "rule": "all_pay",
                          "at": [-40.0, -5.0, 0.0, 5.0, 40.0]}),
    ("/v1/bid-strategy", {"bidder_costs": U01, "bidders": 4, "reserve": 0.5, "rule": "descending", "at": [0.0, 0.5, 1.0, 2.0]}),
    ("/v1/reserve-price", {"bidder_values": U01, "bidders": 2, "seller_value": 5.0}),
    ("/v1/reserve-price", {"bidder_costs": U01, "bidders": 2, "buyer_value": -1.0}),
    ("/v1/revenue", {"bidder_values": {"family": "lognormal", "median": 1.0, "sigma": 3.0}, "bidders": 1000, "reserve": 1e-9}),
]


@pytest.mark.parametrize("path,body", AWKWARD)
def test_awkward_requests_answer_strict_json(client, path, body):
    resp = client.post(path, json=body)
    assert resp.status_code in (200, 422), resp.get_data(as_text=True)
    parsed = strict_json(resp)  # raises on NaN / Infinity

    def walk(x):
        if isinstance(x, float):
            assert np.isfinite(x)
        elif isinstance(x, dict):
            for v in x.values():
                walk(v)
        elif isinstance(x, list):
            for v in x:
                walk(v)

    walk(parsed)
    if resp.status_code == 422:
        assert resp.mimetype == PROBLEM
