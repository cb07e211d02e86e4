"""Adding an auction rule is one registration: a toy rule registered in-process appears in
the revenue report, the bid strategy, sweeps and the request schemas with no other edit;
an unknown rule is refused, never priced as another."""
from __future__ import annotations

import pytest

from service import create_app
import api_reports as A
from service.core import revenue
from service.core import models as M
from service.core import rules as R
from service.core.errors import ParameterError

UNIFORM = {"family": "uniform", "low": 0, "high": 1}


@pytest.fixture()
def toy_rule():
    """A sealed-bid second-price rule under its own name: the second-price pricing and route."""
    rule = R.register(R.AuctionRule("sealed_vickrey", R.SECOND, revenue.second_price_revenue,
                                    {"forward": "bid your value", "reverse": "ask your cost"}))
    yield rule
    R.unregister(rule.name)


def test_a_registered_rule_is_in_every_report_and_schema(toy_rule):
    client = create_app().test_client()
    n = 5
    out = client.post("/v1/revenue", json={"bidder_values": UNIFORM, "bidders": n}).get_json()
    by_rule = {r["rule"]: r for r in out["results"]}
    assert list(by_rule) == list(R.names()) and "sealed_vickrey" in by_rule
    # Uniform values on [0, 1]: E[X_(n-1:n)] = (n - 1)/(n + 1) (David and Nagaraja 2003, section 2.1)
    assert by_rule["sealed_vickrey"]["expected_revenue"] == pytest.approx((n - 1) / (n + 1), rel=1e-13)
    assert by_rule["sealed_vickrey"]["revenue_sd"] == by_rule["second_price"]["revenue_sd"]
    bids = client.post("/v1/bid-strategy", json={"bidder_values": UNIFORM, "bidders": n, "rule": "sealed_vickrey",
                                                 "at": [0.25, 0.5]}).get_json()
    assert bids["bids"] == [0.25, 0.5] and bids["note"] == "bid your value"
    table = client.post("/v1/sweeps", json={"bidder_values": UNIFORM, "bidders": [n], "reserves": [0.0],
                                            "rules": ["sealed_vickrey"], "metrics": ["expected_revenue"]}).get_json()
    assert table["rows"][0][3] == pytest.approx((n - 1) / (n + 1), rel=1e-12)
    quote = client.get(f"/v1/quote?metric=expected_revenue&rule=sealed_vickrey&bidders={n}&family=uniform&low=0&high=1")
    assert float(quote.get_data(as_text=True)) == pytest.approx((n - 1) / (n + 1), rel=1e-13)


def test_an_unknown_rule_is_refused_by_name():
    client = create_app().test_client()
    resp = client.post("/v1/revenue", json={"bidder_values": UNIFORM, "bidders": 3, "rules": ["second_price", "dutch_auction"]})
    assert resp.status_code == 422 and resp.get_json()["errors"][0]["field"] == "rules.1"
    with pytest.raises(ParameterError, match="one of"):
        A.revenue_report(M.Uniform(0, 1), "forward", 3, rules=["dutch_auction"])
