"""POST /v1/sweeps and GET /v1/sweeps.csv.

Checks: Krishna's closed forms for uniform values (Auction Theory, 2nd ed., 2009,
ch. 2), Myerson's reserve 1/2 (1981) as the sweep's best reserve, and agreement
with /v1/revenue, whose five rules are computed separately and checked against
outside references in test_auctions_reference.py.
"""
import csv
import io
import re
from pathlib import Path

import numpy as np
import pytest

import api_reports as A
from service.core import rules as core_rules
from service.core import models as M

UNIFORM = {"family": "uniform", "low": 0, "high": 1}


def krishna(n, r):
    """Uniform [0, 1] revenue with n bidders and reserve r (Krishna 2009, ch. 2)."""
    r = min(max(r, 0.0), 1.0)
    return (n - 1) / (n + 1) + r**n - 2 * n * r ** (n + 1) / (n + 1)


def test_uniform_revenue_grid_is_krishna(client):
    body = {"bidder_values": UNIFORM, "bidders": {"from": 1, "to": 30, "step": 1},
            "reserves": {"from": -0.2, "to": 1.2, "steps": 29}, "rules": list(core_rules.names()), "metrics": ["expected_revenue"]}
    resp = client.post("/v1/sweeps", json=body)
    assert resp.status_code == 200
    table = resp.get_json()
    assert table["columns"] == ["bidders", "reserve", "rule", "expected_revenue"]
    assert len(table["rows"]) == 30 * 29 * 5
    for n, r, rule, rev in table["rows"]:
        # A lone bidder pays the reserve itself whenever it buys, even a reserve below the
        # support (the n = 1 case of b(v) = E[max(Y, r) | Y < v] with no rival: r).
        want = krishna(n, r) if n > 1 else r * (1 - max(min(r, 1.0), 0.0))
        assert rev == pytest.approx(want, rel=1e-9, abs=1e-14), (n, r, rule)


def test_best_reserve_on_the_grid_is_one_half(client):
    # Myerson 1981: uniform values on [0, 1], seller value 0: the optimal reserve is 1/2 whatever n.
    body = {"bidder_values": UNIFORM, "bidders": [2, 5, 20], "reserves": {"from": 0, "to": 1, "steps": 101},
            "rules": ["second_price"], "metrics": ["expected_revenue"]}
    rows = client.post("/v1/sweeps", json=body).get_json()["rows"]
    for n in (2, 5, 20):
        best = max((r for r in rows if r[0] == n), key=lambda r: r[3])
        assert best[1] == pytest.approx(0.5, abs=1e-12)


FAMILIES = [
    M.LogNormal(median=62000, sigma=0.35),
    M.Normal(100, 15),
    M.Gamma(30, 5200),
    M.Triangular(1, 3, 8),
    M.Mixture([(0.3, M.Normal(10, 2)), (0.7, M.Uniform(5, 20))]),
    M.QuantileTable([(0, 5), (0.1, 10), (0.5, 15), (0.9, 30), (1, 60)]),
    M.Pareto(1.2, 100.0),  # the top value has a mean, the second-price price no variance
    M.BetaValues(2.0, 3.0, 1e6, 1e6 + 1e-3),  # a spread a billion times smaller than the values
]
CASES = [(m, d) for m in FAMILIES for d in ("forward", "reverse")]
# only the prices' means and the bids' variance exist; reversed, its heavy tail is below and the
# bids without a reserve, from which every row of a sweep comes, do not exist for 2 bidders
CASES.append((M.Pareto(0.8, 100.0), "forward"))


@pytest.mark.parametrize("model,direction", CASES, ids=lambda x: x if isinstance(x, str) else x.family)
def test_sweep_agrees_with_single_scenarios(model, direction):
    """Every cell against /v1/revenue's own computation, 1e-8 relative where the figure is
    not negligible (above 1e-12 of the value scale)."""
    reserves = model.ppf(np.array([0.05, 0.3, 0.6, 0.95]))
    own = 0.0 if direction == "forward" else float(model.ppf(0.99))
    metrics = A.metrics(direction)[:5] + ["efficiency"]
    out = A.sweep(model, direction, [1, 2, 7, 60], reserves, list(core_rules.names()), metrics, own)
    scale = float(abs(model.ppf(0.5))) + 1.0
    for row in out["rows"]:
        n, r, rule = row[:3]
        ref = A.revenue_report(model, direction, n, r, own, [rule], [0.5])["results"][0]
        for name, got in zip(metrics, row[3:]):
            want = ref[name]
            if want is None:
                assert got is None, (n, r, rule, name)
                continue
            assert got == pytest.approx(want, rel=1e-8, abs=1e-12 * scale), (n, r, rule, name)


def test_csv_answers(client):
    body = {"bidder_costs": {"family": "gamma", "shape": 30, "scale": 5200}, "bidders": [3, 5],
            "reserves": [170000, 190000], "buyer_value": 210000, "rules": ["first_price"],
            "metrics": ["expected_payment", "probability_of_award"]}
    js = client.post("/v1/sweeps", json=body).get_json()
    resp = client.post("/v1/sweeps", json=body, headers={"Accept": "text/csv"})
    assert resp.status_code == 200 and resp.mimetype == "text/csv"
    rows = list(csv.reader(io.StringIO(resp.get_data(as_text=True))))
    assert rows[0] == js["columns"]
    for got, want in zip(rows[1:], js["rows"]):
        assert int(got[0]) == want[0] and float(got[1]) == want[1] and got[2] == want[2]
        assert [float(x) for x in got[3:]] == want[3:]  # full precision survives the CSV
    q = ("/v1/sweeps.csv?direction=reverse&family=gamma&shape=30&scale=5200&bidders=3,5&reserves=170000,190000"
         "&buyer_value=210000&rules=first_price&metrics=expected_payment,probability_of_award")
    assert client.get(q).get_data(as_text=True) == resp.get_data(as_text=True)


@pytest.mark.parametrize("body,field", [
    ({"bidders": {"from": 1, "to": 2000}, "reserves": {"from": 0, "to": 1, "steps": 1000}}, "bidders"),
    ({"bidders": {"from": 5, "to": 2}, "reserves": [0.5]}, "bidders.to"),
    ({"bidders": [2, 2.5], "reserves": [0.5]}, "bidders.1"),
    ({"bidders": [2], "reserves": {"from": 0, "to": 1, "steps": 0}}, "reserves.steps"),
    ({"bidders": [2], "reserves": "all"}, "reserves"),
    ({"bidders": [2], "reserves": [0.5], "metrics": ["expected_payment"]}, "metrics.0"),
    ({"bidders": [2], "reserves": [0.5], "rules": ["first_price", "first_price"]}, "rules"),
])
def test_sweep_errors_name_the_field(client, body, field):
    resp = client.post("/v1/sweeps", json={"bidder_values": UNIFORM, **body})
    assert resp.status_code == 422 and resp.mimetype == "application/problem+json"
    assert field in [e["field"] for e in resp.get_json()["errors"]]


def test_row_cap_refuses_before_work(client):
    body = {"bidder_values": UNIFORM, "bidders": {"from": 1, "to": 1000}, "reserves": {"from": 0, "to": 1, "steps": 1000},
            "rules": ["first_price"]}
    resp = client.post("/v1/sweeps", json=body)
    assert resp.status_code == 422
    assert "200000" in resp.get_json()["errors"][0]["message"]


def test_the_readme_table_formulas_answer(client):
    readme = (Path(__file__).resolve().parents[1] / "README.md").read_text()
    urls = re.findall(r'=(?:WEBSERVICE|IMPORTDATA)\("http://localhost:8000(/v1/sweeps\.csv\?[^"]+)"\)', readme)
    assert urls
    for url in urls:
        resp = client.get(url)
        assert resp.status_code == 200 and resp.mimetype == "text/csv", resp.get_data(as_text=True)
        rows = list(csv.reader(io.StringIO(resp.get_data(as_text=True))))
        assert rows[0][:3] == ["bidders", "reserve", "rule"] and len(rows) > 1
