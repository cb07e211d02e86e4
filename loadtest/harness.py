"""Shared machinery for the load and fault tests (`make loadtest`); conftest.py
makes its fixtures available to every test here.

Everything here stays on the loopback interface: gunicorn, nginx and wrk bind
or connect to 127.0.0.1 only. Every load run is bounded twice, by wrk's own
duration (-d, at most MAX_WRK_SECONDS) and by a per-thread request cap in the
Lua script (the thread stops sending once it has that many answers), and wrk
itself runs under a subprocess timeout, so no loop can outlive its test.

Servers are started the way `make serve` starts them: the venv's gunicorn with
the repository's gunicorn.conf.py, configured through the environment (HOST,
PORT, WORKERS). Their stderr (gunicorn's log and both access lines) goes to a
file that the tests read for worker pids and "WORKER TIMEOUT" lines.
"""
from __future__ import annotations

import json
import os
import platform
import shutil
import signal
import socket
import subprocess
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path

import pytest
import requests

ROOT = Path(__file__).resolve().parents[1]
GUNICORN = Path(sys.executable).parent / "gunicorn"
LOOPBACK = "127.0.0.1"

# Hard bounds on any one wrk run (common practice, no source): nothing here
# needs more, and the budget of the whole suite is about 60 s of load.
MAX_WRK_SECONDS = 15
MAX_WRK_REQUESTS_PER_THREAD = 200_000

UNIFORM6_SECOND_PRICE = {"bidder_values": {"family": "uniform", "low": 0, "high": 1}, "bidders": 6, "rules": ["second_price"]}
LOGNORMAL6_ALL_RULES = {"bidder_values": {"family": "lognormal", "median": 62000, "sigma": 0.35}, "bidders": 6,
                        "rules": ["first_price", "second_price", "ascending", "descending", "all_pay"]}


# The invented stress mixture that the hostile fuzz part sends too (fuzz/hostile_cases.py: stdlib only).
sys.path.insert(0, str(ROOT / "fuzz"))
from hostile_cases import mixture as stress_mixture  # noqa: E402, F401  (re-exported for the load tests)


def free_port():
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind((LOOPBACK, 0))
        return s.getsockname()[1]


def tool(name):
    """Path of a system tool; fail (not skip) when missing, so CI cannot pass vacuously."""
    path = shutil.which(name) or next((p for p in (f"/usr/sbin/{name}", f"/usr/bin/{name}") if os.access(p, os.X_OK)), None)
    if path is None:
        pytest.fail(f"{name} is not installed; `make loadtest` installs it (apt-get install -y wrk nginx)")
    return path


def child_pids(pid):
    """Pids whose parent is ``pid`` (the gunicorn master's workers), from /proc."""
    out = set()
    for entry in os.listdir("/proc"):
        if not entry.isdigit():
            continue
        try:
            with open(f"/proc/{entry}/stat", "rb") as f:
                stat = f.read().decode(errors="replace")
        except OSError:
            continue
        # Field 4 (ppid) follows the parenthesised command name, which may hold spaces.
        rest = stat[stat.rfind(")") + 2:].split()
        if len(rest) > 1 and rest[0] != "Z" and int(rest[1]) == pid:
            out.add(int(entry))
    return out


def _socket_inodes(pid):
    out = set()
    try:
        fds = os.listdir(f"/proc/{pid}/fd")
    except OSError:
        return out
    for fd in fds:
        try:
            target = os.readlink(f"/proc/{pid}/fd/{fd}")
        except OSError:
            continue
        if target.startswith("socket:["):
            out.add(target)
    return out


def busy_workers(master, pids):
    """The workers holding a socket besides the master's listeners: a connection
    accepted and not yet closed, so a request in flight (or just answered; a
    sync worker closes each connection after its answer)."""
    listeners = _socket_inodes(master)
    return {pid for pid in pids if _socket_inodes(pid) - listeners}


def wait_until(predicate, timeout, interval=0.1):
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        value = predicate()
        if value:
            return value
        time.sleep(interval)
    return predicate()


@dataclass
class Gunicorn:
    """One gunicorn master with the shipped gunicorn.conf.py on a free loopback port."""

    log_path: Path
    workers: int = 2
    env_extra: dict = field(default_factory=dict)
    port: int = 0
    proc: subprocess.Popen | None = None

    @property
    def url(self):
        return f"http://{LOOPBACK}:{self.port}"

    def start(self, timeout=60):
        self.port = free_port()
        env = {k: v for k, v in os.environ.items() if not k.startswith("BIDSTATS_") and k != "PROMETHEUS_MULTIPROC_DIR"}
        env.update(HOST=LOOPBACK, PORT=str(self.port), WORKERS=str(self.workers), **self.env_extra)
        self._log = open(self.log_path, "wb")
        # Its own session, so that stopping "entirely" can signal master and workers at once.
        self.proc = subprocess.Popen([str(GUNICORN), "-c", "gunicorn.conf.py", "service:create_app()"], cwd=ROOT, env=env,
                                     stdout=self._log, stderr=subprocess.STDOUT, start_new_session=True)
        deadline = time.monotonic() + timeout
        while True:
            if self.proc.poll() is not None:
                pytest.fail(f"gunicorn exited with {self.proc.returncode}:\n{self.log_text()[-3000:]}")
            if len(self.workers_pids()) == self.workers and self._answers():
                break
            if time.monotonic() > deadline:
                pytest.fail(f"gunicorn did not answer /healthz within {timeout} s")
            time.sleep(0.1)
        # Every worker imports the app itself (no preload): wait until each has booted
        # and answered, so that no measurement includes a worker's start-up.
        for _ in range(4 * self.workers):
            self._answers()
        return self

    def _answers(self):
        try:
            return requests.get(self.url + "/healthz", timeout=5).status_code == 200
        except requests.RequestException:
            return False

    def workers_pids(self):
        return child_pids(self.proc.pid) if self.proc and self.proc.poll() is None else set()

    def log_text(self):
        self._log.flush()
        return self.log_path.read_text(errors="replace")

    def kill_all(self):
        """SIGKILL master and workers together: the instance is gone at once."""
        if self.proc and self.proc.poll() is None:
            os.killpg(self.proc.pid, signal.SIGKILL)
            self.proc.wait(timeout=15)

    def stop(self):
        if self.proc and self.proc.poll() is None:
            self.proc.terminate()
            try:
                self.proc.wait(timeout=40)
            except subprocess.TimeoutExpired:
                os.killpg(self.proc.pid, signal.SIGKILL)
                self.proc.wait(timeout=15)
        if self.proc:
            try:
                os.killpg(self.proc.pid, signal.SIGKILL)  # any worker the master left behind
            except ProcessLookupError:
                pass
        if getattr(self, "_log", None):
            self._log.close()


@pytest.fixture()
def gunicorn_factory(tmp_path):
    started = []

    def make(name="gunicorn", **kw):
        g = Gunicorn(log_path=tmp_path / f"{name}.log", **kw)
        started.append(g)
        return g.start()

    yield make
    for g in started:
        g.stop()


# ---------------------------------------------------------------- wrk
_LUA = r"""
-- Generated by loadtest/conftest.py: one request shape, per-thread counts, a summary line.
local body_path, max_requests = "@BODY@", @MAX@
if body_path ~= "" then
  local f = assert(io.open(body_path, "rb")); wrk.body = f:read("*a"); f:close()
  wrk.method = "POST"
  wrk.headers["Content-Type"] = "application/json"
end
local threads = {}
function setup(thread) table.insert(threads, thread) end
function init(args) responses = 0; non2xx = 0 end
function response(status, headers, body)
  responses = responses + 1
  if status < 200 or status > 299 then non2xx = non2xx + 1 end
  if responses >= max_requests then wrk.thread:stop() end
end
function done(summary, latency, requests)
  local n2 = 0
  for _, t in ipairs(threads) do n2 = n2 + t:get("non2xx") end
  local e = summary.errors
  io.write(string.format('LOADTEST_JSON {"requests":%d,"duration_us":%d,"bytes":%d,"connect":%d,"read":%d,'
    .. '"write":%d,"status_errors":%d,"timeout":%d,"non2xx":%d,"mean_us":%.1f,"p50_us":%d,"p90_us":%d,'
    .. '"p99_us":%d,"max_us":%d}\n',
    summary.requests, summary.duration, summary.bytes, e.connect, e.read, e.write, e.status, e.timeout, n2,
    latency.mean, latency:percentile(50), latency:percentile(90), latency:percentile(99), latency.max))
end
"""


@dataclass
class WrkResult:
    requests: int
    duration_us: int
    bytes: int
    connect: int
    read: int
    write: int
    status_errors: int
    timeout: int
    non2xx: int
    mean_us: float
    p50_us: int
    p90_us: int
    p99_us: int
    max_us: int
    raw: str = ""

    @property
    def rps(self):
        return self.requests / (self.duration_us / 1e6) if self.duration_us else 0.0

    @property
    def socket_errors(self):
        return self.connect + self.read + self.write + self.timeout


class Wrk:
    """A bounded wrk run against a loopback URL, started now and read with result()."""

    def __init__(self, tmp_path, url, body=None, seconds=5, connections=4, threads=1, timeout_s=10):
        assert url.startswith(f"http://{LOOPBACK}:"), "load goes to loopback only"
        assert 0 < seconds <= MAX_WRK_SECONDS
        self.seconds = seconds
        script = tmp_path / f"wrk-{time.monotonic_ns()}.lua"
        body_path = ""
        if body is not None:
            body_path = str(script.with_suffix(".json"))
            Path(body_path).write_text(json.dumps(body, separators=(",", ":")))
        script.write_text(_LUA.replace("@BODY@", body_path).replace("@MAX@", str(MAX_WRK_REQUESTS_PER_THREAD)))
        self.cmd = [tool("wrk"), f"-t{threads}", f"-c{connections}", f"-d{seconds}s", f"--timeout={timeout_s}s",
                    "-s", str(script), url]
        self.proc = subprocess.Popen(self.cmd, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)

    def result(self):
        try:
            out, _ = self.proc.communicate(timeout=self.seconds + 30)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            out, _ = self.proc.communicate()
            pytest.fail(f"wrk overran its {self.seconds} s run:\n{out}")
        line = next((l for l in out.splitlines() if l.startswith("LOADTEST_JSON ")), None)
        if self.proc.returncode != 0 or line is None:
            pytest.fail(f"wrk failed ({self.proc.returncode}): {' '.join(self.cmd)}\n{out}")
        return WrkResult(**json.loads(line[len("LOADTEST_JSON "):]), raw=out)


@pytest.fixture()
def wrk(tmp_path):
    runs = []

    def run(url, **kw):
        w = Wrk(tmp_path, url, **kw)
        runs.append(w)
        return w

    yield run
    for w in runs:
        if w.proc.poll() is None:
            w.proc.kill()
            w.proc.wait()


# ---------------------------------------------------------------- throughput
# The request shapes measured side by side: the trivial endpoint (gunicorn, Flask and
# the operations layer with no work), a value model whose order statistics have closed
# forms, and a numeric one with all five rules. Shared by the load test and `make bench`.
THROUGHPUT_SHAPES = (
    ("healthz", "/healthz", None),
    ("closed form", "/v1/revenue", UNIFORM6_SECOND_PRICE),
    ("numeric", "/v1/revenue", LOGNORMAL6_ALL_RULES),
)
THROUGHPUT_TARGETS = {"closed form": 0.50, "numeric": 0.25}  # fractions of /healthz's requests per second


def combine(rounds):
    """One WrkResult from several runs of the same shape: counts and time summed,
    the mean weighted by requests, max the largest, and each latency percentile
    the median of the runs' (wrk gives percentiles per run, not their histograms)."""
    def median(xs):
        xs = sorted(xs)
        return xs[len(xs) // 2]
    total = sum(r.requests for r in rounds)
    sums = {f: sum(getattr(r, f) for r in rounds)
            for f in ("requests", "duration_us", "bytes", "connect", "read", "write", "status_errors", "timeout", "non2xx")}
    return WrkResult(**sums, mean_us=sum(r.mean_us * r.requests for r in rounds) / total if total else 0.0,
                     p50_us=median([r.p50_us for r in rounds]), p90_us=median([r.p90_us for r in rounds]),
                     p99_us=median([r.p99_us for r in rounds]), max_us=max(r.max_us for r in rounds),
                     raw="\n".join(r.raw for r in rounds))


def measure_throughput(base_url, start_wrk, warm_up_s=1, measure_s=6, connections=4, rounds=3):
    """Each shape under wrk, after a warm-up of each: ({name: WrkResult}, lines of a report).
    The shapes take turns in ``rounds`` rounds of measure_s / rounds seconds each, so that
    a slow spell of a shared machine weighs on every shape alike, not on whichever shape
    ran then. ``start_wrk(url, body=, seconds=, connections=)`` starts one bounded run."""
    for _, path, body in THROUGHPUT_SHAPES:
        start_wrk(base_url + path, body=body, seconds=warm_up_s, connections=connections).result()
    load_before = os.getloadavg()[0]
    per_round = max(measure_s // rounds, 1)
    runs = {name: [] for name, _, _ in THROUGHPUT_SHAPES}
    for _ in range(rounds):
        for name, path, body in THROUGHPUT_SHAPES:
            runs[name].append(start_wrk(base_url + path, body=body, seconds=per_round, connections=connections).result())
    results = {name: combine(rs) for name, rs in runs.items()}
    base = results["healthz"].rps
    lines = [f"throughput on {platform.node() or 'this machine'}, {time.strftime('%Y-%m-%d')}: gunicorn WORKERS=2, "
             f"wrk -t1 -c{connections}, {rounds} rounds of {per_round} s per shape taken in turn, loopback, {os.cpu_count()} CPUs, "
             f"1-minute load average {load_before:.2f} before and {os.getloadavg()[0]:.2f} after",
             f"{'request':<12} {'req/s':>8} {'ratio':>6} {'p50 ms':>8} {'p90 ms':>8} {'p99 ms':>8} {'errors':>7}  target"]
    for name, r in results.items():
        ratio = r.rps / base if base else 0.0
        target = THROUGHPUT_TARGETS.get(name)
        verdict = "" if target is None else f">= {target:.0%}: {'PASS' if ratio >= target else 'MISS'}"
        lines.append(f"{name:<12} {r.rps:>8.0f} {ratio:>6.2f} {r.p50_us / 1e3:>8.2f} {r.p90_us / 1e3:>8.2f} "
                     f"{r.p99_us / 1e3:>8.2f} {r.socket_errors + r.non2xx:>7}  {verdict}")
    lines.append("(latency percentiles: the median of the rounds')")
    return results, lines


def report(lines):
    """Print a block that pytest shows with -s and in the captured output of a failure."""
    text = "\n".join(lines)
    print("\n" + text, flush=True)
    return text
