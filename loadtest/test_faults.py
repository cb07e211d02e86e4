"""Faults under load: a worker killed, and a whole instance gone behind nginx.

Worker kill: one gunicorn (shipped gunicorn.conf.py, WORKERS=2) under wrk; one
worker gets SIGKILL mid-run. The master must fork a replacement (a new worker
pid), and the only failures allowed are the requests in flight on the killed
worker. gunicorn's default sync worker answers one request at a time, so that
is at most one request (gunicorn's documentation, "Design": sync workers
handle a single request at a time). Connections still waiting in the listen
backlog belong to the shared socket, not to the worker, and are answered by the
other one.

Failover: two gunicorn instances behind nginx, configured by docker/nginx.conf
itself with only its addresses substituted (upstream servers to the two
loopback ports, the listen port, and scratch paths for nginx's temp files), so
that the shipped retry policy is what is tested. One instance goes during a
wrk run: stopped (SIGTERM), or crashed (SIGKILL to master and workers).
nginx's proxy_next_upstream (error, timeout, non_idempotent) sends the failed
attempt to the other instance, so every request still gets a 2xx, except, in
a crash, an answer already begun (see the test's docstring). Retrying a POST is
safe because every endpoint only computes (the comment in nginx.conf says so).
"""
from __future__ import annotations

import json
import os
import re
import signal
import subprocess
import time

import pytest
import requests

from harness import LOGNORMAL6_ALL_RULES, LOOPBACK, ROOT, busy_workers, free_port, report, tool, wait_until

NGINX_CONF = ROOT / "docker" / "nginx.conf"

KILL_RUN_S = 7
KILL_AT_S = 2.5
KILL_CONNECTIONS = 4
IN_FLIGHT_PER_SYNC_WORKER = 1

FAILOVER_RUN_S = 6
FAILOVER_AT_S = 2.5
FAILOVER_CONNECTIONS = 4


def test_killed_worker_is_replaced_and_costs_only_its_request(gunicorn_factory, wrk):
    g = gunicorn_factory("kill", workers=2)
    before = g.workers_pids()
    assert len(before) == 2

    run = wrk(g.url + "/v1/revenue", body=LOGNORMAL6_ALL_RULES, seconds=KILL_RUN_S, connections=KILL_CONNECTIONS)
    time.sleep(KILL_AT_S)
    # Kill a worker caught holding a connection, so the kill lands on a request in
    # flight (polled for at most 2 s; failing that, any worker).
    busy = wait_until(lambda: busy_workers(g.proc.pid, before), timeout=2, interval=0.002)
    victim = min(busy) if busy else min(before)
    os.kill(victim, signal.SIGKILL)
    killed_at = time.monotonic()

    def replacement():
        now = g.workers_pids()
        return now if len(now) == 2 and victim not in now else None
    replaced = wait_until(replacement, timeout=20)
    replaced_after = time.monotonic() - killed_at
    r = run.result()

    assert replaced, f"the master did not replace worker {victim}: workers now {g.workers_pids()}"
    (new_pid,) = replaced - before
    # The replacement boots and answers: its pid appears in gunicorn's access lines
    # ("[date] [pid] [INFO] ..."); a bounded number of follow-up requests finds it.
    def served_by_new():
        requests.post(g.url + "/v1/revenue", json=LOGNORMAL6_ALL_RULES, timeout=30).raise_for_status()
        return re.search(rf"\[{new_pid}\] \[INFO\] 127\.0\.0\.1", g.log_text())
    assert wait_until(served_by_new, timeout=20, interval=0.05), f"new worker {new_pid} never answered"

    errors = r.socket_errors + r.non2xx
    report([f"worker kill: {r.requests} requests in {r.duration_us / 1e6:.1f} s ({r.rps:.0f}/s), "
            f"socket errors {r.socket_errors} (connect {r.connect}, read {r.read}, write {r.write}, timeout {r.timeout}), "
            f"non-2xx {r.non2xx}; worker {victim} ({'caught mid-request' if busy else 'not seen busy'}) replaced by {new_pid} within {replaced_after:.2f} s; "
            f"p99 {r.p99_us / 1e3:.1f} ms, max {r.max_us / 1e3:.1f} ms"])
    assert r.non2xx == 0, "a killed worker must cost a connection, not an error answer"
    assert errors <= IN_FLIGHT_PER_SYNC_WORKER, f"{errors} failed requests; only the killed worker's one may fail"
    assert r.requests > 100
    assert requests.get(g.url + "/healthz", timeout=10).status_code == 200
    assert "WORKER TIMEOUT" not in g.log_text()


# ---------------------------------------------------------------- failover behind nginx
def nginx_conf_for(ports, listen_port, scratch):
    """docker/nginx.conf with the replicas' addresses, the listen port and temp paths substituted."""
    text = NGINX_CONF.read_text()
    servers = re.findall(r"^\s*server bidstats-\d+:8000 [^;]*;\n", text, flags=re.M)
    assert len(servers) >= len(ports), "nginx.conf's upstream changed shape; update this substitution"
    for i, line in enumerate(servers):
        text = text.replace(line, line.replace(f"bidstats-{i + 1}:8000", f"{LOOPBACK}:{ports[i]}") if i < len(ports) else "", 1)
    text, n = re.subn(r"^(\s*)listen 80;", rf"\1listen {LOOPBACK}:{listen_port};", text, flags=re.M)
    assert n == 1, "nginx.conf's listen line changed; update this substitution"
    temp = "".join(f"    {kind}_temp_path {scratch / kind};\n" for kind in ("client_body", "proxy", "fastcgi", "uwsgi", "scgi"))
    text, n = re.subn(r"^http \{\n", "http {\n" + temp, text, flags=re.M)
    assert n == 1
    # One wrk client sends hundreds of requests a second: the per-client limits,
    # which are not under test here, are lifted.
    text, n = re.subn(r"^\s*limit_(req|conn) (zone=)?bidstats_\w+[^;]*;\n", "", text, flags=re.M)
    assert n == 2, "nginx.conf's per-client limits changed; update this substitution"
    # What must not have changed: the retry policy under test.
    assert "proxy_next_upstream error timeout http_502 http_503 non_idempotent;" in text
    return text


@pytest.fixture()
def nginx_factory(tmp_path):
    procs = []

    def start(ports):
        nginx = tool("nginx")
        listen = free_port()
        scratch = tmp_path / "nginx"
        scratch.mkdir()
        conf = scratch / "nginx.conf"
        conf.write_text(nginx_conf_for(ports, listen, scratch))
        log = open(tmp_path / "nginx.log", "wb")
        args = [nginx, "-p", str(scratch), "-c", str(conf), "-e", str(scratch / "error.log"),
                "-g", f"daemon off; pid {scratch / 'nginx.pid'};"]
        check = subprocess.run(args + ["-t"], capture_output=True, text=True, timeout=30)
        assert check.returncode == 0, check.stderr
        proc = subprocess.Popen(args, stdout=log, stderr=log)
        procs.append((proc, log))
        url = f"http://{LOOPBACK}:{listen}"

        def up():
            try:
                return requests.get(url + "/healthz", timeout=5).status_code == 200
            except requests.RequestException:
                return False
        assert wait_until(up, timeout=20), "nginx did not come up"
        return url, tmp_path / "nginx.log", log

    yield start
    for proc, log in procs:
        if proc.poll() is None:
            proc.send_signal(signal.SIGQUIT)   # graceful stop
            try:
                proc.wait(timeout=15)
            except subprocess.TimeoutExpired:
                proc.kill()
                proc.wait()
        log.close()


def _access_lines(path):
    out = []
    for line in path.read_text(errors="replace").splitlines():
        if line.startswith("{"):
            try:
                out.append(json.loads(line))
            except ValueError:
                pass
    return out


@pytest.mark.parametrize("how", ["stop", "crash"])
def test_nginx_fails_over_when_an_instance_goes(gunicorn_factory, nginx_factory, wrk, how):
    """stop: SIGTERM to the master, the way an instance is stopped (docker stop,
    systemd): it stops accepting, finishes what it holds and exits. No request may
    be lost. crash: SIGKILL to master and workers at once. A request whose answer
    had begun to reach nginx (status line and headers sent, body not) cannot be
    retried, because nginx has already passed the headers on to the client
    (nginx documentation, proxy_next_upstream: "passing a request to the next
    server is only possible if nothing has been sent to a client yet"). So a
    crash may cost at most one request per worker of the dead instance, each
    one logged by nginx as "upstream prematurely closed connection while
    reading upstream"; every other request must still get a 2xx."""
    a = gunicorn_factory("instance-a", workers=2)
    b = gunicorn_factory("instance-b", workers=2)
    url, log_path, log = nginx_factory([a.port, b.port])

    run = wrk(url + "/v1/revenue", body=LOGNORMAL6_ALL_RULES, seconds=FAILOVER_RUN_S, connections=FAILOVER_CONNECTIONS)
    time.sleep(FAILOVER_AT_S)
    if how == "stop":
        a.proc.terminate()
        a.proc.wait(timeout=40)   # gunicorn.conf.py's graceful timeout is 30 s
    else:
        a.kill_all()
    r = run.result()
    after = requests.post(url + "/v1/revenue", json=LOGNORMAL6_ALL_RULES, timeout=30)
    log.flush()

    lines = [x for x in _access_lines(log_path) if x.get("uri") == "/v1/revenue"]
    a_addr, b_addr = f"{LOOPBACK}:{a.port}", f"{LOOPBACK}:{b.port}"
    served_a = sum(1 for x in lines if x["upstream"] == a_addr)
    served_b = sum(1 for x in lines if x["upstream"] == b_addr)
    retried = [x for x in lines if ", " in x["upstream"]]
    # 499 is nginx's note that the client closed first: wrk closes its connections
    # when its time is up, with at most one request in flight on each.
    closed_by_wrk = [x for x in lines if x["status"] == 499]
    statuses = sorted({x["status"] for x in lines if x["status"] != 499})
    # nginx.conf sends its error log to stderr too, so it shares the file with the access log.
    cut_short = log_path.read_text(errors="replace").count("upstream prematurely closed connection while reading upstream,")
    lost = r.socket_errors + r.non2xx
    report([f"failover ({how}): {r.requests} requests in {r.duration_us / 1e6:.1f} s ({r.rps:.0f}/s) through nginx; "
            f"instance A {'stopped (SIGTERM)' if how == 'stop' else 'killed (SIGKILL)'} at {FAILOVER_AT_S:.1f} s; "
            f"lost {lost} (socket errors {r.socket_errors}, non-2xx {r.non2xx}); answers cut short after their headers: {cut_short}; "
            f"nginx log: {served_a} answered by A, {served_b} by B, {len(retried)} retried on the other"
            + (f" (e.g. {retried[0]['upstream']} -> {retried[0]['upstream_status']})" if retried else "")])

    assert r.non2xx == 0, f"nginx answered an error: {r}"
    if how == "stop":
        assert lost == 0, f"requests were lost: {r}"
    else:
        assert lost <= cut_short <= a.workers, f"lost {lost}, cut short {cut_short}: only answers already begun may be lost"
    assert r.requests > 100
    assert statuses == [200], statuses
    assert len(closed_by_wrk) <= FAILOVER_CONNECTIONS
    assert served_a > 0 and served_b > 0, "both instances must have served before A went"
    assert retried, "A's going must have caught requests (in flight, queued or refused) that nginx then retried on B"
    assert all(x["upstream"].split(", ")[-1] == b_addr and x["upstream_status"].endswith("200") for x in retried)
    assert after.status_code == 200
