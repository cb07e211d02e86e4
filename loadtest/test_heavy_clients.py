"""Two clients hammering with the heaviest accepted request while a third keeps checking in.

One gunicorn with the shipped gunicorn.conf.py and WORKERS=2 (the default of `make serve`)
on a free loopback port. The service runs heavy requests in a bounded number of slots per
instance (BIDSTATS_HEAVY_SLOTS, by default about half the workers and at least one), so
that /healthz and ordinary requests keep answering while heavy ones run; a heavy request
that finds every slot taken gets a 503 with Retry-After. This test holds it to that:

1. The heavy request: each candidate (a 50-component mixture through /v1/revenue with
   10 bidders; a nested mixture's bids at 2,001 points; /v1/revenue over a kernel-smoothed
   sample of 10,000 values) is sent once, alone; the slowest that answers 200 is used,
   and the test prints which.
2. Idle: one client sends ordinary requests (POST /v1/revenue, lognormal values, 6 bidders,
   all five rules) for IDLE_S seconds.
3. Under load, for LOAD_S seconds: two clients send the heavy request back to back,
   honouring a Retry-After only as a short sleep (BUSY_SLEEP_S) so that the pressure
   stays on; a third client probes /healthz every PROBE_EVERY_S (PROBE_TIMEOUT_S timeout)
   and sends ordinary requests in between.

Asserted: every /healthz probe answers 200 in time; no worker is killed or replaced (the
worker pids, and gunicorn's log: no WORKER TIMEOUT, SIGKILL or unhandled error); the heavy
clients only ever get 200, 422 or a 503 carrying Retry-After. Printed, not asserted: the
ordinary requests' rate under load over the idle rate, with PASS or MISS against the
target of at least half, and the share of /healthz probes that answered. Every loop is
bounded by a request count and a deadline; all traffic goes to 127.0.0.1.
"""
from __future__ import annotations

import random
import re
import threading
import time
from collections import Counter

import pytest
import requests

from harness import LOGNORMAL6_ALL_RULES, LOOPBACK, report, stress_mixture

IDLE_S = 8
LOAD_S = 30
PROBE_EVERY_S = 0.5
PROBE_TIMEOUT_S = 2
ORDINARY_TIMEOUT_S = 2        # as the probe's: a stuck ordinary request delays the next probe no longer
BUSY_SLEEP_S = 0.2
HEAVY_TIMEOUT_S = 90          # above the worker timeout (gunicorn.conf.py): a stuck request ends as gunicorn's failure
MAX_REQUESTS_PER_LOOP = 100_000
TARGET_RATIO = 0.5            # ordinary requests under load: at least half the idle rate (the target)
CRASH_LINES = re.compile(r"WORKER TIMEOUT|SIGKILL|unhandled error|batch item failed|Traceback|was sent (?!SIGTERM)|exited with code")


def _kernel_sample(n=10_000, seed=3):
    """n invented past values (a seeded lognormal draw)."""
    rng = random.Random(seed)
    return [round(rng.lognormvariate(11.0, 0.4), 2) for _ in range(n)]


CANDIDATES = (
    ("50-component mixture, /v1/revenue, 10 bidders", "/v1/revenue",
     {"bidder_values": stress_mixture(50), "bidders": 10}),
    ("nested mixture (2 x 25), /v1/bid-strategy, 2,001 points", "/v1/bid-strategy",
     {"bidder_values": {"family": "mixture", "components": [{"weight": 0.5, "model": stress_mixture(25)},
                                                            {"weight": 0.5, "model": stress_mixture(25, 1.7)}]},
      "bidders": 10, "points": 2001}),
    ("kernel-smoothed sample of 10,000, /v1/revenue, 10 bidders", "/v1/revenue",
     {"bidder_values": {"family": "empirical", "sample": _kernel_sample()}, "bidders": 10}),
)


def _post(url, body, timeout):
    """(status, Retry-After or None, seconds); status None for a dropped or timed-out request."""
    assert url.startswith(f"http://{LOOPBACK}:"), "load goes to loopback only"
    t = time.perf_counter()
    try:
        r = requests.post(url, json=body, timeout=timeout)
        return r.status_code, r.headers.get("Retry-After"), time.perf_counter() - t
    except requests.RequestException:
        return None, None, time.perf_counter() - t


def pick_heavy(g):
    """Each candidate alone: the slowest that answers 200, and the lines of a table."""
    lines, best = [f"{'heavy candidate':<60} {'status':>6} {'seconds':>8}"], None
    for name, path, body in CANDIDATES:
        status, _, dt = _post(g.url + path, body, HEAVY_TIMEOUT_S)
        lines.append(f"{name:<60} {str(status):>6} {dt:>8.2f}")
        if status == 200 and (best is None or dt > best[3]):
            best = (name, path, body, dt)
    if best is None:
        report(lines)
        pytest.fail("no heavy candidate answered 200 alone; nothing to load the service with")
    lines.append(f"heavy request used: {best[0]} ({best[3]:.2f} s alone)")
    return best, lines


def ordinary_rate(url, seconds):
    """One client's ordinary requests for ``seconds``: (answered 200, other outcomes, seconds taken)."""
    ok, other, started = 0, Counter(), time.monotonic()
    for _ in range(MAX_REQUESTS_PER_LOOP):
        if time.monotonic() - started >= seconds:
            break
        status, _, _ = _post(url + "/v1/revenue", LOGNORMAL6_ALL_RULES, ORDINARY_TIMEOUT_S)
        if status == 200:
            ok += 1
        else:
            other[status] += 1
    return ok, other, time.monotonic() - started


def heavy_client(url, body, deadline, out):
    """The heavy request back to back until the deadline; a Retry-After costs only BUSY_SLEEP_S."""
    for _ in range(MAX_REQUESTS_PER_LOOP):
        if time.monotonic() >= deadline:
            return
        status, retry_after, dt = _post(url, body, HEAVY_TIMEOUT_S)
        out.append((status, retry_after, dt))
        if status == 503 and retry_after is not None:
            time.sleep(BUSY_SLEEP_S)


def third_client(url, deadline, probes, ordinary, span):
    """A /healthz probe every PROBE_EVERY_S, ordinary requests in between (at least one
    between two probes, so that slow probes still leave a throughput to report).
    ``span["seconds"]`` becomes the time the client ran."""
    started = next_probe = time.monotonic()
    probed = False
    for _ in range(MAX_REQUESTS_PER_LOOP):
        now = time.monotonic()
        span["seconds"] = now - started
        if now >= deadline:
            return
        probed = now >= next_probe and not probed
        if probed:
            next_probe = max(next_probe, now) + PROBE_EVERY_S
            t = time.perf_counter()
            try:
                ok = requests.get(url + "/healthz", timeout=PROBE_TIMEOUT_S).status_code == 200
            except requests.RequestException:
                ok = False
            probes.append((ok, time.perf_counter() - t))
            continue
        status, _, _ = _post(url + "/v1/revenue", LOGNORMAL6_ALL_RULES, ORDINARY_TIMEOUT_S)
        ordinary[status] += 1


def under_load(g, path, body):
    """Two heavy clients and the third client for LOAD_S seconds:
    (heavy outcomes, probes, ordinary outcomes, seconds the third client ran)."""
    heavy, probes, ordinary, span = [[], []], [], Counter(), {"seconds": 0.0}
    deadline = time.monotonic() + LOAD_S
    threads = [threading.Thread(target=heavy_client, args=(g.url + path, body, deadline, heavy[i]), daemon=True) for i in range(2)]
    threads.append(threading.Thread(target=third_client, args=(g.url, deadline, probes, ordinary, span), daemon=True))
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=LOAD_S + HEAVY_TIMEOUT_S + 10)
    assert not any(t.is_alive() for t in threads), "a client outlived its deadline and its request timeout"
    return heavy[0] + heavy[1], probes, ordinary, span["seconds"]


def _summary(heavy, probes, ordinary, idle, loaded_s):
    idle_ok, idle_other, idle_s = idle
    idle_rate = idle_ok / idle_s if idle_s else 0.0
    load_rate = ordinary[200] / loaded_s if loaded_s else 0.0
    ratio = load_rate / idle_rate if idle_rate else 0.0
    answered = sum(ok for ok, _ in probes)
    statuses = Counter(s for s, _, _ in heavy)
    worst = max((dt for s, _, dt in heavy if s != 503), default=0.0)
    return [
        f"idle: {idle_ok} ordinary requests in {idle_s:.1f} s ({idle_rate:.0f}/s), other outcomes {dict(idle_other)}",
        f"under load: {ordinary[200]} ordinary requests answered 200 in {loaded_s:.1f} s ({load_rate:.0f}/s), "
        f"other outcomes {dict((k, v) for k, v in ordinary.items() if k != 200)}",
        f"ordinary throughput under load / idle: {ratio:.2f}, target >= {TARGET_RATIO:.2f}: {'PASS' if ratio >= TARGET_RATIO else 'MISS'}",
        f"/healthz probes: {answered} of {len(probes)} answered 200 within {PROBE_TIMEOUT_S} s "
        f"({answered / len(probes) if probes else 0:.1%}); slowest {max((dt for _, dt in probes), default=0):.3f} s",
        f"heavy clients: {len(heavy)} requests, statuses {dict(statuses)}, slowest non-503 answer {worst:.2f} s",
    ]


def test_two_heavy_clients_leave_room_for_health_and_ordinary_requests(gunicorn_factory):
    g = gunicorn_factory("heavy-clients", workers=2)
    pids = g.workers_pids()
    log_before = len(g.log_text())
    (name, path, body, _), lines = pick_heavy(g)
    idle = ordinary_rate(g.url, IDLE_S)
    heavy, probes, ordinary, loaded_s = under_load(g, path, body)
    time.sleep(0.3)  # a killed worker's replacement is forked within this (test_caps measured about 0.1 s)
    report(lines + _summary(heavy, probes, ordinary, idle, loaded_s))

    crashes = [line for line in g.log_text()[log_before:].splitlines() if CRASH_LINES.search(line)]
    assert not crashes, f"gunicorn's log shows a failed worker or request: {crashes[:3]}"
    assert g.workers_pids() == pids, f"the workers changed from {pids} to {g.workers_pids()}"
    failed = [dt for ok, dt in probes if not ok]
    assert probes and not failed, f"{len(failed)} of {len(probes)} /healthz probes failed (timeout {PROBE_TIMEOUT_S} s)"
    bad = Counter(s for s, retry_after, _ in heavy if s not in (200, 422) and not (s == 503 and retry_after))
    assert not bad, f"the heavy clients got statuses outside 200, 422 and 503 with Retry-After: {dict(bad)}"
