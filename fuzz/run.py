"""`make fuzz`: requests generated from openapi.yaml against a live gunicorn.

Starts gunicorn with the project's gunicorn.conf.py on a free port on 127.0.0.1
with 2 workers, waits for /readyz, runs schemathesis over every operation of
openapi.yaml (the spec's examples, the coverage phase's boundary and negative
cases, and seeded random positive and negative data), prints the number of
requests, stops gunicorn (also on failure or Ctrl-C) and exits non-zero on any
failure.

    FUZZ_SEED           the generation seed (default 5); the same seed sends the same requests
    FUZZ_MAX_EXAMPLES   random cases per operation and mode in the fuzzing phase (default 300)
    FUZZ_WORKERS        concurrent schemathesis workers (default 1: hypothesis, under schemathesis's
                        threads, can fail on its own while describing strategies; see WORKERS below)
    FUZZ_OUT            directory for the gunicorn log and the schemathesis reports
                        (default: a new temporary directory, kept and printed)
    FUZZ_PARTS          which parts run, comma-separated (default "spec,hostile"): "spec" is
                        schemathesis over openapi.yaml, "hostile" the hostile requests of
                        fuzz/hostile_cases.py judged by fuzz/hostile.py (FUZZ_HOSTILE_EXAMPLES random
                        ones, default 150; FUZZ_BUDGET_SECONDS, default 10, the time budget they hold to)
"""
from __future__ import annotations

import os
import re
import signal
import socket
import subprocess
import sys
import tempfile
import time
import urllib.error
import urllib.request
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
BIN = Path(sys.executable).parent
HOST = "127.0.0.1"  # loopback only, never any other address

SEED = int(os.environ.get("FUZZ_SEED", "5"))
MAX_EXAMPLES = int(os.environ.get("FUZZ_MAX_EXAMPLES", "300"))
# One client thread. With two, hypothesis (which schemathesis runs in threads) failed once here
# with "AST constructor recursion depth mismatch" while describing a filtered strategy: an error of
# the tool, not the service, and one that a reproducible run cannot afford.
WORKERS = int(os.environ.get("FUZZ_WORKERS", "1"))
READY_TIMEOUT = 90.0
# Above the worker timeout (gunicorn.conf.py, 30 s by default), so that a stuck request shows as
# gunicorn's own failure (the worker is killed, the connection drops) and not as ours.
REQUEST_TIMEOUT = 75
# The whole schemathesis run may not take longer than this; past it the run is stopped
# and fails (a bounded run: the target is well under 8 minutes on 2 CPUs).
RUN_TIMEOUT = 900

# Checks on every response:
# - not_a_server_error: no 5xx, and no dropped connection;
# - status_code_conformance: the status is one the operation documents;
# - content_type_conformance: the media type is one the operation documents for that status
#   (application/json, application/problem+json, text/plain for quotes and quote errors,
#   text/csv for sweeps, application/yaml for the description);
# - response_schema_conformance: the body matches the documented schema for that status;
# - no_nan_or_infinity, no_server_error_in_batch_items, figures_consistent (independent
#   self-consistency of the figures, fuzz/consistency.py) and answered_within_budget (the time
#   budget + 1 s): our own checks (fuzz/hooks.py).
# Left out:
# - positive_data_acceptance: schema-valid data is often rightly refused with a 422, because
#   the spec states its cross-field rules (high > low, weights summing to 1, a reserve for one
#   bidder on an unbounded model, caps on sweep rows) in prose that JSON Schema cannot carry;
# - negative_data_rejection: /v1/batch takes schema-invalid items by design (each gets its own
#   422 inside a 200 answer, so one bad item cannot sink the rest), which this check counts as
#   a failure on every run;
# - response_headers_conformance: the only documented headers are WWW-Authenticate on 401 (never
#   sent here: the run sets no API keys) and Allow on 405 (the spec's MethodNotAllowed, which no
#   operation lists; the coverage phase's requests with undocumented methods are judged only by
#   unsupported_method), so it has nothing to check;
# - unsupported_method, missing_required_header, use_after_free, ensure_resource_availability,
#   ignored_auth, object_level_authorization: the API has no resources to create or delete
#   and (by default) no authentication, so they have nothing to test.
CHECKS = [
    "not_a_server_error",
    "status_code_conformance",
    "content_type_conformance",
    "response_schema_conformance",
    "no_nan_or_infinity",
    "no_server_error_in_batch_items",
    "figures_consistent",
    "answered_within_budget",
]
# Lines gunicorn's log holds when the service failed, whatever the client saw: the app's own
# log of an unhandled error, gunicorn's worker timeout, a worker killed (SIGKILL: the kernel's
# out-of-memory killer or the master) or dead of another signal or a non-zero exit. A worker
# stopped with SIGTERM at shut-down is logged too, and is no failure.
CRASH_MARKERS = re.compile(r"unhandled error|batch item failed|WORKER TIMEOUT|Traceback|Unhandled exception"
                           r"|SIGKILL|was sent (?!SIGTERM)|exited with code")
PARTS = [p.strip() for p in os.environ.get("FUZZ_PARTS", "spec,hostile").split(",") if p.strip()]
# "examples": every example in openapi.yaml, sent as is (they must answer 200 and conform).
# "coverage": boundary values, missing required fields, wrong types and out-of-range values
#             derived from each schema, positive and negative, deterministic.
# "fuzzing":  MAX_EXAMPLES seeded random cases per operation in each of positive and negative mode.
# "stateful" is left out: no operation's answer feeds another's input (no links, no resources).
PHASES = "examples,coverage,fuzzing"


def free_port():
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind((HOST, 0))
        return s.getsockname()[1]


def get(url, timeout=5.0):
    with urllib.request.urlopen(url, timeout=timeout) as resp:
        return resp.status, resp.read()


def wait_ready(base, server, log_path):
    deadline = time.monotonic() + READY_TIMEOUT
    polls = 0
    while time.monotonic() < deadline:
        if server.poll() is not None:
            raise SystemExit(f"gunicorn exited with {server.returncode} before it was ready; see {log_path}")
        polls += 1
        try:
            status, _ = get(f"{base}/readyz", timeout=2.0)
            if status == 200:
                return polls
        except (urllib.error.URLError, ConnectionError, TimeoutError, OSError):
            pass
        time.sleep(0.25)
    raise SystemExit(f"gunicorn was not ready within {READY_TIMEOUT:.0f} s; see {log_path}")


def server_request_total(base):
    """All requests the server has answered, summed over both workers (bidstats_http_requests_total)."""
    _, body = get(f"{base}/metrics", timeout=10.0)
    total = 0.0
    for line in body.decode().splitlines():
        m = re.match(r"^bidstats_http_requests_total\{[^}]*\}\s+(\S+)", line)
        if m:
            total += float(m.group(1))
    return int(round(total))


def stop(server):
    """SIGTERM to the gunicorn master (graceful), SIGKILL to its group if it lingers."""
    if server.poll() is not None:
        return
    server.send_signal(signal.SIGTERM)
    try:
        server.wait(timeout=40)
    except subprocess.TimeoutExpired:
        os.killpg(server.pid, signal.SIGKILL)
        server.wait()


def _terminated(signum, frame):
    raise SystemExit(128 + signum)  # so that `finally` stops gunicorn on SIGTERM too


def start_server(out, base, port):
    """gunicorn as `make serve` starts it, with the documented defaults, logging to out/gunicorn.log."""
    # The service runs with its documented defaults: openapi.yaml states the caps at
    # their default values, so no BIDSTATS_* setting from the caller's shell applies.
    env = {k: v for k, v in os.environ.items() if not k.startswith("BIDSTATS_")}
    env.update(
        HOST=HOST,
        PORT=str(port),
        WORKERS="2",
        PROMETHEUS_MULTIPROC_DIR=str(out / "prometheus"),
        BIDSTATS_SERVER_ACCESS_LOG="0",
    )
    print(f"fuzz: gunicorn on {base} (2 workers), log {out / 'gunicorn.log'}", flush=True)
    with open(out / "gunicorn.log", "wb") as log:
        return subprocess.Popen(
            [str(BIN / "gunicorn"), "-c", "gunicorn.conf.py", "service:create_app()"],
            cwd=ROOT, env=env, stdout=log, stderr=subprocess.STDOUT, start_new_session=True,
        )


def run_spec(base, out):
    """schemathesis over openapi.yaml against ``base``: its exit code, with a line of counts."""
    count_path = out / "requests-sent.txt"
    count_path.unlink(missing_ok=True)
    before = server_request_total(base)
    cmd = [
        str(BIN / "schemathesis"), "--no-color", "--config-file", str(ROOT / "fuzz" / "schemathesis.toml"),
        "run", str(ROOT / "openapi.yaml"),
        "--url", base,
        "--phases", PHASES,
        "--mode", "all",
        "--checks", ",".join(CHECKS),
        "--max-examples", str(MAX_EXAMPLES),
        "--seed", str(SEED),
        "--generation-database", "none",
        "--workers", str(WORKERS),
        "--request-timeout", str(REQUEST_TIMEOUT),
        "--continue-on-failure",
        # Hypothesis's too_slow health check depends on how fast this machine is at the moment.
        "--suppress-health-check", "too_slow",
        "--report", "junit,ndjson",
        "--report-dir", str(out / "report"),
    ]
    print("fuzz: " + " ".join(cmd[1:]), flush=True)
    fuzz_env = dict(os.environ, SCHEMATHESIS_HOOKS=str(ROOT / "fuzz" / "hooks.py"),
                    FUZZ_REQUEST_COUNT_FILE=str(count_path))
    started = time.monotonic()
    try:
        # Run from the output directory: schemathesis keeps its own files under the working directory.
        code = subprocess.run(cmd, cwd=out, env=fuzz_env, timeout=RUN_TIMEOUT).returncode
    except subprocess.TimeoutExpired:
        print(f"fuzz: schemathesis did not finish within {RUN_TIMEOUT} s", flush=True)
        code = 1
    seconds = time.monotonic() - started
    # The scrape that reads the count is itself counted only after it answers.
    received = server_request_total(base) - before - 1
    sent = int(count_path.read_text()) if count_path.exists() else "?"
    print(f"fuzz: {sent} requests sent by schemathesis, {received} answered by gunicorn, in {seconds:.1f} s; "
          f"seed {SEED}, {MAX_EXAMPLES} random examples per operation and mode", flush=True)
    return code


def judge_log(log_path):
    """1 when gunicorn's log shows a crash line or a replaced worker, else 0."""
    lines = log_path.read_text(errors="replace").splitlines()
    crashes = [line for line in lines if CRASH_MARKERS.search(line)]
    boots = sum("Booting worker" in line for line in lines)
    code = 0
    if crashes:
        print(f"fuzz: gunicorn logged {len(crashes)} crash line(s), e.g. {crashes[0]!r}; see {log_path}", flush=True)
        code = 1
    if boots > 2:
        print(f"fuzz: gunicorn booted {boots} workers for 2 places: a worker died and was replaced; see {log_path}", flush=True)
        code = 1
    return code


def main():
    signal.signal(signal.SIGTERM, _terminated)
    out = Path(os.environ.get("FUZZ_OUT") or tempfile.mkdtemp(prefix="bidstats-fuzz-"))
    out.mkdir(parents=True, exist_ok=True)
    port = free_port()
    base = f"http://{HOST}:{port}"
    started = time.monotonic()
    server = start_server(out, base, port)
    codes = []
    try:
        wait_ready(base, server, out / "gunicorn.log")
        if "spec" in PARTS:
            codes.append(run_spec(base, out))
        if "hostile" in PARTS:
            import hostile  # fuzz/hostile.py, beside this file
            codes.append(hostile.run(base, out))
        alive = server.poll() is None
    finally:
        stop(server)
    codes.append(judge_log(out / "gunicorn.log"))
    if not alive:
        print("fuzz: gunicorn was no longer running at the end", flush=True)
        codes.append(1)
    print(f"fuzz: {' and '.join(PARTS)} in {time.monotonic() - started:.1f} s with start-up and shut-down; "
          f"reports and log in {out}", flush=True)
    return next((c for c in codes if c), 0)


if __name__ == "__main__":
    sys.exit(main())
