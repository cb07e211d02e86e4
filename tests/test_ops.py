"""The operations layer: request ids, access log, readiness, metrics, security headers,
and the gunicorn settings file.

Contract checks, not numerical ones. The metrics text is read with
prometheus-client's own parser (Prometheus text exposition format 0.0.4).
Problem bodies follow RFC 9457 (Problem Details for HTTP APIs, 2023, section 3).
"""
from __future__ import annotations

import json
import logging
import os
import re
import runpy
import subprocess
import sys
from pathlib import Path
from types import SimpleNamespace

import pytest
from prometheus_client.parser import text_string_to_metric_families

from service import create_app, settings
from service.web import ops

ROOT = Path(__file__).resolve().parents[1]
PROBLEM = "application/problem+json"
ACCESS_FIELDS = {"time", "request_id", "method", "path", "status", "duration_ms", "bytes_out", "remote_addr"}
UNIFORM_BODY = {"bidder_values": {"family": "uniform", "low": 0, "high": 1}, "bidders": 2, "ranks": [1]}


def build_app():
    """The app as the lead's create_app will build it once ops is wired in."""
    app = create_app({"TESTING": True})
    if not app.extensions.get(ops.EXTENSION):
        ops.register(app)

    @app.get("/test-only-failure")
    def _fail():
        raise RuntimeError("deliberate failure for this test")

    return app


@pytest.fixture(scope="module")
def ops_app():
    return build_app()


@pytest.fixture()
def client(ops_app):
    return ops_app.test_client()


@pytest.fixture()
def access_lines(caplog, monkeypatch):
    """The access log's records as caplog sees them. The logger does not propagate
    in service (its own stderr handler prints it once), so here it is let through
    to the root logger, where caplog listens."""
    monkeypatch.setattr(ops.access_log, "propagate", True)
    caplog.set_level(logging.INFO, logger="bidstats.access")

    def lines():
        return [r for r in caplog.records if r.name == "bidstats.access"]

    return lines


# ---------------------------------------------------------------- request ids
SANE_IDS = ["abc-1", "Lot_7.retry-2", "x" * 128, "0"]
INSANE_IDS = ["x" * 129, "has space", "a/b", "semi;colon", "caf\xe9", ""]


@pytest.mark.parametrize("rid", SANE_IDS)
def test_a_sane_request_id_is_echoed(client, rid):
    r = client.get("/healthz", headers={"X-Request-ID": rid})
    assert r.status_code == 200
    assert r.headers["X-Request-ID"] == rid


@pytest.mark.parametrize("rid", INSANE_IDS)
def test_an_insane_request_id_is_replaced(client, rid):
    r = client.get("/healthz", headers={"X-Request-ID": rid})
    assert r.headers["X-Request-ID"] != rid
    assert re.fullmatch(r"[0-9a-f]{32}", r.headers["X-Request-ID"])


def test_a_missing_request_id_is_generated_fresh_each_time(client):
    ids = {client.get("/healthz").headers["X-Request-ID"] for _ in range(3)}
    assert len(ids) == 3
    assert all(re.fullmatch(r"[0-9a-f]{32}", i) for i in ids)


@pytest.mark.parametrize(
    "method,path,kw,status",
    [
        ("GET", "/v1/no-such-thing", {}, 404),
        ("POST", "/healthz", {"json": {}}, 405),
        ("POST", "/v1/top-values", {"data": b"{", "content_type": "application/json"}, 400),
        ("POST", "/v1/top-values", {"json": {**UNIFORM_BODY, "bidders": 0}}, 422),
        ("POST", "/v1/top-values", {"data": b"{" + b" " * (settings.CAPS.body_bytes + 1) + b"}", "content_type": "application/json"}, 413),
        ("GET", "/test-only-failure", {}, 500),
    ],
    ids=["404", "405", "400", "422", "413", "500"],
)
def test_errors_carry_the_request_id_too(client, method, path, kw, status):
    r = client.open(path, method=method, headers={"X-Request-ID": "err-check-1"}, **kw)
    assert r.status_code == status and r.mimetype == PROBLEM
    assert r.headers["X-Request-ID"] == "err-check-1"
    r = client.open(path, method=method, **kw)
    assert re.fullmatch(r"[0-9a-f]{32}", r.headers["X-Request-ID"])


# ---------------------------------------------------------------- access log
@pytest.mark.parametrize(
    "method,path,kw,status,route",
    [
        ("GET", "/healthz", {}, 200, "/healthz"),
        ("POST", "/v1/top-values", {"json": UNIFORM_BODY}, 200, "/v1/top-values"),
        ("GET", "/v1/no-such-thing", {}, 404, "unmatched"),
        ("GET", "/test-only-failure", {}, 500, "/test-only-failure"),
    ],
    ids=["200", "post", "404", "500"],
)
def test_each_request_logs_exactly_one_json_line(client, access_lines, method, path, kw, status, route):
    r = client.open(path, method=method, headers={"X-Request-ID": "log-check-7"}, **kw)
    assert r.status_code == status
    records = access_lines()
    assert len(records) == 1
    line = records[0].getMessage()
    assert "\n" not in line
    entry = json.loads(line)
    assert ACCESS_FIELDS <= set(entry)
    assert entry["request_id"] == "log-check-7"
    assert entry["method"] == method and entry["path"] == path
    assert entry["status"] == status and entry["route"] == route
    assert isinstance(entry["duration_ms"], float) and entry["duration_ms"] >= 0
    assert entry["bytes_out"] == len(r.get_data())
    assert entry["remote_addr"] == "127.0.0.1"
    # ISO 8601 in UTC, to the millisecond.
    assert re.fullmatch(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d\.\d{3}Z", entry["time"])


def test_the_log_never_holds_bodies_or_query_strings(client, access_lines):
    marker = "body-marker-417"
    client.post("/v1/top-values", json={**UNIFORM_BODY, "note": marker})
    client.get(f"/v1/quote?metric=mean_highest&bidders=2&family=uniform&low=0&high=1&tag={marker}")
    records = access_lines()
    assert len(records) == 2
    assert all(marker not in r.getMessage() for r in records)
    assert json.loads(records[1].getMessage())["path"] == "/v1/quote"


def test_register_is_idempotent(access_lines):
    app = create_app({"TESTING": True})
    ops.register(app)
    rules = sorted(r.rule for r in app.url_map.iter_rules())
    ops.register(app)
    assert sorted(r.rule for r in app.url_map.iter_rules()) == rules
    assert app.extensions[ops.EXTENSION]
    app.test_client().get("/healthz")
    assert len(access_lines()) == 1
    # One stderr handler in the process, however many apps were built.
    build_app()
    assert sum(isinstance(h, ops._StderrHandler) for h in ops.access_log.handlers) == 1


# ---------------------------------------------------------------- readiness
def test_readyz_answers_ready(client):
    r = client.get("/readyz")
    assert r.status_code == 200 and r.mimetype == "application/json"
    assert r.get_json() == {"status": "ready"}


@pytest.mark.parametrize("failure", ["raises", "wrong"])
def test_readyz_is_503_problem_when_the_core_fails(client, monkeypatch, failure):
    def broken():
        if failure == "raises":
            raise ImportError("the core is missing (deliberately, for this test)")
        return False

    monkeypatch.setattr(ops, "core_ready", broken)
    r = client.get("/readyz")
    assert r.status_code == 503 and r.mimetype == PROBLEM
    body = json.loads(r.get_data())
    assert body["status"] == 503 and body["title"] == "Service Unavailable"
    assert "deliberately" not in r.get_data(as_text=True)
    assert r.headers["X-Request-ID"]


def test_the_core_check_itself_passes():
    assert ops.core_ready() is True


# ---------------------------------------------------------------- metrics
def _families(text):
    return {f.name: f for f in text_string_to_metric_families(text)}


def _sample(text, family, sample, **labels):
    fam = _families(text).get(family)
    if fam is None:
        return 0.0
    for s in fam.samples:
        if s.name == sample and s.labels == labels:
            return s.value
    return 0.0


def test_metrics_is_prometheus_text(client):
    client.get("/healthz")
    r = client.get("/metrics")
    assert r.status_code == 200
    assert r.mimetype == "text/plain"
    assert "version=0.0.4" in r.headers["Content-Type"]
    fams = _families(r.get_data(as_text=True))
    assert fams["bidstats_http_requests"].type == "counter"
    assert fams["bidstats_http_request_duration_seconds"].type == "histogram"


@pytest.mark.parametrize(
    "method,path,kw,route,status",
    [
        ("GET", "/healthz", {}, "/healthz", "200"),
        ("POST", "/v1/top-values", {"json": UNIFORM_BODY}, "/v1/top-values", "200"),
        ("POST", "/v1/top-values", {"json": {**UNIFORM_BODY, "bidders": 0}}, "/v1/top-values", "422"),
        ("GET", "/v1/no-such-thing-either", {}, "unmatched", "404"),
    ],
    ids=["healthz", "post", "422", "unmatched"],
)
def test_the_counter_and_histogram_rise_after_a_request(client, method, path, kw, route, status):
    before = client.get("/metrics").get_data(as_text=True)
    client.open(path, method=method, **kw)
    after = client.get("/metrics").get_data(as_text=True)
    counted = ("bidstats_http_requests", "bidstats_http_requests_total")
    timed = ("bidstats_http_request_duration_seconds", "bidstats_http_request_duration_seconds_count")
    assert _sample(after, *counted, route=route, status=status) == _sample(before, *counted, route=route, status=status) + 1
    assert _sample(after, *timed, route=route) == _sample(before, *timed, route=route) + 1


def test_metrics_labels_use_the_route_template_not_the_path(client):
    client.get("/v1/a-path-nobody-routes/12345")
    text = client.get("/metrics").get_data(as_text=True)
    assert "12345" not in text


# ---------------------------------------------------------------- security headers
SECURITY = {
    "X-Content-Type-Options": "nosniff",
    "Cache-Control": "no-store",
    "Content-Security-Policy": "default-src 'none'; frame-ancestors 'none'",
    "Referrer-Policy": "no-referrer",
}


@pytest.mark.parametrize("path,status", [("/healthz", 200), ("/readyz", 200), ("/metrics", 200), ("/v1/no-such-thing", 404)])
def test_security_headers_on_every_answer(client, path, status):
    r = client.get(path)
    assert r.status_code == status
    assert {k: r.headers.get(k) for k in SECURITY} == SECURITY


def test_security_headers_on_a_post_answer(client):
    r = client.post("/v1/top-values", json=UNIFORM_BODY)
    assert r.status_code == 200
    assert {k: r.headers.get(k) for k in SECURITY} == SECURITY


# ---------------------------------------------------------------- multiprocess metrics
_WORKER = """
import sys
from service import create_app
from service.web import ops
assert ops.MULTIPROCESS
app = create_app({"TESTING": True})
ops.register(app)
c = app.test_client()
for _ in range(int(sys.argv[1])):
    assert c.get("/healthz").status_code == 200
if sys.argv[2] == "show":
    sys.stdout.write(c.get("/metrics").get_data(as_text=True))
"""


def _run_worker(env, n, show):
    return subprocess.run(
        [sys.executable, "-c", _WORKER, str(n), "show" if show else "quiet"],
        cwd=ROOT, env=env, capture_output=True, text=True, timeout=300,
    )


def test_multiprocess_metrics_sum_over_processes(tmp_path):
    env = {**os.environ, "PROMETHEUS_MULTIPROC_DIR": str(tmp_path)}
    first = _run_worker(env, 3, show=False)
    assert first.returncode == 0, first.stderr
    second = _run_worker(env, 2, show=True)
    assert second.returncode == 0, second.stderr
    # Two processes, each with its own files; /metrics in the second sums both.
    assert _sample(second.stdout, "bidstats_http_requests", "bidstats_http_requests_total", route="/healthz", status="200") == 5
    assert len(list(tmp_path.glob("counter_*.db"))) == 2


def test_multiprocess_mode_needs_its_directory(tmp_path):
    env = {**os.environ, "PROMETHEUS_MULTIPROC_DIR": str(tmp_path / "missing")}
    run = _run_worker(env, 1, show=False)
    assert run.returncode != 0
    assert "PROMETHEUS_MULTIPROC_DIR must name a writable directory" in run.stderr


# ---------------------------------------------------------------- gunicorn.conf.py
GUNICORN_ENV = ("HOST", "PORT", "WORKERS", "BIDSTATS_WORKER_TIMEOUT", "BIDSTATS_GRACEFUL_TIMEOUT",
                "BIDSTATS_KEEPALIVE", "BIDSTATS_SERVER_ACCESS_LOG", "PROMETHEUS_MULTIPROC_DIR",
                "BIDSTATS_HEAVY_SLOTS", "BIDSTATS_READ_TIMEOUT")


@pytest.fixture()
def gunicorn_conf(monkeypatch):
    for name in GUNICORN_ENV:
        monkeypatch.setenv(name, "")  # recorded, so that whatever the file sets is undone afterwards
        monkeypatch.delenv(name)

    def load(**env):
        for name, value in env.items():
            monkeypatch.setenv(name, value)
        return runpy.run_path(str(ROOT / "gunicorn.conf.py"))

    return load


def test_gunicorn_defaults(gunicorn_conf):
    conf = gunicorn_conf()
    assert conf["bind"] == ["127.0.0.1:8000"]
    cpus = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count()
    assert conf["workers"] == min(2 * cpus + 1, conf["MAX_DEFAULT_WORKERS"])
    assert conf["timeout"] == 30
    # The worker timeout sits well above the app's own time budget, which answers first.
    assert conf["timeout"] >= 3 * settings.Caps.seconds
    assert os.environ["BIDSTATS_HEAVY_SLOTS"] == str(max(1, conf["workers"] // 2))
    assert conf["read_timeout"] == 10 and conf["worker_class"].__name__ == "BoundedReadWorker"
    assert 0 < conf["graceful_timeout"] <= conf["timeout"]
    assert conf["keepalive"] > 0
    handlers = conf["logconfig_dict"]["handlers"]
    for name in ("gunicorn.access", "gunicorn.error"):
        (handler,) = conf["logconfig_dict"]["loggers"][name]["handlers"]
        assert handlers[handler]["stream"] == "ext://sys.stderr"


def test_gunicorn_reads_the_environment(gunicorn_conf):
    conf = gunicorn_conf(HOST="0.0.0.0", PORT="9001", WORKERS="3", BIDSTATS_WORKER_TIMEOUT="120", BIDSTATS_SERVER_ACCESS_LOG="0")
    assert conf["bind"] == ["0.0.0.0:9001"]
    assert conf["workers"] == 3
    assert conf["timeout"] == 120
    assert conf["logconfig_dict"]["loggers"]["gunicorn.access"]["handlers"] == []
    assert gunicorn_conf(HOST="::1")["bind"] == ["[::1]:9001"]


@pytest.mark.parametrize("name,value", [("WORKERS", "many"), ("WORKERS", "0"), ("PORT", "80.5"), ("BIDSTATS_WORKER_TIMEOUT", "-1")])
def test_gunicorn_refuses_bad_numbers(gunicorn_conf, name, value):
    with pytest.raises(SystemExit, match=name):
        gunicorn_conf(**{name: value})


def test_gunicorn_hooks_keep_the_metrics_directory(gunicorn_conf, tmp_path):
    metrics_dir = tmp_path / "metrics"
    conf = gunicorn_conf(PROMETHEUS_MULTIPROC_DIR=str(metrics_dir))
    conf["on_starting"](None)
    assert metrics_dir.is_dir()
    for name in ("counter_11.db", "gauge_livesum_11.db", "gauge_all_12.db"):
        (metrics_dir / name).write_bytes(b"")
    (metrics_dir / "keep.txt").write_text("not a metrics file")
    conf["child_exit"](None, SimpleNamespace(pid=11))
    # A dead worker's live gauges go; its counters and other workers' files stay.
    assert sorted(p.name for p in metrics_dir.iterdir()) == ["counter_11.db", "gauge_all_12.db", "keep.txt"]
    conf["on_starting"](None)
    assert sorted(p.name for p in metrics_dir.iterdir()) == ["keep.txt"]


def test_gunicorn_hooks_do_nothing_without_a_metrics_directory(gunicorn_conf):
    conf = gunicorn_conf()
    conf["on_starting"](None)
    conf["child_exit"](None, SimpleNamespace(pid=11))
