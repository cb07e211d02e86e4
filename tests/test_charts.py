"""Charts (service/charts.py, service/web/charts.py): valid images of the asked size, whose
plotted points are the JSON routes' answers, with the textbook values they show checked
against their closed forms, and refusals that are never a 500 or a blank 200 image."""
import io
import math
import xml.etree.ElementTree as ET

import matplotlib.image
import numpy as np
import pytest

from service import create_app
from service.web import charts as web_charts

U01 = "family=uniform&low=0&high=1"
_U = {"family": "uniform", "low": 0, "high": 1}
QUERIES = {
    "top-values": f"{U01}&bidders=4",
    "joint-density": f"{U01}&bidders=4",
    "revenue-by-reserve": f"{U01}&bidders=3&seller_value=0",
    "revenue-by-bidders": f"{U01}&bidders=5&reserve=0",
    "bid-strategy": f"{U01}&bidders=3&rules=first_price,second_price",
}


@pytest.fixture(scope="module")
def client():
    return create_app().test_client()


def _svg_size(data):
    root = ET.fromstring(data)
    assert root.tag.endswith("svg")
    return float(root.get("width").removesuffix("pt")), float(root.get("height").removesuffix("pt"))


@pytest.mark.parametrize("chart", list(QUERIES))
def test_each_chart_is_a_valid_image_of_the_asked_size(client, chart):
    r = client.get(f"/v1/charts/{chart}.svg?{QUERIES[chart]}&width=640&height=400")
    assert r.status_code == 200 and r.mimetype == "image/svg+xml"
    w, h = _svg_size(r.data)
    assert (w, h) == pytest.approx((640 * 0.72, 400 * 0.72))  # matplotlib writes SVG sizes in points
    r = client.get(f"/v1/charts/{chart}.png?{QUERIES[chart]}&width=640&height=400")
    assert r.status_code == 200 and r.mimetype == "image/png"
    pixels = matplotlib.image.imread(io.BytesIO(r.data), format="png")
    assert pixels.shape[:2] == (400, 640)
    assert pixels.std() > 0.01  # something is drawn, not a blank canvas


def _series(client, chart, query):
    r = client.get(f"/v1/charts/{chart}.svg?{query}", headers={"Accept": "application/json"})
    assert r.status_code == 200, r.get_data(as_text=True)
    return r.get_json()["series"]


def test_top_values_plots_the_json_route_and_marks_the_textbook_means(client):
    """The curves are /v1/top-values' own; the means of the top two of n uniform values on [0, 1]
    are n/(n + 1) and (n - 1)/(n + 1) (David and Nagaraja, Order Statistics, 2003, ch. 2)."""
    s = _series(client, "top-values", f"{U01}&bidders=4")
    ref = client.post("/v1/top-values", json={"bidder_values": _U, "bidders": 4, "curve_points": 201,
                                              "ranks": [1, 2], "quantiles": []}).get_json()
    for res in ref["results"]:
        got = s[f"rank{res['rank']}"]
        assert got["x"] == res["curve"]["x"] and got["pdf"] == res["curve"]["pdf"]
    assert s["rank1"]["mean"] == pytest.approx(4 / 5, abs=1e-12)
    assert s["rank2"]["mean"] == pytest.approx(3 / 5, abs=1e-12)


def test_revenue_by_reserve_plots_the_revenue_route_and_myersons_reserve(client):
    """Each point is /v1/revenue at that reserve; with three uniform bidders on [0, 1] the expected
    revenue at reserve r is R(r) = n int_r^1 (2v - 1) v^(n-1) dv = 1/2 + r^3 - 3 r^4 / 2 for n = 3
    (Myerson 1981; Krishna, Auction Theory, 2009, ch. 2.5), and with no own value the optimal
    reserve is 1/2 (Myerson 1981)."""
    s = _series(client, "revenue-by-reserve", f"{U01}&bidders=3&seller_value=0&reserves_from=0&reserves_to=0.9&reserves_steps=10")
    assert s["optimum"] == pytest.approx(0.5, abs=1e-9)
    for rule in ("first_price", "second_price"):
        for r, mean in zip(s["x"], s["rules"][rule]["mean"]):
            assert mean == pytest.approx(0.5 + r**3 - 1.5 * r**4, abs=1e-9)
    r = s["x"][4]
    ref = client.post("/v1/revenue", json={"bidder_values": _U, "bidders": 3, "reserve": r, "seller_value": 0,
                                           "rules": ["first_price", "second_price"], "quantiles": [0.05, 0.95]}).get_json()
    for res in ref["results"]:
        got = s["rules"][res["rule"]]
        assert got["mean"][4] == res["expected_revenue"]
        assert [got["p05"][4], got["p95"][4]] == [q["value"] for q in res["revenue_quantiles"]]


def test_revenue_by_bidders_is_revenue_equivalence(client):
    """Uniform values on [0, 1], no reserve: both rules raise (n - 1)/(n + 1) with n bidders
    (revenue equivalence; Krishna 2009, ch. 3)."""
    s = _series(client, "revenue-by-bidders", f"{U01}&bidders_from=2&bidders_to=9&reserve=0")
    assert s["x"] == list(range(2, 10))
    for rule in ("first_price", "second_price"):
        assert s["rules"][rule]["mean"] == pytest.approx([(n - 1) / (n + 1) for n in s["x"]], abs=1e-9)


def test_bid_strategy_plots_the_route_and_the_uniform_closed_form(client):
    """First-price bids of n uniform bidders on [0, 1] are (n - 1) v / n (Krishna 2009, ch. 2);
    second price bids the value."""
    s = _series(client, "bid-strategy", f"{U01}&bidders=3&rules=first_price,second_price&points=11")
    ref = client.post("/v1/bid-strategy", json={"bidder_values": _U, "bidders": 3, "points": 11}).get_json()
    assert s["first_price"]["bids"] == ref["bids"]
    assert s["first_price"]["bids"] == pytest.approx([2 * v / 3 for v in s["first_price"]["values"]], abs=1e-9)
    assert s["second_price"]["bids"] == pytest.approx(s["second_price"]["values"], abs=1e-12)


def test_joint_density_plots_the_route_and_its_closed_form(client):
    """The joint density of the top two of n uniform values is n (n - 1) y^(n - 2) for y < x
    (David and Nagaraja 2003, ch. 2.2)."""
    s = _series(client, "joint-density", f"{U01}&bidders=4")
    ref = client.post("/v1/top-values/joint-density", json={"bidder_values": _U, "bidders": 4, "grid_points": 81}).get_json()
    assert s["density"] == ref["density"]
    hi, lo, dens = np.array(s["higher"]), np.array(s["lower"]), np.array(s["density"])
    i, j = 60, 30
    assert lo[j] < hi[i] and dens[i, j] == pytest.approx(12 * lo[j] ** 2, rel=1e-9)


def test_the_drawn_lines_are_the_kept_points():
    """What the figure holds is what ``series`` says was plotted."""
    app = create_app()
    with app.test_request_context():
        drawn = web_charts.CHARTS["bid-strategy"]({"bidder_values": _U, "bidders": 3, "points": 21,
                                                   "rules": ["first_price"]}, {"width": 720, "height": 450, "currency": None})
    line = drawn.figure.axes[0].lines[1]
    assert list(line.get_xdata()) == drawn.series["first_price"]["values"]
    assert list(line.get_ydata()) == drawn.series["first_price"]["bids"]


def test_fit_chart_draws_the_prices_against_each_models_price_distribution(client):
    """The prices' empirical distribution, and each fitted model's distribution of the price (the
    second-highest of n values, its CDF I_F(n - 1, 2), David and Nagaraja 2003, ch. 2) mixed over
    the records' bidder counts: checked at every plotted point with scipy's regularised beta."""
    from scipy import special, stats

    records = [{"bidders": 4, "price": 71}, {"bidders": 5, "price": 78}, {"bidders": 3, "price": 66},
               {"bidders": 6, "price": 83}, {"bidders": 4, "price": 69}, {"bidders": 5, "price": 80}]
    r = client.post("/v1/charts/fit", json={"rule": "ascending", "families": ["lognormal"], "auctions": records})
    assert r.status_code == 200, r.get_data(as_text=True)
    s = r.get_json()["series"]
    assert s["observed"] == sorted(p["price"] for p in records)
    fitted = client.post("/v1/fits", json={"rule": "ascending", "families": ["lognormal"], "auctions": records,
                                           "confidence": {"replications": 0}}).get_json()
    m = next(c["model"] for c in fitted["candidates"] if c["model"]["family"] == "lognormal")
    value = stats.lognorm(m["sigma"], scale=m["median"])
    counts = [a["bidders"] for a in records]
    line = s["models"]["lognormal"]
    for x, p in zip(line["value"], line["p"]):
        implied = np.mean([special.betainc(n - 1, 2, value.cdf(x)) for n in counts])
        assert implied == pytest.approx(p, abs=1e-8)
    body = {"rule": "ascending", "families": ["lognormal"], "auctions": records}
    r = client.post("/v1/charts/fit?width=500&height=300", headers={"Accept": "image/svg+xml"}, json=body)
    assert r.status_code == 200 and r.mimetype == "image/svg+xml" and _svg_size(r.data) == pytest.approx((360, 216))
    r = client.post("/v1/charts/fit?width=500&height=300", headers={"Accept": "image/png"}, json=body)
    assert r.status_code == 200 and matplotlib.image.imread(io.BytesIO(r.data), format="png").shape[:2] == (300, 500)
    r = client.get(f"/v1/charts/fit.svg?{U01}&bidders=3", headers={"Accept": "application/json"})
    assert r.status_code == 422 and "chart" in [e["field"] for e in r.get_json()["errors"]]


_GROUPS = "group1_name=a&group1_count=1&group1_family=uniform&group1_low=0&group1_high=1&" \
          "group2_name=b&group2_count=2&group2_family=uniform&group2_low=0&group2_high=1"


def test_group_charts_plot_the_group_routes(client):
    """Bidder groups drawn: alike groups are the symmetric auction, so with three uniform bidders
    on [0, 1] in all the first-price bid is 2v/3 and the revenue at reserve r is
    1/2 + r^3 - 3 r^4 / 2 (Krishna 2009, ch. 2), and each point is the group route's own answer."""
    s = _series(client, "bid-strategy", f"{_GROUPS}&rules=first_price&points=11")
    for name in ("a", "b"):
        line = s[f"first_price/{name}"]
        assert line["bids"] == pytest.approx([2 * v / 3 for v in line["values"]], abs=1e-7)
    s = _series(client, "revenue-by-reserve", f"{_GROUPS}&rules=first_price,second_price&reserves=0,0.3,0.6")
    for rule in ("first_price", "second_price"):
        assert s["rules"][rule]["mean"] == pytest.approx([0.5 + r**3 - 1.5 * r**4 for r in s["x"]], abs=1e-7)
    body = {"bidder_groups": [{"name": "a", "count": 1, "bidder_values": _U}, {"name": "b", "count": 2, "bidder_values": _U}],
            "reserve": 0.3, "rules": ["first_price", "second_price"]}
    ref = client.post("/v1/revenue", json=body).get_json()
    assert [s["rules"][r["rule"]]["mean"][1] for r in ref["results"]] == [r["expected_revenue"] for r in ref["results"]]
    # across groups the chart draws the distribution functions: here the top two of three uniform
    # values, x^3 and 3x^2 - 2x^3 (David and Nagaraja 2003, ch. 2)
    s = _series(client, "top-values", _GROUPS)
    for x, p in zip(s["rank1"]["value"], s["rank1"]["p"]):
        assert x**3 == pytest.approx(p, abs=1e-8)
    for x, p in zip(s["rank2"]["value"], s["rank2"]["p"]):
        assert 3 * x**2 - 2 * x**3 == pytest.approx(p, abs=1e-8)
    r = client.get(f"/v1/charts/revenue-by-bidders.svg?{_GROUPS}", headers={"Accept": "application/json"})
    assert r.status_code == 422


def test_fit_chart_draws_first_price_bids_against_each_models_bids(client):
    """First-price bids of the most frequent bidder count against each model's bid distribution:
    at each plotted point the model's value at quantile p bids b(v) = v - int_0^v F^(n-1) / F(v)^(n-1)
    (Krishna 2009, ch. 2), computed here with scipy's quad."""
    from scipy import integrate, stats

    bids = [[31, 44, 38, 52], [29, 41, 47, 35], [36, 33, 49, 40], [27, 45, 39, 51], [34, 42, 30, 46], [37, 48, 32, 43]]
    records = [{"bidders": 4, "bids": b} for b in bids] + [{"bidders": 3, "bids": [30, 40, 35]}]
    body = {"rule": "first_price", "families": ["lognormal"], "auctions": records}
    s = client.post("/v1/charts/fit", json=body).get_json()["series"]
    assert s["observed"] == sorted(x for b in bids for x in b) and s["of"] == "bids (auctions of 4 bidders)"
    fitted = client.post("/v1/fits", json={**body, "confidence": {"replications": 0}}).get_json()
    m = next(c["model"] for c in fitted["candidates"] if c["model"]["family"] == "lognormal")
    F = stats.lognorm(m["sigma"], scale=m["median"])
    line = s["models"]["lognormal"]
    for p, b in list(zip(line["p"], line["value"]))[::20]:
        v = F.ppf(p)
        ref = v - integrate.quad(lambda t: F.cdf(t) ** 3, 0, v, epsabs=1e-13, epsrel=1e-12)[0] / F.cdf(v) ** 3
        assert b == pytest.approx(ref, rel=1e-7)


def test_post_chart_takes_the_owning_routes_body(client):
    body = {"bidder_costs": {"family": "uniform", "low": 40, "high": 100}, "bidders": 4}
    r = client.post("/v1/charts/top-values?currency=EUR", json=body, headers={"Accept": "image/png"})
    assert r.status_code == 200 and r.mimetype == "image/png"
    r = client.post("/v1/charts/top-values", json=body, headers={"Accept": "application/json"})
    s = r.get_json()["series"]
    # the lowest of four costs uniform on [40, 100]: 40 + 60/5; the second lowest 40 + 2 x 60/5
    assert s["rank1"]["mean"] == pytest.approx(52.0, abs=1e-9) and s["rank2"]["mean"] == pytest.approx(64.0, abs=1e-9)


@pytest.mark.parametrize("path, field", [
    (f"/v1/charts/top-values.svg?{U01}&bidders=0", "bidders"),
    ("/v1/charts/top-values.svg?family=uniform&low=1&high=0&bidders=3", "high"),
    ("/v1/charts/top-values.svg?family=plaid&bidders=3", "family"),
    (f"/v1/charts/top-values.svg?{U01}&bidders=3&width=99999", "width"),
    (f"/v1/charts/top-values.svg?{U01}&bidders=3&height=12.5", "height"),
    (f"/v1/charts/top-values.svg?{U01}&bidders=3&currency=%3Cscript%3E", "currency"),
    (f"/v1/charts/top-values.svg?{U01}&bidders=3&colour=red", "colour"),
    (f"/v1/charts/revenue-by-reserve.png?{U01}&bidders=3&reserves_from=0&reserves_to=1&reserves_steps=0", "reserves_steps"),
    (f"/v1/charts/bid-strategy.png?{U01}&bidders=3&rules=sealed", "rules"),
    (f"/v1/charts/revenue-by-bidders.svg?{U01}&bidders_from=3&bidders_to=2", "bidders_to"),
])
def test_bad_input_is_a_4xx_naming_the_parameter(client, path, field):
    r = client.get(path, headers={"Accept": "application/json"})
    assert r.status_code == 422 and r.mimetype == "application/problem+json"
    assert field in [e["field"] for e in r.get_json()["errors"]]
    r = client.get(path)  # an image caller: a picture that says why, with the same status
    assert r.status_code == 422 and r.mimetype.startswith("image/")
    if r.mimetype == "image/svg+xml":
        assert field in r.get_data(as_text=True)


def test_unknown_chart_or_format_is_a_404(client):
    r = client.get(f"/v1/charts/pie.svg?{U01}&bidders=3", headers={"Accept": "application/json"})
    assert r.status_code == 404 and r.mimetype == "application/problem+json"
    r = client.get(f"/v1/charts/top-values.gif?{U01}&bidders=3")
    assert r.status_code == 404
    r = client.post("/v1/charts/top-values", data="{", content_type="application/json", headers={"Accept": "application/json"})
    assert r.status_code == 400


def test_amount_labels_separate_thousands():
    from service.charts import amount
    assert amount(1234567.0) == "1,234,567" and amount(2.5) == "2.50" and amount(12.26, "EUR") == "12.3 EUR"
    assert amount(math.inf) == ""
