"""Admission and the time budget, in-process: caps checked on the raw JSON before any
element is loaded, answer sizes refused before the work, the budget binding on every
route and batch item, heavy slots, and the hostile requests that used to cost a 500.

Each case here is one a hostile client sent within the documented caps. Nothing
asserts a time: a cap that is checked before the work is shown by the error naming
the cap, which no element-by-element check would produce.
"""
from __future__ import annotations

import dataclasses
import json

import pytest

from service import create_app, settings
from service.core import budget
from service.web import admission

UNIFORM = {"family": "uniform", "low": 0.0, "high": 1.0}


@pytest.fixture()
def client():
    return create_app().test_client()


def _caps(client, **changes):
    """The client's app with some caps changed (each app holds its own, see create_app)."""
    app = client.application
    app.extensions["bidstats.caps"] = dataclasses.replace(app.extensions["bidstats.caps"], **changes)


def _fields(resp):
    assert resp.mimetype == "application/problem+json", resp.get_data(as_text=True)[:300]
    return {e["field"]: e["message"] for e in resp.get_json()["errors"]}


# ---------------------------------------------------------------- caps before work
def test_an_over_long_points_list_is_refused_by_its_length(client):
    # 660,000 empty points: a body just under the 2,000,000-byte cap.
    body = {"bidder_values": UNIFORM, "bidders": 3, "points": [{}] * 660_000}
    resp = client.post("/v1/top-values/joint-density", data=json.dumps(body, separators=(",", ":")), content_type="application/json")
    assert resp.status_code == 422
    assert "Holds 660000 items" in _fields(resp)["points"]
    assert len(resp.get_data()) < 2000  # one error, not one per element


def test_an_over_long_quantiles_list_is_refused_by_its_length(client):
    body = {"bidder_values": UNIFORM, "bidders": 3, "quantiles": [0] * 999_000}
    resp = client.post("/v1/top-values", data=json.dumps(body, separators=(",", ":")), content_type="application/json")
    assert resp.status_code == 422
    assert "Holds 999000 items" in _fields(resp)["quantiles"]


def test_an_over_long_sample_is_refused_by_its_length(client):
    body = {"bidder_values": {"family": "empirical", "sample": ["x"] * (settings.CAPS.sample + 1)}, "bidders": 3}
    resp = client.post("/v1/revenue", json=body)
    assert resp.status_code == 422
    assert f"Holds {settings.CAPS.sample + 1} items" in _fields(resp)["bidder_values.sample"]


def test_a_problem_lists_at_most_fifty_field_errors(client):
    body = {"bidder_values": UNIFORM, "bidders": 3, "at": ["x"] * 500}
    resp = client.post("/v1/bid-strategy", json=body)
    problem = resp.get_json()
    assert resp.status_code == 422 and len(problem["errors"]) == 50 and problem["errors_not_listed"] == 450


def test_the_answer_size_is_refused_before_the_work(client, monkeypatch):
    # 401 x 401 cells at 24 bytes a number is about 3.9 MB: over a 1 MB cap.
    _caps(client, response_bytes=1_000_000)
    body = {"bidder_values": UNIFORM, "bidders": 3, "grid_points": 401}
    resp = client.post("/v1/top-values/joint-density", json=body)
    assert resp.status_code == 422
    assert "BIDSTATS_MAX_RESPONSE_BYTES" in _fields(resp)["grid_points"]


def test_a_batch_counts_every_item_towards_the_answer_size(client, monkeypatch):
    # Each 111 x 111 grid is estimated at about 300 KB: three fit in 1 MB, the fourth and later do not.
    _caps(client, response_bytes=1_000_000)
    item = {"path": "/v1/top-values/joint-density", "body": {"bidder_values": UNIFORM, "bidders": 3, "grid_points": 111}}
    resp = client.post("/v1/batch", json={"requests": [{"id": i, **item} for i in range(6)]})
    assert resp.status_code == 200
    statuses = [r["status"] for r in resp.get_json()["responses"]]
    assert statuses == [200, 200, 200, 422, 422, 422]


# ---------------------------------------------------------------- the budget binds
def test_a_spent_budget_answers_every_later_batch_item_at_once(client, monkeypatch):
    # Four mixtures of 50 kernel samples take far longer than 0.2 s together; the
    # items after the budget is spent are answered 422 without being computed.
    _caps(client, seconds=0.2, heavy_after=60.0)
    sample = [10.0 + 0.37 * k for k in range(200)]
    mix = {"family": "mixture", "components": [{"weight": 0.02, "model": {"family": "empirical", "sample": [x + i for x in sample]}}
                                               for i in range(50)]}
    item = {"path": "/v1/revenue", "body": {"bidder_values": mix, "bidders": 10}}
    resp = client.post("/v1/batch", json={"requests": [{"id": i, **item} for i in range(4)]})
    answers = resp.get_json()["responses"]
    assert resp.status_code == 200 and answers[-1]["status"] == 422
    assert answers[-1]["body"]["errors"][0]["field"] == "(request)"


def test_the_backstop_interrupts_code_that_never_checks_the_budget():
    # A pure-Python loop with no budget.check(): the timer signal ends it just past the deadline.
    with pytest.raises(budget.BudgetSpent):
        with budget.within(0.05):
            while True:
                pass


def test_nested_budgets_keep_the_earlier_deadline():
    with budget.within(100.0):
        with budget.within(0.0001):
            pass
        assert budget.remaining() > 50
    assert budget.remaining() is None


# ---------------------------------------------------------------- heavy slots
def test_a_request_over_the_heavy_threshold_needs_a_free_slot(client, monkeypatch):
    mine = client.application.extensions["bidstats.slots"]
    slots = admission.Slots(mine.count, mine.directory)  # another worker, with its own open files
    held = slots.acquire()  # holds the only slot
    try:
        mix = {"family": "mixture", "components": [{"weight": 0.02, "model": UNIFORM}] * 50}
        body = {"bidder_values": mix, "bidders": 4}  # a reserve search over 51 parts: work 1020
        resp = client.post("/v1/reserve-price", json=body)
        assert resp.status_code == 503
        assert resp.headers["Retry-After"] == str(admission.RETRY_AFTER)
        assert resp.get_json()["type"] == "urn:bidstats:problem:busy"
        # An ordinary request still answers.
        assert client.post("/v1/revenue", json={"bidder_values": UNIFORM, "bidders": 4}).status_code == 200
    finally:
        slots.release(held)
    assert client.post("/v1/reserve-price", json=body).status_code == 200


def test_a_request_that_runs_long_is_moved_to_a_heavy_slot(client, monkeypatch):
    _caps(client, heavy_after=0.0)  # every request is past the threshold at its first check
    mine = client.application.extensions["bidstats.slots"]
    slots = admission.Slots(mine.count, mine.directory)
    held = slots.acquire()
    try:
        resp = client.post("/v1/revenue", json={"bidder_values": {"family": "lognormal", "median": 1.0, "sigma": 0.5}, "bidders": 5})
        assert resp.status_code == 503 and resp.headers["Retry-After"]
    finally:
        slots.release(held)


def test_slots_are_shared_through_their_directory(tmp_path):
    # Each Slots opens the files itself, as each gunicorn worker does: the locks conflict.
    one, two = admission.Slots(1, str(tmp_path)), admission.Slots(1, str(tmp_path))
    fd = one.acquire()
    assert fd is not None and two.acquire() is None
    one.release(fd)
    fd2 = two.acquire()
    assert fd2 is not None
    two.release(fd2)


# ---------------------------------------------------------------- hostile JSON
@pytest.mark.parametrize("text", ["[" * 200_000, '{"a":' * 1100 + "1" + "}" * 1100])
def test_deep_nesting_is_a_400(client, text):
    resp = client.post("/v1/revenue", data=text, content_type="application/json")
    assert resp.status_code == 400 and resp.mimetype == "application/problem+json"
    assert "deeply" in resp.get_json()["detail"]


def test_a_null_batch_item_fails_alone(client):
    good = {"id": "g", "path": "/v1/top-values", "body": {"bidder_values": UNIFORM, "bidders": 2}}
    resp = client.post("/v1/batch", json={"requests": [None, good, 7]})
    assert resp.status_code == 200
    assert [r["status"] for r in resp.get_json()["responses"]] == [422, 200, 422]


# ---------------------------------------------------------------- query strings
@pytest.mark.parametrize("query, field", [
    ("metric=expected_revenue&family=uniform&low=0&high=1&bidders=6&bidders=7", "bidders"),
    ("metric=expected_revenue&family=normal&mean=5&sd=1&sd=-1&bidders=6", "sd"),
])
def test_a_repeated_quote_parameter_is_a_422_naming_it(client, query, field):
    resp = client.get("/v1/quote?" + query)
    assert resp.status_code == 422
    assert resp.get_data(as_text=True).startswith(f"error: {field}: Given 2 times")


def test_a_repeated_sweep_parameter_is_a_422_naming_it(client):
    resp = client.get("/v1/sweeps.csv?family=uniform&low=0&high=1&bidders=2,3&reserves=0&reserves=0.5")
    assert resp.status_code == 422 and "reserves: Given 2 times" in resp.get_data(as_text=True)


def test_a_list_and_a_range_for_one_axis_is_a_422(client):
    resp = client.get("/v1/sweeps.csv?family=uniform&low=0&high=1&bidders=2,3&bidders_from=2&bidders_to=9&reserves=0")
    text = resp.get_data(as_text=True)
    assert resp.status_code == 422 and "bidders: Give either the list bidders or the range bidders_from, bidders_to" in text


# ---------------------------------------------------------------- settings
def test_a_key_list_with_no_key_stops_start_up(monkeypatch):
    monkeypatch.setenv("BIDSTATS_API_KEYS", " , ")
    with pytest.raises(SystemExit, match="holds no key"):
        create_app()


def test_an_answer_over_the_size_cap_is_refused_even_when_the_estimate_missed(client, monkeypatch):
    # The estimate for one rule without quantiles is 24 numbers (576 bytes); the answer holds about 650.
    _caps(client, response_bytes=600)
    resp = client.post("/v1/revenue", json={"bidder_values": UNIFORM, "bidders": 3, "rules": ["second_price"], "quantiles": []})
    assert resp.status_code == 422
    assert json.loads(resp.get_data())["errors"][0]["field"] == "(request)"


def test_a_batch_that_turns_heavy_with_every_slot_taken_is_a_503_not_item_500s(client):
    mine = client.application.extensions["bidstats.slots"]
    slots = admission.Slots(mine.count, mine.directory)
    held = slots.acquire()
    try:
        item = {"path": "/v1/revenue", "body": {"bidder_values": UNIFORM, "bidders": 4}}  # 5 units each
        resp = client.post("/v1/batch", json={"requests": [{"id": i, **item} for i in range(40)]})
        assert resp.status_code == 503 and resp.headers["Retry-After"]
        assert resp.get_json()["type"] == "urn:bidstats:problem:busy"
    finally:
        slots.release(held)


def test_create_app_sets_a_cap_by_its_variables_name():
    # The same request under two apps: the config's cap binds only in its own app.
    body = {"bidder_values": UNIFORM, "bidders": 6}
    small = create_app({"BIDSTATS_MAX_BIDDERS": 5}).test_client().post("/v1/top-values", json=body)
    assert small.status_code == 422 and "BIDSTATS_MAX_BIDDERS" in _fields(small)["bidders"]
    assert create_app().test_client().post("/v1/top-values", json=body).status_code == 200
    with pytest.raises(SystemExit):
        create_app({"BIDSTATS_MAX_SECONDS": "soon"})
