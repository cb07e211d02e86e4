"""Operations: request ids, access logs, readiness, metrics and security headers.

``register(app)`` adds all of it to an app and is safe to call twice.

Metrics live in this process's own registry, or, when the environment has
PROMETHEUS_MULTIPROC_DIR (several gunicorn workers), in prometheus-client's
multiprocess files in that directory, which ``/metrics`` sums over every
worker. prometheus-client picks its mode when it is first imported, so the
variable must be set before the server starts; gunicorn.conf.py empties the
directory at start-up and marks dead workers.
"""
from __future__ import annotations

import importlib
import json
import logging
import os
import re
import sys
import time
import uuid
from datetime import datetime, timezone

from flask import Blueprint, Flask, Response, g, request
from prometheus_client import CollectorRegistry, Counter, Histogram, multiprocess, values
from prometheus_client.exposition import choose_encoder
from prometheus_client.gc_collector import GCCollector
from prometheus_client.platform_collector import PlatformCollector
from prometheus_client.process_collector import ProcessCollector

from .problems import problem

EXTENSION = "bidstats.ops"
REQUEST_ID_HEADER = "X-Request-ID"
_SANE_REQUEST_ID = re.compile(r"[A-Za-z0-9._-]{1,128}")
UNMATCHED = "unmatched"

SECURITY_HEADERS = {
    "X-Content-Type-Options": "nosniff",
    "Cache-Control": "no-store",
    "Content-Security-Policy": "default-src 'none'; frame-ancestors 'none'",
    "Referrer-Policy": "no-referrer",
}

access_log = logging.getLogger("bidstats.access")
log = logging.getLogger("bidstats")

# ---------------------------------------------------------------- metrics
# The same choice prometheus-client made when it was imported.
MULTIPROCESS = values.ValueClass is not values.MutexValue

REGISTRY = CollectorRegistry()
if not MULTIPROCESS:
    # Process, platform and GC figures only make sense for one process.
    ProcessCollector(registry=REGISTRY)
    PlatformCollector(registry=REGISTRY)
    GCCollector(registry=REGISTRY)

REQUESTS = Counter(
    "bidstats_http_requests",
    "HTTP requests answered, by route template and status code.",
    ["route", "status"],
    registry=REGISTRY,
)
# Buckets from 5 ms up to the default worker timeout (60 s); common practice, no source.
LATENCY = Histogram(
    "bidstats_http_request_duration_seconds",
    "Time from the start of a request to its answer, by route template.",
    ["route"],
    buckets=(0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1.0, 2.5, 5.0, 10.0, 30.0, 60.0),
    registry=REGISTRY,
)


def _metrics_registry():
    if not MULTIPROCESS:
        return REGISTRY
    registry = CollectorRegistry()
    multiprocess.MultiProcessCollector(registry)
    return registry


def _check_multiprocess_dir():
    path = os.environ.get("PROMETHEUS_MULTIPROC_DIR") or os.environ.get("prometheus_multiproc_dir")
    if not path or not os.path.isdir(path) or not os.access(path, os.W_OK):
        raise RuntimeError(f"PROMETHEUS_MULTIPROC_DIR must name a writable directory, not {path!r}")


# ---------------------------------------------------------------- access log
class _StderrHandler(logging.StreamHandler):
    """Writes to whatever sys.stderr is at the time (it may be replaced after start-up)."""

    def __init__(self):
        super().__init__(sys.stderr)

    @property
    def stream(self):
        return sys.stderr

    @stream.setter
    def stream(self, _value):
        pass


def _configure_access_log():
    """One stderr handler, added once per process; the line is the message itself.
    The logger does not propagate, so a root handler cannot print it twice."""
    if not any(isinstance(h, _StderrHandler) for h in access_log.handlers):
        handler = _StderrHandler()
        handler.setFormatter(logging.Formatter("%(message)s"))
        access_log.addHandler(handler)
        access_log.setLevel(logging.INFO)
        access_log.propagate = False


def _utc_iso(ts):
    return datetime.fromtimestamp(ts, timezone.utc).isoformat(timespec="milliseconds").replace("+00:00", "Z")


# ---------------------------------------------------------------- per request
def request_id():
    """This request's id: the caller's X-Request-ID when sane, else a new uuid4 hex."""
    rid = g.get("request_id")
    if rid is None:
        given = request.headers.get(REQUEST_ID_HEADER, "")
        rid = given if _SANE_REQUEST_ID.fullmatch(given) else uuid.uuid4().hex
        g.request_id = rid
        request.environ["bidstats.request_id"] = rid
    return rid


def _start():
    request_id()
    g.ops_started = time.perf_counter()
    g.ops_wall = time.time()


def _finish(response):
    rid = request_id()
    elapsed = time.perf_counter() - g.get("ops_started", time.perf_counter())
    route = request.url_rule.rule if request.url_rule is not None else UNMATCHED

    response.headers[REQUEST_ID_HEADER] = rid
    for name, value in SECURITY_HEADERS.items():
        response.headers.setdefault(name, value)

    try:
        REQUESTS.labels(route=route, status=str(response.status_code)).inc()
        LATENCY.labels(route=route).observe(elapsed)
    except Exception:  # a metrics failure must never cost the caller the answer
        log.exception("recording request metrics failed")

    # The path only: query strings and bodies carry callers' inputs and are never logged.
    access_log.info(json.dumps({
        "time": _utc_iso(g.get("ops_wall", time.time())),
        "request_id": rid,
        "method": request.method,
        "path": request.path,
        "route": route,
        "status": response.status_code,
        "duration_ms": round(elapsed * 1000.0, 3),
        "bytes_out": response.content_length,
        "remote_addr": request.remote_addr,
    }, separators=(",", ":")))
    return response


# ---------------------------------------------------------------- endpoints
bp = Blueprint("ops", __name__)


def core_ready():
    """The numerics core imports and answers a tiny computation: the mean of the
    higher of two standard uniform values is 2/3 (the largest of n is Beta(n, 1),
    mean n/(n+1); from memory)."""
    orderstats = importlib.import_module("service.core.orderstats")
    models = importlib.import_module("service.core.models")
    got = orderstats.rank_summary(models.Uniform(0.0, 1.0), 2, 1).mean
    return got is not None and abs(got - 2.0 / 3.0) <= 1e-12


@bp.get("/readyz")
def readyz():
    try:
        ok = core_ready()
    except Exception:
        log.exception("readiness check failed")
        ok = False
    if not ok:
        return problem(503, "Service Unavailable", "The numerics core failed its readiness check; the error has been logged.")
    return Response('{"status":"ready"}', mimetype="application/json")


@bp.get("/metrics")
def metrics():
    encoder, content_type = choose_encoder(request.headers.get("Accept", ""))
    return Response(encoder(_metrics_registry()), headers={"Content-Type": content_type})


# ---------------------------------------------------------------- wiring
def register(app: Flask):
    """Add the operations layer to ``app``; a second call changes nothing."""
    if app.extensions.get(EXTENSION):
        return app
    if MULTIPROCESS:
        _check_multiprocess_dir()
    _configure_access_log()
    # First of the app's before-request functions, so every later one sees the id.
    app.before_request_funcs.setdefault(None, []).insert(0, _start)
    app.after_request(_finish)
    app.register_blueprint(bp)
    app.extensions[EXTENSION] = True
    return app
