"""Caps under a real gunicorn: refused requests are refused before any work, and
the largest allowed requests finish within the worker timeout, or are refused,
but never cost a worker.

One gunicorn with the shipped gunicorn.conf.py (WORKERS=2, the default worker
timeout of 30 s) on a free loopback port. For every request the test records
the worker pids before and after, and reads gunicorn's log for
"WORKER TIMEOUT": a request that runs past the timeout gets its worker killed
and restarted by the master, which is what the caps exist to prevent. Each
request is one call with a client timeout above the worker timeout; times are
printed, never asserted.
"""
from __future__ import annotations

import json
import time

import pytest
import requests

from harness import Gunicorn, report, stress_mixture as _mixture

WORKER_TIMEOUT_S = 30          # gunicorn.conf.py's default BIDSTATS_WORKER_TIMEOUT
CLIENT_TIMEOUT_S = WORKER_TIMEOUT_S + 30
LOGNORMAL = {"family": "lognormal", "median": 62000, "sigma": 0.35}
TIMES = []


def _strict_json(text):
    def no_constants(name):
        raise ValueError(f"{name} in the body")
    return json.loads(text, parse_constant=no_constants)


@pytest.fixture(scope="module")
def server(tmp_path_factory):
    g = Gunicorn(log_path=tmp_path_factory.mktemp("caps") / "gunicorn.log", workers=2).start()
    yield g
    g.stop()
    report([f"{'caps: request':<62} {'status':>6} {'seconds':>8}"] + [f"{name:<62} {status:>6} {dt:>8.3f}" for name, status, dt in TIMES])


def _send(g, name, path, body=None, data=None):
    before = g.workers_pids()
    log_before = g.log_text().count("WORKER TIMEOUT")
    t = time.perf_counter()
    if data is not None:
        r = requests.post(g.url + path, data=data, headers={"Content-Type": "application/json"}, timeout=CLIENT_TIMEOUT_S)
    else:
        r = requests.post(g.url + path, json=body, timeout=CLIENT_TIMEOUT_S)
    dt = time.perf_counter() - t
    TIMES.append((name, r.status_code, dt))
    time.sleep(0.2)   # a killed worker's replacement is forked within this (measured: about 0.1 s)
    assert g.log_text().count("WORKER TIMEOUT") == log_before, f"{name}: gunicorn timed out a worker after {dt:.1f} s"
    assert g.workers_pids() == before, f"{name}: the workers changed from {before} to {g.workers_pids()}"
    return r


# ---------------------------------------------------------------- refused before any work
def _refused(r, status, field=None):
    assert r.status_code == status, r.text[:500]
    assert r.headers["Content-Type"].startswith("application/problem+json")
    problem = _strict_json(r.text)
    assert problem["status"] == status
    if field is not None:
        assert field in [e["field"] for e in problem["errors"]], problem


def test_body_over_the_byte_cap_is_413(server):
    # 3,000,000 bytes against the 2,000,000-byte BIDSTATS_MAX_BODY_BYTES default.
    body = json.dumps({"bidder_values": LOGNORMAL, "bidders": 6, "pad": "x" * 3_000_000})
    _refused(_send(server, "3 MB body to /v1/revenue", "/v1/revenue", data=body), 413)


def test_sweep_over_the_row_cap_is_422(server):
    # 1000 bidder counts x 201 reserves x 1 rule = 201,000 rows > 200,000.
    body = {"bidder_values": LOGNORMAL, "bidders": {"from": 2, "to": 1001}, "reserves": {"from": 30000, "to": 80000, "steps": 201},
            "rules": ["second_price"]}
    _refused(_send(server, "sweep of 201,000 rows", "/v1/sweeps", body), 422, "bidders")


def test_sweep_over_the_axis_cap_is_422(server):
    body = {"bidder_values": LOGNORMAL, "bidders": [6], "reserves": {"from": 30000, "to": 80000, "steps": 2001}, "rules": ["second_price"]}
    _refused(_send(server, "sweep with 2,001 reserves", "/v1/sweeps", body), 422, "reserves.steps")


def test_mixture_over_the_component_cap_is_422(server):
    body = {"bidder_values": _mixture(51), "bidders": 6}
    _refused(_send(server, "51-component mixture", "/v1/revenue", body), 422, "bidder_values.components")


def test_bidders_over_the_cap_is_422(server):
    _refused(_send(server, "1,000,001 bidders", "/v1/revenue", {"bidder_values": LOGNORMAL, "bidders": 1_000_001}), 422, "bidders")


def test_batch_over_the_item_cap_is_422(server):
    item = {"id": "x", "path": "/v1/revenue", "body": {"bidder_values": LOGNORMAL, "bidders": 6}}
    _refused(_send(server, "batch of 1,001 items", "/v1/batch", {"requests": [item] * 1001}), 422)


# ---------------------------------------------------------------- pathological but allowed
def _answered_or_refused(r):
    assert r.status_code in (200, 413, 422), r.text[:500]
    data = _strict_json(r.text)
    if r.status_code != 200:
        assert r.headers["Content-Type"].startswith("application/problem+json")
    return data


@pytest.mark.parametrize("bidders", [1_000_000, 6])
def test_fifty_component_mixture_through_revenue(server, bidders):
    r = _send(server, f"50-component mixture, {bidders:,} bidders, /v1/revenue", "/v1/revenue",
              {"bidder_values": _mixture(50), "bidders": bidders})
    data = _answered_or_refused(r)
    if r.status_code == 200:
        assert {x["rule"] for x in data["results"]} == {"first_price", "second_price", "ascending", "descending", "all_pay"}


def test_largest_allowed_sweep(server):
    # 1000 bidder counts x 100 reserves x 2 rules = 200,000 rows, the cap exactly.
    body = {"bidder_values": LOGNORMAL, "bidders": {"from": 2, "to": 1001}, "reserves": {"from": 30000, "to": 80000, "steps": 100}}
    r = _send(server, "sweep of 200,000 rows (lognormal)", "/v1/sweeps", body)
    data = _answered_or_refused(r)
    if r.status_code == 200:
        assert len(data["rows"]) == 200_000


def test_small_sweep_of_a_fifty_component_mixture(tmp_path):
    # A separate server, so that the worker this kills costs no other test anything.
    g = Gunicorn(log_path=tmp_path / "gunicorn.log", workers=2).start()
    try:
        body = {"bidder_values": _mixture(50), "bidders": {"from": 2, "to": 31}, "reserves": [50000], "rules": ["first_price"]}
        _answered_or_refused(_send(g, "sweep of 30 rows (50-component mixture)", "/v1/sweeps", body))
    finally:
        g.stop()
