"""What only a real gunicorn shows: bodies sent in chunks over the cap, requests
gunicorn itself refuses, its access line, and clients that send their request a
byte at a time. One gunicorn with the shipped gunicorn.conf.py (WORKERS=2) on a
free loopback port; every socket here talks to 127.0.0.1 only, and every loop is
bounded in count and time.
"""
from __future__ import annotations

import json
import socket
import threading
import time

import pytest
import requests

from harness import LOOPBACK, Gunicorn

READ_TIMEOUT_S = 2   # BIDSTATS_READ_TIMEOUT for this server, so the slow-client test stays short


@pytest.fixture(scope="module")
def server(tmp_path_factory):
    g = Gunicorn(log_path=tmp_path_factory.mktemp("edges") / "gunicorn.log", workers=2,
                 env_extra={"BIDSTATS_READ_TIMEOUT": str(READ_TIMEOUT_S)}).start()
    yield g
    g.stop()


def _raw(g, data, read_timeout=15):
    """Send raw bytes and read the whole answer (the server closes every connection)."""
    with socket.create_connection((LOOPBACK, g.port), timeout=read_timeout) as s:
        s.sendall(data)
        chunks = []
        while True:
            part = s.recv(65536)
            if not part:
                break
            chunks.append(part)
    head, _, body = b"".join(chunks).partition(b"\r\n\r\n")
    status = int(head.split(b" ", 2)[1])
    headers = {k.strip().lower(): v.strip() for k, _, v in (line.partition(b":") for line in head.split(b"\r\n")[1:])}
    return status, headers, body


def _problem(status, headers, body, expected):
    assert status == expected, body[:300]
    assert headers[b"content-type"].startswith(b"application/problem+json"), headers
    problem = json.loads(body)
    assert problem["status"] == expected
    return problem


def test_a_chunked_body_over_the_cap_is_413(server):
    # 2,400,000 bytes in chunks, with no Content-Length for the cap check before reading.
    body = b'{"bidder_values":{"family":"uniform","low":0,"high":1},"bidders":2,"quantiles":[' + b"0.5," * 600_000 + b"0.5]}"
    chunked = b"".join(b"%x\r\n%s\r\n" % (len(body[i:i + 65536]), body[i:i + 65536]) for i in range(0, len(body), 65536))
    head = (b"POST /v1/top-values HTTP/1.1\r\nHost: x\r\nContent-Type: application/json\r\n"
            b"Transfer-Encoding: chunked\r\n\r\n")
    _problem(*_raw(server, head + chunked + b"0\r\n\r\n"), 413)


def test_a_chunked_body_within_the_cap_is_read_whole(server):
    body = b'{"bidder_values":{"family":"uniform","low":0,"high":1},"bidders":2}'
    head = (b"POST /v1/top-values HTTP/1.1\r\nHost: x\r\nContent-Type: application/json\r\n"
            b"Transfer-Encoding: chunked\r\n\r\n")
    status, _, answer = _raw(server, head + b"%x\r\n%s\r\n0\r\n\r\n" % (len(body), body))
    # Uniform values, 2 bidders: the higher has mean 2/3 (Beta(2, 1); David and Nagaraja, 2003, sec. 2.1).
    assert status == 200 and abs(json.loads(answer)["results"][0]["mean"] - 2 / 3) < 1e-12


def test_an_unencoded_character_in_the_url_gets_a_problem(server):
    _problem(*_raw(server, "GET /v1/quote?currency=€ HTTP/1.1\r\nHost: x\r\n\r\n".encode("utf-8")), 400)


def test_an_over_long_url_gets_a_problem(server):
    _problem(*_raw(server, b"GET /v1/quote?x=" + b"a" * 5000 + b" HTTP/1.1\r\nHost: x\r\n\r\n"), 414)


def test_gunicorn_access_line_leaves_out_the_query_string(server):
    r = requests.get(server.url + "/v1/quote?metric=expected_revenue&family=uniform&low=0.123456789&high=1&bidders=4", timeout=10)
    assert r.status_code == 200
    time.sleep(0.3)
    log = server.log_text()
    assert "0.123456789" not in log
    assert '"GET /v1/quote HTTP/1.1" 200' in log


def test_a_client_trickling_its_headers_is_cut_off_and_the_probes_answer(server):
    """Two clients send headers at five bytes a second, which used to hold both sync
    workers for as long as they liked. Each connection is closed at the read deadline."""
    outcome = {}

    def trickle(i):
        with socket.create_connection((LOOPBACK, server.port), timeout=30) as s:
            start = time.monotonic()
            try:
                for byte in b"GET /healthz HTTP/1.1\r\nHost: x\r\nX-Slow: " + b"a" * 60:
                    s.send(bytes([byte]))
                    time.sleep(0.2)      # 80 bytes: 16 s if nobody cuts it off
                outcome[i] = ("finished", time.monotonic() - start)
            except OSError:
                outcome[i] = ("cut", time.monotonic() - start)

    threads = [threading.Thread(target=trickle, args=(i,)) for i in range(2)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=30)
    assert {kind for kind, _ in outcome.values()} == {"cut"}, outcome
    # Afterwards both workers answer again.
    assert all(requests.get(server.url + "/healthz", timeout=5).status_code == 200 for _ in range(4))
