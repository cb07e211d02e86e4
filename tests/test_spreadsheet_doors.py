"""The GET doors as spreadsheets use them: decimal marks, inline errors, lists that cannot
be misread, one vocabulary across doors, and the downloadable workbook. The figures
themselves are checked against references elsewhere; where a figure is asserted here it
is against the JSON API for the same inputs, scipy or mpmath, named beside the check."""
from __future__ import annotations

import csv
import io
import json
import re
import zipfile

import mpmath as mp
import pytest
import scipy.integrate as si
import scipy.stats as st

QUOTE = ("/v1/quote?metric=expected_revenue&rule=first_price&bidders=6&reserve=45000"
         "&family=lognormal&median=62000&sigma={sigma}")


def text(resp):
    return resp.get_data(as_text=True)


def json_value(client, url):
    resp = client.get(url, headers={"Accept": "application/json"})
    assert resp.status_code == 200, text(resp)
    return resp.get_json()["value"]


def test_a_comma_decimal_quote_reads_and_writes_commas(client):
    want = json_value(client, QUOTE.format(sigma="0.35"))
    resp = client.get(QUOTE.format(sigma="0,35") + "&decimal=,")
    assert resp.status_code == 200 and text(resp) == repr(want).replace(".", ",")


@pytest.mark.parametrize("sigma,decimal,says", [("0,35", ".", "set decimal=,"), ("0.35", ",", "write the decimal mark as ','")])
def test_a_number_in_the_other_decimal_mark_is_refused_by_name(client, sigma, decimal, says):
    resp = client.get(QUOTE.format(sigma=sigma) + f"&decimal={decimal}")
    assert resp.status_code == 422 and text(resp).startswith("error: sigma: ") and says in text(resp)


def test_inline_errors_answer_200_with_the_line_and_default_errors_stay_422(client):
    bad = QUOTE.format(sigma="-1")
    assert client.get(bad).status_code == 422
    resp = client.get(bad + "&errors=inline")
    assert resp.status_code == 200 and resp.mimetype == "text/plain" and text(resp).startswith("error: sigma: ")
    csv_bad = "/v1/sweeps.csv?family=uniform&low=0&high=1&bidders=2&reserves_from=0&reserves_to=1&reserves_steps=0&errors=inline"
    resp = client.get(csv_bad)
    assert resp.status_code == 200 and text(resp).startswith("error: reserves_steps: ")


@pytest.mark.parametrize("name,says", [("sigam", "did you mean 'sigma'?"), ("Sigma", "lower case: write 'sigma'"),
                                       ("reserves_stpes", "did you mean 'reserves_steps'?")])
def test_an_unknown_name_gets_the_closest_known_one(client, name, says):
    url = QUOTE.format(sigma="0.35").replace("sigma=0.35", f"{name}=0.35")
    if name.startswith("reserves"):
        url = "/v1/sweeps.csv?family=uniform&low=0&high=1&bidders=2&reserves=0.5&reserves_stpes=3"
    resp = client.get(url)
    assert resp.status_code == 422 and f"error: {name}: " in text(resp) and says in text(resp)


@pytest.mark.parametrize("reserves", ["30000,40,000", "30000,040000", "1,050"])
def test_a_thousands_group_in_a_list_is_refused_not_split(client, reserves):
    resp = client.get(f"/v1/sweeps.csv?family=uniform&low=0&high=100000&bidders=2&reserves={reserves}")
    assert resp.status_code == 422 and text(resp).startswith("error: reserves: ") and "thousands separator" in text(resp)


def test_rule_and_rules_work_on_both_doors(client):
    one = QUOTE.format(sigma="0.35")
    assert text(client.get(one)) == text(client.get(one.replace("rule=", "rules=")))
    two = client.get(one.replace("rule=first_price", "rules=first_price,all_pay"))
    assert two.status_code == 422 and "error: rules: " in text(two)
    base = "/v1/sweeps.csv?family=uniform&low=0&high=1&bidders=2&reserves=0.5"
    assert text(client.get(base + "&rule=first_price")) == text(client.get(base + "&rules=first_price"))


def _rows(client, url):
    resp = client.get(url)
    assert resp.status_code == 200, text(resp)
    return list(csv.reader(io.StringIO(text(resp))))


def test_step_and_steps_on_both_axes(client):
    base = "/v1/sweeps.csv?family=uniform&low=0&high=1&rules=second_price"
    by_steps = _rows(client, base + "&bidders_from=2&bidders_to=8&bidders_steps=4&reserves_from=0&reserves_to=0.5&reserves_steps=3")
    by_step = _rows(client, base + "&bidders_from=2&bidders_to=8&bidders_step=2&reserves_from=0&reserves_to=0.5&reserves_step=0.25")
    assert by_steps == by_step and [r[0] for r in by_steps[1::3]] == ["2", "4", "6", "8"]
    assert [float(r[1]) for r in by_steps[1:4]] == [0.0, 0.25, 0.5]
    uneven = client.get(base + "&bidders_from=2&bidders_to=8&bidders_steps=5&reserves=0.5")
    assert uneven.status_code == 422 and text(uneven).startswith("error: bidders_steps: ")
    body = {"bidder_values": {"family": "uniform", "low": 0, "high": 1}, "rules": ["second_price"],
            "bidders": {"from": 2, "to": 8, "steps": 4}, "reserves": {"from": 0, "to": 0.5, "step": 0.25}}
    table = client.post("/v1/sweeps", json=body).get_json()
    assert [[str(r[0]), repr(r[1])] for r in table["rows"]] == [r[:2] for r in by_steps[1:]]


def test_a_comma_decimal_csv_holds_the_json_sweeps_numbers(client):
    url = ("/v1/sweeps.csv?family=lognormal&median=62000&sigma=0,35&bidders=2;6&reserves=40000;45000,5"
           "&rules=second_price&metrics=expected_revenue,probability_of_sale&decimal=,")
    resp = client.get(url)
    rows = list(csv.reader(io.StringIO(text(resp)), delimiter=";"))
    body = {"bidder_values": {"family": "lognormal", "median": 62000, "sigma": 0.35}, "bidders": [2, 6], "reserves": [40000, 45000.5],
            "rules": ["second_price"], "metrics": ["expected_revenue", "probability_of_sale"]}
    want = client.post("/v1/sweeps", json=body).get_json()["rows"]
    assert rows[0] == ["bidders", "reserve", "rule", "expected_revenue", "probability_of_sale"]
    assert [[int(r[0])] + [float(x.replace(",", ".")) for x in (r[1], r[3], r[4])] for r in rows[1:]] == \
        [[r[0], r[1], r[3], r[4]] for r in want]
    assert _rows(client, url.replace("decimal=,", "decimal=,&separator=tab")) != rows  # tab-separated is another file


def test_top_values_of_costs_count_ranks_from_the_lowest(client):
    # E[lowest of 5] = int S^5 dx and E[second-lowest - lowest] = int 5 F S^4 dx for costs >= 0
    # (David and Nagaraja 2003, section 2.1, by parts), by scipy.integrate.quad on scipy.stats.gamma.
    cost = st.gamma(30, scale=5200)
    lowest = si.quad(lambda x: cost.sf(x) ** 5, 0, 5e5, limit=200)[0]
    gap = si.quad(lambda x: 5 * cost.cdf(x) * cost.sf(x) ** 4, 0, 5e5, limit=200)[0]
    body = json.load(open("fixtures/millbrook_reverse/top-values.json"))
    out = client.post("/v1/top-values", json=body).get_json()
    assert out["ranks_counted_from"] == "lowest" and [r["rank"] for r in out["results"]] == [1, 2]
    assert out["results"][0]["mean"] == pytest.approx(lowest, rel=1e-9)
    assert out["expected_gap"] == pytest.approx(gap, rel=1e-8)
    qs = out["results"][0]["quantiles"]
    assert [q["p"] for q in qs] == [0.05, 0.5, 0.95] and qs[0]["value"] < qs[1]["value"] < qs[2]["value"]
    # the lowest cost's median: P(C1 <= x) = 1 - S^5 = 1/2
    assert qs[1]["value"] == pytest.approx(cost.isf(0.5 ** (1 / 5)), rel=1e-9)
    quote = "/v1/quote?metric=expected_gap&direction=reverse&bidders=5&family=gamma&shape=30&scale=5200"
    assert json_value(client, quote) == pytest.approx(gap, rel=1e-8)


@pytest.mark.parametrize("n,v0", [(3, 0.0), (5, 0.4)])
def test_the_reserve_answer_carries_the_payoff_it_maximises_with_and_without_a_reserve(client, n, v0):
    # Uniform values on [0, 1]: the payoff with reserve r is E[psi(X1); X1 >= r] + v0 r^n, psi(x) = 2x - 1
    # (Myerson 1981; Krishna 2009, ch. 2), maximised at r* = (1 + v0)/2; integrated here by mpmath.
    def payoff(r):
        return mp.quad(lambda x: (2 * x - 1) * n * x ** (n - 1), [r, 1]) + v0 * mp.mpf(r) ** n

    out = client.post("/v1/reserve-price", json={"bidder_values": {"family": "uniform", "low": 0, "high": 1}, "bidders": n,
                                                 "seller_value": v0}).get_json()
    assert out["optimal_reserve"] == pytest.approx((1 + v0) / 2, rel=1e-12)
    assert out["expected_payoff_at_optimum"] == pytest.approx(float(payoff((1 + v0) / 2)), rel=1e-12)
    assert out["expected_payoff_without_reserve"] == pytest.approx(float(payoff(0)), rel=1e-12)


def test_reverse_answers_state_their_assumptions_about_costs(client):
    body = {"bidder_costs": {"family": "gamma", "shape": 30, "scale": 5200}, "bidders": 5}
    for path in ("/v1/revenue", "/v1/bid-strategy", "/v1/reserve-price"):
        assumptions = client.post(path, json={**body, "buyer_value": 210000} if "reserve" in path else body).get_json()["assumptions"]
        assert "costs" in assumptions[0] and "values" not in " ".join(assumptions)


def test_a_405_names_the_method_and_the_body_and_a_text_caller_gets_a_line(client):
    resp = client.get("/v1/revenue")
    assert resp.status_code == 405 and "POST with a JSON body" in resp.get_json()["detail"]
    resp = client.post("/v1/quote", headers={"Accept": "text/plain"})
    assert resp.status_code == 405 and resp.mimetype == "text/plain" and text(resp).startswith("error: Method Not Allowed: ")
    assert "GET with the inputs as query parameters" in text(resp)


def _cells(content):
    """{(row, col): text or number} of the workbook's only sheet, and the formulas by row."""
    rows = re.findall(r"<table:table-row>(.*?)</table:table-row>", content)
    values, formulas = {}, {}
    for i, row in enumerate(rows, start=1):
        for j, cell in enumerate(re.findall(r"<table:table-cell[^>]*?(?:/>|>.*?</table:table-cell>)", row)):
            if "table:formula=" in cell:
                formulas[i] = re.search(r"table:formula='([^']*)'", cell).group(1).replace("&amp;", "&")
            elif 'office:value-type="float"' in cell:
                values[i, j] = re.search(r'office:value="([^"]*)"', cell).group(1)
            else:
                values[i, j] = re.search(r"<text:p>(.*?)</text:p>", cell).group(1)
    return values, formulas


@pytest.mark.parametrize("decimal", [".", ","])
def test_the_workbook_formulas_fetch_what_the_json_api_answers(client, decimal):
    resp = client.get("/v1/workbook.ods", base_url="http://sheets.example:8000")
    z = zipfile.ZipFile(io.BytesIO(resp.data))
    first = z.infolist()[0]
    assert first.filename == "mimetype" and first.compress_type == zipfile.ZIP_STORED
    assert z.read("mimetype") == b"application/vnd.oasis.opendocument.spreadsheet"
    values, formulas = _cells(z.read("content.xml").decode())
    assert len(formulas) == 5
    for formula in formulas.values():
        # Evaluate the concatenation as the sheet does: each [.Bk] becomes the cell's text in
        # the sheet's decimal mark, and MID(1/2;2;1) that mark.
        m = re.fullmatch(r'of:=VALUE\(COM\.MICROSOFT\.WEBSERVICE\((.*)\)\)', formula)
        url = ""
        for part in re.findall(r'"[^"]*"|\[\.B\d+\]|MID\(1/2;2;1\)', m.group(1)):
            if part.startswith('"'):
                url += part.strip('"')
            elif part == "MID(1/2;2;1)":
                url += decimal
            else:
                row = int(re.fullmatch(r"\[\.B(\d+)\]", part).group(1))
                url += values[row, 1].replace(".", decimal)
        assert url.startswith("http://sheets.example:8000/v1/quote?")
        got = client.get(url[len("http://sheets.example:8000"):])
        assert got.status_code == 200, text(got)
        plain = url.replace(f"decimal={decimal}", "decimal=.").replace("sigma=0,35", "sigma=0.35")
        assert float(text(got).replace(",", ".")) == json_value(client, plain[len("http://sheets.example:8000"):])


def test_a_range_whose_step_is_too_fine_to_count_is_refused(client):
    body = {"bidder_values": {"family": "uniform", "low": 0, "high": 1}, "bidders": [2],
            "reserves": {"from": 0.0, "step": 5e-324, "to": 7.7e15}}
    resp = client.post("/v1/sweeps", json=body)
    assert resp.status_code == 422 and resp.get_json()["errors"][0]["field"] == "reserves.step"


def test_top_values_of_step_costs_count_from_the_lowest(client):
    # With one atom each, the k-th lowest of n costs from a step model over sorted atoms
    # a_1 < ... < a_N takes a_i with P(U_(k) in ((i-1)/N, i/N]), U_(k) ~ Beta(k, n - k + 1)
    # (David and Nagaraja 2003, section 2.3); scipy.stats.beta gives the reference.
    atoms = [3.0, 5.0, 8.0, 13.0, 21.0]
    n = 3
    out = client.post("/v1/top-values", json={"bidder_costs": {"family": "empirical", "sample": atoms, "smoothing": "none"},
                                              "bidders": n, "ranks": [1, 2]}).get_json()
    for k, r in zip((1, 2), out["results"]):
        u = st.beta(k, n - k + 1)
        want = sum(a * (u.cdf((i + 1) / 5) - u.cdf(i / 5)) for i, a in enumerate(atoms))
        assert r["mean"] == pytest.approx(want, rel=1e-12)
