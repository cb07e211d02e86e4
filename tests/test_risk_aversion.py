"""Risk-averse bidders with constant relative risk aversion: utility of a gain x is x^alpha,
alpha = 1 - rho (Riley and Samuelson 1981; Maskin and Riley 1984; Krishna, Auction Theory,
2nd ed., 2009, ch. 4).

The first-order condition of a first-price bidder with value v, F(z)^(n-1) (v - b(z))^alpha
maximised at z = v, gives b' = (n - 1)/alpha (f/F) (v - b), b(r) = r: the risk-neutral
equation with (n - 1)/alpha rivals, so b(v) = v - int_r^v (F(x)/F(v))^((n-1)/alpha) dx
(derived here). Uniform [0, 1] values: b(v) = (n-1) v / (n-1+alpha) and first-price revenue
n (n-1) / ((n+1)(n-1+alpha)) without a reserve (Krishna 2009, ch. 4); with a reserve the
values below come from the formula above in mpmath. Second price and the ascending clock
are unchanged (bidding one's value stays dominant).
"""
from __future__ import annotations

import mpmath as mp
import pytest

from service.core import models as M
from service.core import reports, reserve

mp.mp.dps = 30
U = M.Uniform(0.0, 1.0)
UJSON = {"family": "uniform", "low": 0, "high": 1}


def _bid(n, alpha, r, v):
    k = mp.mpf(n - 1) / alpha
    return v - (v ** (k + 1) - mp.mpf(r) ** (k + 1)) / ((k + 1) * v ** k)


def _fp_revenue(n, alpha, r):
    """int_r^1 b(v) n v^(n-1) dv with b above, integrated term by term (derived here; k != n):
    k/(k+1) n (1 - r^(n+1))/(n+1) + n (r^(k+1) - r^(n+1)) / ((k+1)(n-k))."""
    k, r = mp.mpf(n - 1) / alpha, mp.mpf(r)
    return k / (k + 1) * n * (1 - r ** (n + 1)) / (n + 1) + n * (r ** (k + 1) - r ** (n + 1)) / ((k + 1) * (n - k))


@pytest.mark.parametrize("n,rho", [(2, 0.5), (4, 0.3), (7, 0.8), (3, 0.0), (2, 0.95), (5, 0.99), (50, 0.99), (1000, 0.9),
                                   (2, 0.995), (50, 0.999), (5, 0.999999)])
def test_uniform_bids_and_revenue_without_a_reserve(n, rho):
    alpha = 1.0 - rho
    rep = reports.revenue_report(U, "forward", n, None, 0.0, rules=["first_price", "second_price", "descending", "ascending"],
                                 risk_aversion=rho)
    by_rule = {x["rule"]: x for x in rep["results"]}
    fp = n * (n - 1) / ((n + 1) * (n - 1 + alpha))
    assert by_rule["first_price"]["expected_revenue"] == pytest.approx(fp, rel=1e-10)
    assert by_rule["descending"]["expected_revenue"] == pytest.approx(fp, rel=1e-10)
    assert by_rule["second_price"]["expected_revenue"] == pytest.approx((n - 1) / (n + 1), rel=1e-12)
    bids = reports.bid_strategy(U, "forward", n, None, at=[0.2, 0.5, 0.9], risk_aversion=rho)
    for v, got in zip([0.2, 0.5, 0.9], bids["bids"]):
        assert got == pytest.approx((n - 1) * v / (n - 1 + alpha), rel=1e-10)
    if rho > 0:
        assert rep["rule_comparison"]["best_for_auctioneer"] in ("first_price", "descending")
        assert rep["rule_comparison"]["difference"] == pytest.approx(fp - (n - 1) / (n + 1), rel=1e-8)


@pytest.mark.parametrize("n,rho,r", [(3, 0.5, 0.3), (5, 0.25, 0.6)])
def test_uniform_with_a_reserve(n, rho, r):
    alpha = mp.mpf(1) - mp.mpf(rho)
    rep = reports.revenue_report(U, "forward", n, r, 0.0, rules=["first_price", "descending"], risk_aversion=rho)
    want = _fp_revenue(n, alpha, r)
    for x in rep["results"]:
        assert x["expected_revenue"] == pytest.approx(float(want), rel=1e-10), x["rule"]
    bids = reports.bid_strategy(U, "forward", n, r, at=[0.7, 0.95], risk_aversion=rho)
    for v, got in zip([0.7, 0.95], bids["bids"]):
        assert got == pytest.approx(float(_bid(n, alpha, r, mp.mpf(v))), rel=1e-10)


@pytest.mark.parametrize("n,rho", [(2, 0.4), (3, 0.2), (4, 0.4)])
def test_the_optimal_first_price_reserve_falls_below_the_risk_neutral_one(n, rho):
    # The seller's payoff E[first-price revenue](r) (v0 = 0), maximised in mpmath; the risk-neutral
    # (Myerson 1981) reserve is 1/2 for uniform values, and under risk aversion the first-price
    # optimum lies below it (Krishna 2009, ch. 4, from memory; checked here against the mpmath optimum).
    alpha = mp.mpf(1) - mp.mpf(rho)
    k = mp.mpf(n - 1) / alpha
    a, b = k * n / ((k + 1) * (n + 1)), n / ((k + 1) * (n - k))

    def slope(r):  # the derivative of _fp_revenue in r, term by term
        return -a * (n + 1) * r ** n + b * ((k + 1) * r ** k - (n + 1) * r ** n)

    # (n, rho) = (4, 0.4): k = 5 = n + 1, the r^n terms cancel and the slope is b (k+1) r^k < 0: no reserve is best
    r_star = mp.findroot(slope, (mp.mpf("1e-6"), mp.mpf("0.95")), solver="bisect") if slope(mp.mpf("0.95")) * slope(
        mp.mpf("1e-6")) < 0 else mp.mpf(0)
    assert _fp_revenue(n, alpha, mp.mpf("0.3")) == pytest.approx(
        float(mp.quad(lambda v: _bid(n, alpha, 0.3, v) * n * v ** (n - 1), [0.3, 1])), rel=1e-20)
    rep = reserve.reserve_report(U, "forward", n, 0.0, risk_aversion=rho)
    by_rule = rep["optimal_reserve_by_rule"]
    assert by_rule["first_price"]["optimal_reserve"] == pytest.approx(float(r_star), abs=2e-6)
    assert by_rule["first_price"]["expected_revenue_at_optimum"] == pytest.approx(float(_fp_revenue(n, alpha, r_star)), rel=1e-10)
    assert by_rule["second_price"]["optimal_reserve"] == pytest.approx(0.5, abs=1e-9)
    assert float(r_star) < 0.5 and by_rule["descending"]["optimal_reserve"] == pytest.approx(float(r_star), abs=2e-6)


def test_bad_risk_aversion_is_named(client):
    for rho, field in [(1.0, "risk_aversion.crra"), (-0.1, "risk_aversion.crra")]:
        r = client.post("/v1/revenue", json={"bidder_values": UJSON, "bidders": 3, "risk_aversion": {"crra": rho}})
        assert r.status_code == 422 and field in [e["field"] for e in r.get_json()["errors"]]
    r = client.post("/v1/revenue", json={"bidder_values": UJSON, "bidders": 3, "risk_aversion": {"crra": 0.5},
                                         "rules": ["first_price", "all_pay"]})
    assert r.status_code == 422 and "rules.1" in [e["field"] for e in r.get_json()["errors"]]
    r = client.post("/v1/revenue", json={"bidder_values": UJSON, "bidders": 3, "risk_aversion": {"crra": 0.5}})
    assert r.status_code == 200 and [x["rule"] for x in r.get_json()["results"]] == ["first_price", "second_price", "ascending",
                                                                                     "descending"]


def test_doors_take_risk_aversion(client):
    want = 3 * 2 / (4 * (2 + 0.5))
    r = client.post("/v1/revenue", json={"bidder_values": UJSON, "bidders": 3, "risk_aversion": {"crra": 0.5},
                                         "rules": ["first_price"]})
    assert r.get_json()["results"][0]["expected_revenue"] == pytest.approx(want, rel=1e-10)
    q = client.get("/v1/quote?metric=expected_revenue&rule=first_price&family=uniform&low=0&high=1&bidders=3&risk_aversion=0.5")
    assert q.status_code == 200 and float(q.get_data(as_text=True)) == pytest.approx(want, rel=1e-10)
    b = client.post("/v1/bid-strategy", json={"bidder_values": UJSON, "bidders": 3, "risk_aversion": {"crra": 0.5}, "at": [0.5]})
    assert b.get_json()["bids"][0] == pytest.approx(2 * 0.5 / 2.5, rel=1e-10)
    rp = client.post("/v1/reserve-price", json={"bidder_values": UJSON, "bidders": 3, "risk_aversion": {"crra": 0.5}})
    assert rp.status_code == 200 and set(rp.get_json()["optimal_reserve_by_rule"]) == {"first_price", "second_price", "ascending",
                                                                                       "descending"}


def test_first_price_bids_of_risk_averse_bidders_are_inverted_with_the_rho_given(client):
    # Seeded simulation, tolerances stated: 600 auctions of 3 bidders with uniform [0, 1] values who
    # bid (n-1) v / (n-1+alpha) (rho = 0.5, alpha = 0.5: b = 0.8 v). With rho given, the pseudo-values
    # b + alpha G / ((n-1) g) (Campo, Guerre, Perrigne and Vuong 2011) are the values again, so the
    # recovered median is 1/2 within sampling error (sd of a median of 1,800 draws ~0.012; 0.04 allowed);
    # inverted as if risk-neutral they would be 1.2 v, a median near 0.6.
    import numpy as np

    rng = np.random.default_rng(11)
    values = rng.uniform(0.0, 1.0, (600, 3))
    auctions = [{"bidders": 3, "bids": (0.8 * v).tolist()} for v in values]
    body = {"rule": "first_price", "auctions": auctions, "confidence": {"replications": 0}}
    got = client.post("/v1/fits", json={**body, "risk_aversion": {"crra": 0.5}})
    assert got.status_code == 200, got.get_json()
    neutral = client.post("/v1/fits", json=body)

    def median(answer):
        model = answer.get_json()["bidder_values"]
        return _median_of(model)

    assert abs(median(got) - 0.5) < 0.04
    assert abs(median(neutral) - 0.6) < 0.04
    assert any("not learnt" in w for w in got.get_json()["warnings"])
    bad = client.post("/v1/fits", json={**body, "risk_aversion": {"crra": 0.5}, "families": ["uniform"]})
    assert bad.status_code == 422 and "families" in [e["field"] for e in bad.get_json()["errors"]]


def _median_of(model_json):
    from service.web.fields import build_value_model

    return float(build_value_model(model_json).ppf(0.5))
