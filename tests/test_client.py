"""service/client.py against a live gunicorn, and the demo fixtures against the app.

The server is the venv's gunicorn on a free loopback port, started here and
killed at teardown. Figures are checked against closed forms for values uniform
on [0, 1]; each check names its source. Retries are exercised through requests
transport adapters: one sends the first attempt to a port nothing listens on,
another answers 503 a given number of times. The fixtures are invented demo
data: they are only checked to be accepted, never used as check values.
"""
from __future__ import annotations

import csv
import json
import socket
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
import requests
from requests.adapters import HTTPAdapter

from service.client import BidstatsClient, BidstatsError, sweep_records

ROOT = Path(__file__).resolve().parents[1]
FIXTURES = ROOT / "fixtures"
SCENARIOS = ("harrowgate_forward", "millbrook_reverse")
ROUTES = {"top-values": "/v1/top-values", "joint-density": "/v1/top-values/joint-density",
          "revenue": "/v1/revenue", "bid-strategy": "/v1/bid-strategy", "reserve-price": "/v1/reserve-price",
          "batch": "/v1/batch", "sweeps": "/v1/sweeps", "fits": "/v1/fits"}
UNIFORM = {"family": "uniform", "low": 0, "high": 1}
RULES = ["first_price", "second_price", "ascending", "descending", "all_pay"]


def _free_port():
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _dead_port():
    """A loopback port with nothing listening: bound, then released."""
    return _free_port()


@pytest.fixture(scope="module")
def server():
    port = _free_port()
    gunicorn = Path(sys.executable).parent / "gunicorn"
    proc = subprocess.Popen([str(gunicorn), "--bind", f"127.0.0.1:{port}", "--workers", "1", "service:create_app()"],
                            cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    url = f"http://127.0.0.1:{port}"
    try:
        deadline = time.monotonic() + 60
        while True:
            if proc.poll() is not None:
                pytest.fail(f"gunicorn exited with {proc.returncode}: {proc.stderr.read().decode(errors='replace')}")
            try:
                if requests.get(url + "/healthz", timeout=5).status_code == 200:
                    break
            except requests.RequestException:  # refused, or accepted before a worker is up
                pass
            if time.monotonic() > deadline:
                pytest.fail("gunicorn did not answer /healthz within 60 s")
            time.sleep(0.1)
        yield {"url": url, "port": port}
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=15)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()
        proc.stderr.close()


@pytest.fixture()
def bs(server, monkeypatch):
    monkeypatch.delenv("BIDSTATS_API_KEY", raising=False)
    with BidstatsClient(server["url"], timeout=30.0) as c:
        yield c


def _has_sweeps(bs):
    try:
        bs.sweeps()
    except BidstatsError as err:
        return err.status not in (404, 405)
    return True


# -- the module itself ------------------------------------------------------------

def test_client_module_imports_neither_flask_nor_the_core():
    # Loaded by path, so the package __init__ (which builds the Flask app) is not run.
    code = (
        "import importlib.util, sys\n"
        f"spec = importlib.util.spec_from_file_location('bidstats_client', {str(ROOT / 'service' / 'client.py')!r})\n"
        "mod = importlib.util.module_from_spec(spec); spec.loader.exec_module(mod)\n"
        "bad = sorted(m for m in sys.modules if m.split('.')[0] in ('flask', 'werkzeug', 'marshmallow', 'numpy', 'scipy')"
        " or m.startswith('service'))\n"
        "print(','.join(bad))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""


# -- one test per method, against the live server ---------------------------------

def test_health(bs):
    assert bs.health() == {"status": "ok"}


def test_openapi(bs):
    text = bs.openapi()
    assert text.lstrip().startswith("openapi:") and "/v1/quote" in text


def test_top_values_are_beta_means(bs):
    # David and Nagaraja, Order Statistics, 3rd ed., 2003, sec. 2.1: rank r from the top of n uniforms
    # has mean (n-r+1)/(n+1) and variance (n-r+1) r / ((n+1)^2 (n+2)).
    n = 9
    out = bs.top_values(bidder_values=UNIFORM, bidders=n, ranks=[1, 2])
    by_rank = {r["rank"]: r for r in out["results"]}
    for r in (1, 2):
        k = n - r + 1
        assert by_rank[r]["mean"] == pytest.approx(k / (n + 1), rel=1e-12)
        assert by_rank[r]["sd"] ** 2 == pytest.approx(k * r / ((n + 1) ** 2 * (n + 2)), rel=1e-10)


def test_joint_density_of_the_top_two_uniforms(bs):
    # David and Nagaraja 2003, sec. 2.2: the top two of n uniforms have joint density
    # n (n-1) y^(n-2) for 0 < y < x < 1, and 0 where the lower exceeds the higher.
    n = 3
    out = bs.joint_density(bidder_values=UNIFORM, bidders=n,
                           points=[{"higher": 0.7, "lower": 0.3}, {"higher": 0.3, "lower": 0.7}])
    dens = [p["density"] for p in out["points"]]
    assert dens[0] == pytest.approx(n * (n - 1) * 0.3 ** (n - 2), rel=1e-10)
    assert dens[1] == 0.0


def test_revenue_is_the_uniform_closed_form_under_every_rule(bs):
    # Krishna, Auction Theory, 2nd ed., 2009, ch. 2: with n uniform values on [0, 1] and reserve r,
    # every standard rule earns (n-1)/(n+1) + r^n - 2n r^(n+1)/(n+1).
    n, r = 5, 0.5
    expected = (n - 1) / (n + 1) + r**n - 2 * n * r ** (n + 1) / (n + 1)
    out = bs.revenue(bidder_values=UNIFORM, bidders=n, reserve=r, rules=RULES)
    assert [row["rule"] for row in out["results"]] == RULES
    for row in out["results"]:
        assert row["expected_revenue"] == pytest.approx(expected, rel=1e-10), row["rule"]
        # Krishna 2009, ch. 2: the item sells when some value exceeds r: 1 - r^n.
        assert row["probability_of_sale"] == pytest.approx(1 - r**n, rel=1e-12)


def test_bid_strategy_is_the_uniform_shading(bs):
    # Krishna 2009, sec. 2.3: with no reserve the first-price bid is b(v) = (n-1) v / n for uniform values.
    n = 4
    out = bs.bid_strategy(bidder_values=UNIFORM, bidders=n, rule="first_price", at=[0.2, 0.6, 0.9])
    assert out["bids"] == pytest.approx([(n - 1) * v / n for v in (0.2, 0.6, 0.9)], rel=1e-10)


def test_reserve_price_solves_the_virtual_value_equation(bs):
    # Myerson, "Optimal Auction Design", 1981: the reserve solves v - (1 - F(v))/f(v) = seller value;
    # for uniform values on [0, 1] that is 2 r - 1 = s, so r = (1 + s)/2 whatever n.
    for s in (0.0, 0.3):
        out = bs.reserve_price(bidder_values=UNIFORM, bidders=6, seller_value=s)
        assert out["optimal_reserve"] == pytest.approx((1 + s) / 2, rel=1e-9)


def test_quote_returns_a_float(bs):
    # Krishna 2009, ch. 2 (as above).
    n, r = 6, 0.3
    value = bs.quote(metric="expected_revenue", rule="first_price", bidders=n, reserve=r,
                     family="uniform", low=0, high=1)
    assert isinstance(value, float)
    assert value == pytest.approx((n - 1) / (n + 1) + r**n - 2 * n * r ** (n + 1) / (n + 1), rel=1e-10)


def test_batch_answers_in_order_like_the_single_calls(bs):
    tv = {"bidder_values": UNIFORM, "bidders": 4}
    rev = {"bidder_values": UNIFORM, "bidders": 4, "reserve": 0.25, "rules": ["second_price"]}
    out = bs.batch([{"id": "a", "path": "/v1/top-values", "body": tv},
                    {"id": 7, "path": "/v1/revenue", "body": rev},
                    {"id": "bad", "path": "/v1/revenue", "body": {"bidder_values": UNIFORM, "bidders": 0}}])
    got = out["responses"]
    assert [(r["id"], r["status"]) for r in got] == [("a", 200), (7, 200), ("bad", 422)]
    assert got[0]["body"] == bs.top_values(**tv)
    assert got[1]["body"] == bs.revenue(**rev)
    assert [e["field"] for e in got[2]["body"]["errors"]] == ["bidders"]


def test_sweeps(bs):
    if not _has_sweeps(bs):
        pytest.skip("POST /v1/sweeps is not served by this build yet")
    body = {"bidder_values": UNIFORM, "bidders": [2, 3], "reserves": [0.0, 0.5],
            "rules": ["second_price"], "metrics": ["expected_revenue"]}
    ans = bs.sweeps(**body)
    assert ans["columns"][:3] == ["bidders", "reserve", "rule"] and ans["columns"][3:] == ["expected_revenue"]
    recs = sweep_records(ans)
    assert {(r["bidders"], r["reserve"]) for r in recs} == {(2, 0.0), (2, 0.5), (3, 0.0), (3, 0.5)}
    for rec in recs:
        n, r = rec["bidders"], rec["reserve"]
        # Krishna 2009, ch. 2 (as above).
        assert rec["expected_revenue"] == pytest.approx((n - 1) / (n + 1) + r**n - 2 * n * r ** (n + 1) / (n + 1),
                                                        rel=1e-10)
    text = bs.sweeps_csv(**body)
    rows = list(csv.reader(text.splitlines()))
    assert rows[0] == ans["columns"] and len(rows) == 1 + len(ans["rows"])
    ranged = bs.sweeps(bidder_values=UNIFORM, bidders={"from": 2, "to": 6, "step": 2},
                       reserves={"from": 0.0, "to": 0.5, "steps": 3}, rules=["second_price"],
                       metrics=["expected_revenue"])
    assert sorted({r["bidders"] for r in sweep_records(ranged)}) == [2, 4, 6]


def test_sweep_records_shapes_a_table():
    ans = {"columns": ["bidders", "reserve", "rule", "expected_revenue"],
           "rows": [[2, 0.0, "second_price", 1.0 / 3.0], [3, 0.5, "second_price", 0.53125]]}
    recs = sweep_records(ans)
    assert recs == [{"bidders": 2, "reserve": 0.0, "rule": "second_price", "expected_revenue": 1.0 / 3.0},
                    {"bidders": 3, "reserve": 0.5, "rule": "second_price", "expected_revenue": 0.53125}]
    with pytest.raises(ValueError):
        sweep_records({"columns": ["bidders"], "rows": [[1, 2]]})


def test_sweep_records_feed_pandas():
    pd = pytest.importorskip("pandas")
    ans = {"columns": ["bidders", "reserve", "rule", "m"], "rows": [[2, 0.0, "x", 1.5], [3, 0.5, "y", 2.5]]}
    a, b = pd.DataFrame(sweep_records(ans)), pd.DataFrame(ans["rows"], columns=ans["columns"])
    assert a.equals(b)


# -- errors ---------------------------------------------------------------------------

def test_error_carries_the_problem_body(bs):
    with pytest.raises(BidstatsError) as info:
        bs.revenue(bidder_values=UNIFORM, bidders=0)
    err = info.value
    assert isinstance(err, Exception)
    assert err.status == 422
    assert err.problem["status"] == 422 and err.problem["type"] == "urn:bidstats:problem:invalid-input"
    assert [e["field"] for e in err.errors] == ["bidders"]
    assert "bidders" in str(err)


def test_quote_error_is_a_problem_too(bs):
    with pytest.raises(BidstatsError) as info:
        bs.quote(metric="mean_highest", bidders=3, family="normal", mean=0, sd=-1)
    assert info.value.status == 422 and [e["field"] for e in info.value.errors] == ["sd"]


def test_unknown_route_is_a_404_problem(bs):
    with pytest.raises(BidstatsError) as info:
        bs._json("GET", "/v1/no-such-thing")
    assert info.value.status == 404 and info.value.problem["status"] == 404


def test_non_finite_numbers_are_refused_before_sending(bs):
    with pytest.raises(ValueError):
        bs.revenue(bidder_values=UNIFORM, bidders=3, reserve=float("nan"))


# -- retries, with transport adapters -------------------------------------------------

class FirstAttemptsElsewhere(HTTPAdapter):
    """Sends the first ``misses`` attempts to a port nothing listens on, the rest where they were meant."""

    def __init__(self, live_port, dead_port, misses=1):
        super().__init__(max_retries=0)
        self.live, self.dead, self.misses, self.calls = live_port, dead_port, misses, 0
        self.urls = []

    def send(self, request, **kw):
        self.calls += 1
        if self.calls <= self.misses:
            request = request.copy()
            request.url = request.url.replace(f":{self.live}/", f":{self.dead}/")
        self.urls.append(request.url)
        return super().send(request, **kw)


class Canned(HTTPAdapter):
    """Answers the first ``times`` attempts with a canned response, then passes through."""

    def __init__(self, status, body, content_type, times, headers=None):
        super().__init__(max_retries=0)
        self.status, self.body, self.content_type, self.times = status, body, content_type, times
        self.headers = headers or {}
        self.calls = 0
        self.seen = []

    def send(self, request, **kw):
        self.calls += 1
        self.seen.append(request)
        if self.calls > self.times:
            return super().send(request, **kw)
        resp = requests.Response()
        resp.status_code = self.status
        resp.reason = {503: "Service Unavailable", 502: "Bad Gateway"}.get(self.status, "Error")
        resp._content = self.body.encode()
        resp.headers["Content-Type"] = self.content_type
        resp.headers.update(self.headers)
        resp.url, resp.request, resp.encoding = request.url, request, "utf-8"
        return resp


def _client(server, adapter, **kw):
    session = requests.Session()
    session.mount("http://", adapter)
    c = BidstatsClient(server["url"], session=session, **kw)
    c.waits = []
    c._sleep = c.waits.append
    return c


def test_retry_after_a_connection_error(server, monkeypatch):
    monkeypatch.delenv("BIDSTATS_API_KEY", raising=False)
    adapter = FirstAttemptsElsewhere(server["port"], _dead_port(), misses=1)
    c = _client(server, adapter, retries=3, backoff=0.05)
    out = c.top_values(bidder_values=UNIFORM, bidders=2, ranks=[1])  # a POST, retried
    # David and Nagaraja 2003, sec. 2.1: the top of 2 uniforms has mean 2/3.
    assert out["results"][0]["mean"] == pytest.approx(2 / 3, rel=1e-12)
    assert adapter.calls == 2 and f":{server['port']}/" not in adapter.urls[0]
    assert c.waits == [0.05]


def test_connection_errors_back_off_exponentially_then_raise(server):
    adapter = FirstAttemptsElsewhere(server["port"], _dead_port(), misses=10)
    c = _client(server, adapter, retries=3, backoff=0.1)
    with pytest.raises(BidstatsError) as info:
        c.health()
    assert info.value.status is None and info.value.problem is None
    assert isinstance(info.value.__cause__, requests.ConnectionError)
    assert adapter.calls == 4
    assert c.waits == pytest.approx([0.1, 0.2, 0.4])


def test_a_server_that_starts_late_is_reached(server):
    # Nothing listens on the client's port until the second attempt: the first attempt is refused.
    adapter = FirstAttemptsElsewhere(server["port"], _dead_port(), misses=2)
    c = _client(server, adapter, retries=2, backoff=0.0)
    assert c.health() == {"status": "ok"} and adapter.calls == 3


PROBLEM_503 = '{"type": "about:blank", "title": "Service Unavailable", "status": 503, "detail": "busy"}'


def test_retry_after_a_503(server):
    adapter = Canned(503, PROBLEM_503, "application/problem+json", times=2)
    c = _client(server, adapter, retries=3, backoff=0.01)
    assert c.reserve_price(bidder_values=UNIFORM, bidders=3)["optimal_reserve"] == pytest.approx(0.5, rel=1e-9)
    assert adapter.calls == 3 and c.waits == pytest.approx([0.01, 0.02])


def test_503_that_lasts_raises_with_its_problem(server):
    adapter = Canned(503, PROBLEM_503, "application/problem+json", times=99)
    c = _client(server, adapter, retries=2, backoff=0.01)
    with pytest.raises(BidstatsError) as info:
        c.health()
    assert info.value.status == 503 and info.value.problem["detail"] == "busy"
    assert adapter.calls == 3


def test_retry_after_header_is_honoured(server):
    adapter = Canned(503, PROBLEM_503, "application/problem+json", times=1, headers={"Retry-After": "0.5"})
    c = _client(server, adapter, retries=1, backoff=0.01)
    assert c.health() == {"status": "ok"}
    assert c.waits == [0.5]


def test_a_422_is_not_retried(server):
    adapter = Canned(0, "", "", times=0)  # passes everything through, counting
    c = _client(server, adapter, retries=3, backoff=0.01)
    with pytest.raises(BidstatsError):
        c.revenue(bidder_values=UNIFORM, bidders=0)
    assert adapter.calls == 1 and c.waits == []


class ReadTimesOut(HTTPAdapter):
    def __init__(self):
        super().__init__(max_retries=0)
        self.calls = 0

    def send(self, request, **kw):
        self.calls += 1
        raise requests.ReadTimeout("read timed out", request=request)


def test_a_read_timeout_is_an_error_and_is_not_retried(server):
    adapter = ReadTimesOut()
    c = _client(server, adapter, retries=3, backoff=0.01)
    with pytest.raises(BidstatsError) as info:
        c.top_values(bidder_values=UNIFORM, bidders=3)
    assert info.value.status is None and isinstance(info.value.__cause__, requests.ReadTimeout)
    assert adapter.calls == 1 and c.waits == []


def test_a_non_json_error_page_still_gives_a_problem(server):
    adapter = Canned(502, "<html>upstream down</html>", "text/html", times=1)
    c = _client(server, adapter, retries=3, backoff=0.01)
    with pytest.raises(BidstatsError) as info:
        c.health()
    assert info.value.status == 502 and info.value.problem["status"] == 502
    assert "upstream down" in info.value.problem["detail"] and adapter.calls == 1


def test_api_key_is_sent_as_a_bearer_token(server, monkeypatch):
    monkeypatch.delenv("BIDSTATS_API_KEY", raising=False)
    adapter = Canned(0, "", "", times=0)
    c = _client(server, adapter, api_key="k-123")
    c.health()
    assert adapter.seen[-1].headers["Authorization"] == "Bearer k-123"

    adapter = Canned(0, "", "", times=0)
    _client(server, adapter).health()
    assert "Authorization" not in adapter.seen[-1].headers

    monkeypatch.setenv("BIDSTATS_API_KEY", "from-env")
    adapter = Canned(0, "", "", times=0)
    _client(server, adapter).health()
    assert adapter.seen[-1].headers["Authorization"] == "Bearer from-env"


# -- the demo fixtures ----------------------------------------------------------------

def _strict_load(path):
    def no_constants(name):
        raise AssertionError(f"{path}: non-strict JSON constant {name}")
    return json.loads(path.read_text(), parse_constant=no_constants)


FIXTURE_FILES = [(s, name) for s in SCENARIOS for name in ROUTES]


@pytest.mark.parametrize("scenario,name", FIXTURE_FILES, ids=[f"{s}/{n}" for s, n in FIXTURE_FILES])
def test_every_fixture_body_answers_200(app, client, scenario, name):
    path = ROUTES[name]
    body = _strict_load(FIXTURES / scenario / f"{name}.json")
    if path not in {r.rule for r in app.url_map.iter_rules()}:
        pytest.skip(f"{path} is not served by this build yet")
    resp = client.post(path, json=body)
    assert resp.status_code == 200, resp.get_data(as_text=True)
    if name == "batch":
        statuses = [(r["id"], r["status"]) for r in resp.get_json()["responses"]]
        assert all(status == 200 for _, status in statuses), statuses


GROUP_FIXTURES = {"groups-revenue": "/v1/revenue", "groups-bid-strategy": "/v1/bid-strategy",
                  "groups-top-values": "/v1/top-values"}


@pytest.mark.parametrize("name", sorted(GROUP_FIXTURES))
def test_every_group_fixture_answers_200(client, name):
    resp = client.post(GROUP_FIXTURES[name], json=_strict_load(FIXTURES / "millbrook_reverse" / f"{name}.json"))
    assert resp.status_code == 200, resp.get_data(as_text=True)


def test_group_revenue_through_the_client(bs):
    # Alike groups are the symmetric auction: two groups of uniform [0, 1] values, 2 + 1 bidders,
    # second price: (n - 1)/(n + 1) = 1/2 (Krishna, Auction Theory, 2009, ch. 2).
    out = bs.group_revenue([{"name": "a", "count": 2, "bidder_values": UNIFORM},
                            {"name": "b", "count": 1, "bidder_values": UNIFORM}], rules=["second_price"])
    assert out["results"][0]["expected_revenue"] == pytest.approx(0.5, abs=1e-12)
    bids = bs.group_bids([{"name": "a", "count": 1, "bidder_values": UNIFORM},
                          {"name": "b", "count": 1, "bidder_values": UNIFORM}], at=[0.5])
    assert bids["groups"][0]["bids"][0] == pytest.approx(0.25, abs=1e-9)  # b(v) = v/2 for two uniform bidders
    top = bs.group_top_values([{"name": "a", "count": 1, "bidder_values": UNIFORM},
                               {"name": "b", "count": 2, "bidder_values": UNIFORM}])
    assert top["results"][0]["mean"] == pytest.approx(0.75, abs=1e-12)  # n/(n + 1) for n = 3


def test_the_past_sales_fits_are_the_csv():
    with open(FIXTURES / "harrowgate_forward" / "past_sales.csv", newline="") as fh:
        rows = [(int(r["bidders"]), float(r["price"]), float(r["hours"])) for r in csv.DictReader(fh)]
    assert 20 <= len(rows) <= 40
    items = _strict_load(FIXTURES / "harrowgate_forward" / "batch.json")["requests"]
    fits = [i["body"]["auctions"] for i in items if i["path"] == "/v1/fits"]
    assert len(fits) == 1 and [(a["bidders"], a["price"]) for a in fits[0]] == [r[:2] for r in rows]
    covariates = _strict_load(FIXTURES / "harrowgate_forward" / "fits.json")["auctions"]
    assert [(a["bidders"], a["price"], a["covariates"]["hours"]) for a in covariates] == rows


def test_the_fixtures_say_they_are_invented():
    text = (FIXTURES / "README.md").read_text()
    assert "invented" in text.lower()
    for scenario in SCENARIOS:
        assert scenario in text


def test_fit_recovers_uniform_values_from_prices(bs):
    # Prices at the quantiles of the second-highest of 3 uniform [0, 1] values, whose cdf is
    # I_u(2, 2) (David and Nagaraja 2003, section 2.1): the uniform candidate's bounds come back
    # near 0 and 1 (abs 0.05 at 200 auctions).
    from scipy import special

    prices = special.betaincinv(2.0, 2.0, (np.arange(200) + 0.5) / 200.0)
    out = bs.fit(rule="second_price", auctions=[{"bidders": 3, "price": float(p)} for p in prices],
                 families=["uniform"], confidence={"replications": 0})
    model = out["candidates"][0]["model"]
    assert model["low"] == pytest.approx(0.0, abs=0.05) and model["high"] == pytest.approx(1.0, abs=0.05)
