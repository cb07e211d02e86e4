"""The hostile part of `make fuzz`: fuzz/hostile_cases.py's requests against the live gunicorn.

fuzz/run.py calls `run(base, out)` after schemathesis, against the same server. Two
client threads (one per worker) send the cases: the first sends the heavy ones one at a
time, then helps the second with the light ones. A case that gets a busy 503 (the service
found it heavy while the slots were taken) is sent again at the end, alone (resent at most
RETRIES times after min(Retry-After, 2) s), so that every case is computed once; a busy 503
then, with nothing else in flight, is a failure. Each answer is judged against the contract:

- no 5xx, except a 503 that carries Retry-After and the problem type urn:bidstats:problem:busy;
- no dropped connection, and no answer later than the time budget + 1 s (BIDSTATS_MAX_SECONDS,
  whose documented default of 10 s the run starts gunicorn with; FUZZ_BUDGET_SECONDS overrides);
- strict bodies: JSON with no NaN, Infinity or overflowing literal; a CSV whose numbers are
  finite; a quote that is one finite number;
- every error on a POST route is application/problem+json whose status is the HTTP status, and
  every error on a GET door is that or one text/plain line;
- every 200 answer (and every 200 batch item) passes fuzz/consistency.py, or its warnings flag
  what fails.

Every case, its status and its time go to ``out``/hostile.ndjson; each failing case's body goes
to ``out``/hostile/ with a curl line that sends it again.
"""
from __future__ import annotations

import json
import os
import threading
import time
from concurrent.futures import ThreadPoolExecutor
from xml.etree import ElementTree
from pathlib import Path
from urllib.parse import urlencode

import requests

import consistency
import hostile_cases

BUDGET_S = float(os.environ.get("FUZZ_BUDGET_SECONDS", "10"))
LIMIT_S = BUDGET_S + 1.0
SEED = int(os.environ.get("FUZZ_SEED", "5"))
RANDOM_EXAMPLES = int(os.environ.get("FUZZ_HOSTILE_EXAMPLES", "150"))
# The whole hostile part stops sending after this many seconds (a fixed service needs about 120);
# cases left unsent fail the run.
PHASE_SECONDS = float(os.environ.get("FUZZ_HOSTILE_SECONDS", "480"))
THREADS = 2
# Above the worker timeout (gunicorn.conf.py, 30 s by default): a stuck request shows as gunicorn's own failure.
CLIENT_TIMEOUT_S = 75
RETRIES = 3
HOLD_HEAD_START_S = 1.0   # the contention holder runs this long before the contenders arrive
BUSY_TYPE = "urn:bidstats:problem:busy"
GET_DOORS = ("/v1/quote", "/v1/sweeps.csv")


class Outcome:
    """What came back for one case: status, headers, body and seconds, or the error."""

    def __init__(self, status=None, headers=None, body=b"", seconds=0.0, error=None, attempts=1):
        self.status, self.headers, self.body = status, headers or {}, body
        self.seconds, self.error, self.attempts = seconds, error, attempts

    @property
    def media(self):
        return (self.headers.get("Content-Type") or "").split(";", 1)[0].strip().lower()


def send_once(base, case):
    url = base + case.path + (("?" + urlencode(case.query, safe=",")) if case.query else "")
    assert url.startswith("http://127.0.0.1:"), "hostile traffic goes to loopback only"
    headers = dict(case.headers)
    if case.method == "POST":
        headers.setdefault("Content-Type", "application/json")
    started = time.perf_counter()
    try:
        r = requests.request(case.method, url, data=case.body if case.method == "POST" else None,
                             headers=headers, timeout=(5, CLIENT_TIMEOUT_S))
        return Outcome(r.status_code, r.headers, r.content, time.perf_counter() - started)
    except requests.RequestException as err:
        return Outcome(seconds=time.perf_counter() - started, error=f"{type(err).__name__}: {str(err)[:200]}")


def busy(out):
    """A 503 that asks to come back (Retry-After)."""
    return out.status == 503 and out.headers.get("Retry-After", "").strip().isdigit()


def send(base, case, retries=RETRIES):
    """One case, resent after a busy 503 (at most ``retries`` times, after min(Retry-After, 2) s)."""
    out = send_once(base, case)
    attempts = 1
    while busy(out) and attempts <= retries:
        time.sleep(min(float(out.headers["Retry-After"]), 2.0))
        out = send_once(base, case)
        attempts += 1
    out.attempts = attempts
    return out


# ------------------------------------------------------------------ judging
def _server_error(out, data):
    """Why a 5xx breaks the contract, or None for a proper busy answer."""
    if out.status == 503 and out.headers.get("Retry-After") and isinstance(data, dict) and data.get("type") == BUSY_TYPE:
        return None
    return f"status {out.status}: {out.body[:160].decode('utf-8', 'replace')!r}"


def _parse(case, out):
    """The body parsed by its media type: (data, failure or None)."""
    media = out.media
    if case.path.startswith("/v1/charts/") and media in ("image/svg+xml", "image/png"):
        return None, _image_fault(media, out.body)
    try:
        if media == "application/json" or media.endswith("+json"):
            return consistency.strict_json(out.body), None
        text = out.body.decode("utf-8")
        if media == "text/csv":
            return consistency.csv_table(text, *consistency.door_marks(case.query)), None
        if media == "text/plain" and case.path in GET_DOORS:
            return (consistency.door_number(text, consistency.door_marks(case.query)[0]) if out.status == 200 else text), None
    except (UnicodeDecodeError, ValueError, RecursionError) as err:
        return None, f"{media} body is not strict: {str(err)[:200]}"
    return None, f"status {out.status} answered as {media or 'no media type'}: {out.body[:120]!r}"


def _image_fault(media, body):
    """Why a chart's image is not one: an SVG that does not parse, a PNG without its signature."""
    if media == "image/png":
        return None if body.startswith(b"\x89PNG\r\n\x1a\n") and len(body) > 100 else "a PNG without its signature"
    try:
        root = ElementTree.fromstring(body)
    except ElementTree.ParseError as err:
        return f"an SVG that does not parse: {err}"
    return None if root.tag.endswith("svg") else f"an SVG whose root is {root.tag}"


def _error_shape(case, out, data):
    """Errors are problem+json with the HTTP status (or one text line on a GET door, or for an
    image caller of a chart the picture that says why)."""
    if case.path.startswith("/v1/charts/") and out.media in ("image/svg+xml", "image/png"):
        return None
    if out.media == "application/problem+json":
        ok = isinstance(data, dict) and data.get("status") == out.status and "title" in data
        return None if ok else f"a problem body without title or with another status: {out.body[:160]!r}"
    if case.path in GET_DOORS and out.media == "text/plain":
        return None
    return f"status {out.status} is not application/problem+json but {out.media or 'no media type'}"


def _figures(case, out, data):
    """The independent self-consistency checks (fuzz/consistency.py) of a 200 answer."""
    if case.path.startswith("/v1/charts/"):  # the image, or the points it plots: checked as strict above
        return []
    if case.path in GET_DOORS:
        if case.path == "/v1/quote":
            value = data.get("value") if isinstance(data, dict) else data
            warnings = data.get("warnings") if isinstance(data, dict) else None
            return consistency.quote(case.query, value, warnings)
        return consistency.sweep_csv(case.query, out.body.decode()) if out.media == "text/csv" else []
    fails = consistency.problems(case.path, case.doc, data)
    if case.path == "/v1/batch" and isinstance(data, dict):
        crashed = [i for i, item in enumerate(data.get("responses", [])) if isinstance(item, dict)
                   and isinstance(item.get("status"), int) and item["status"] >= 500 and item["status"] != 503]
        if crashed:
            fails.append(f"batch items {crashed[:10]} answered with a server error")
    return fails


def judge(case, out):
    """Every way this answer breaks the contract, as lines."""
    if out.error:
        return [f"no answer: {out.error} after {out.seconds:.1f} s"]
    fails = []
    if out.seconds > LIMIT_S:
        fails.append(f"answered after {out.seconds:.1f} s, over the {BUDGET_S:g} s budget + 1 s")
    data, bad = _parse(case, out)
    if bad:
        fails.append(bad)
    if out.status >= 500:
        why = _server_error(out, data)
        if why:
            fails.append(why)
    elif out.status >= 400 and not bad:
        why = _error_shape(case, out, data)
        if why:
            fails.append(why)
    elif out.status == 200 and not bad:
        fails += _figures(case, out, data)
    return fails


# ------------------------------------------------------------------ the run
KINDS = (("no answer", "no answer"), ("answered after", "slower than the budget + 1 s"), ("status 5", "a 5xx"),
         ("batch items", "a 5xx batch item"), ("not strict", "a body that is not strict"),
         ("answered as", "an unexpected media type"), ("problem", "an error that is not problem+json"))


def kind(message):
    for needle, name in KINDS:
        if needle in message:
            return name
    return "a figure that fails self-consistency unflagged"


def _drive(base, cases):
    """Send every case until done or PHASE_SECONDS run out; (results by index, seconds).
    The heavy cases go one at a time through the first client, as the service runs heavy
    requests in a bounded number of slots anyway; the light ones go through both clients.
    A case that finds the heavy slots taken (a busy 503) is put off, and the put-off cases
    are sent again at the end one at a time, when no other request is in flight: then a
    busy 503 is a failure, since every slot is free."""
    results, deferred = [None] * len(cases), []
    lock = threading.Lock()
    heavy = iter([i for i, c in enumerate(cases) if c.heavy])
    light = iter([i for i, c in enumerate(cases) if not c.heavy])
    started = time.monotonic()

    def worker(lanes):
        for lane in lanes:
            while True:
                with lock:
                    i = next(lane, None)
                if i is None or time.monotonic() - started > PHASE_SECONDS:
                    break
                out = send(base, cases[i], retries=0)
                if busy(out):
                    with lock:
                        deferred.append(i)
                else:
                    results[i] = (out, judge(cases[i], out))

    with ThreadPoolExecutor(THREADS) as pool:
        for f in [pool.submit(worker, (heavy, light)), pool.submit(worker, (light,))]:
            f.result()
    for i in deferred:
        if time.monotonic() - started > PHASE_SECONDS:
            break
        out = send(base, cases[i])
        fails = judge(cases[i], out)
        if busy(out):
            fails.append(f"{out.attempts} busy 503s in a row although no other request was in flight")
        results[i] = (out, fails)
    print(f"fuzz: hostile part: {len(deferred)} case(s) found the heavy slots taken and were sent again alone", flush=True)
    return results, time.monotonic() - started


def _contend(base):
    """The contention cases: the holder from one thread, the contenders one by one from
    another once it has run for HOLD_HEAD_START_S; each sent once (a 503 is what is tested)."""
    holder, contenders = hostile_cases.contention_cases()
    held = {}
    thread = threading.Thread(target=lambda: held.setdefault("out", send_once(base, holder)), daemon=True)
    thread.start()
    time.sleep(HOLD_HEAD_START_S)
    outs = [send_once(base, c) for c in contenders]
    thread.join(CLIENT_TIMEOUT_S + 5)
    cases = [holder] + contenders
    results = [(out, judge(c, out)) for c, out in zip(cases, [held.get("out", Outcome(error="the holder never returned"))] + outs)]
    return cases, results


def _curl(case, path):
    url = "http://127.0.0.1:8000" + case.path + (("?" + urlencode(case.query, safe=",")) if case.query else "")
    heads = " ".join(f"-H '{k}: {v}'" for k, v in case.headers.items())
    if case.method == "GET":
        return f"curl -sS -i {heads} '{url}'".replace("  ", " ")
    return f"curl -sS -i -X POST -H 'Content-Type: application/json' {heads} --data-binary @{path} '{url}'".replace("  ", " ")


def _record(out_dir, cases, results):
    """hostile.ndjson with every case; the failing cases' bodies under hostile/; the report lines."""
    folder = out_dir / "hostile"
    folder.mkdir(parents=True, exist_ok=True)
    lines, tally = [], {}
    with open(out_dir / "hostile.ndjson", "w") as log:
        for i, (case, res) in enumerate(zip(cases, results)):
            out, fails = res if res else (None, ["not sent: the hostile part ran out of time"])
            log.write(json.dumps({"i": i, "group": case.group, "name": case.name, "method": case.method, "path": case.path,
                                  "status": out.status if out else None, "seconds": round(out.seconds, 3) if out else None,
                                  "attempts": out.attempts if out else 0, "failures": fails}) + "\n")
            if not fails:
                continue
            body_path = folder / f"{i:04d}.json"
            if case.method == "POST":
                body_path.write_bytes(case.body)
            for m in fails:
                tally[kind(m)] = tally.get(kind(m), 0) + 1
            took = f"{out.status} in {out.seconds:.2f} s" if out and out.status else "no answer"
            lines.append(f"  [{case.group}] {case.name} ({took})")
            lines += [f"      {m}" for m in fails[:4]] + ([f"      ... and {len(fails) - 4} more"] if len(fails) > 4 else [])
            lines.append(f"      {_curl(case, body_path)}")
    return lines, tally


def run(base, out_dir):
    """The hostile part against ``base`` (a loopback URL); 0 when every case held, else 1."""
    out_dir = Path(out_dir)
    cases = hostile_cases.all_cases(SEED, RANDOM_EXAMPLES)
    groups = {}
    for c in cases:
        groups[c.group] = groups.get(c.group, 0) + 1
    print(f"fuzz: hostile part, {len(cases)} cases ({', '.join(f'{g} {n}' for g, n in groups.items())}; seed {SEED}), "
          f"{THREADS} clients, budget {BUDGET_S:g} s + 1 s; then {len(hostile_cases.contention_cases()[1]) + 1} "
          "contention cases", flush=True)
    results, seconds = _drive(base, cases)
    started = time.monotonic()
    more_cases, more_results = _contend(base)
    seconds += time.monotonic() - started
    cases, results = cases + more_cases, results + more_results
    lines, tally = _record(out_dir, cases, results)
    done = [(r[0], c) for r, c in zip(results, cases) if r]
    slowest = max(done, key=lambda oc: oc[0].seconds, default=None)
    print(f"fuzz: hostile part sent {len(done)} of {len(cases)} cases in {seconds:.1f} s"
          + (f"; the slowest took {slowest[0].seconds:.1f} s ({slowest[1].name})" if slowest else ""), flush=True)
    failed = sum(1 for r in results if not r or r[1])
    if not failed:
        print("fuzz: hostile part: every case held", flush=True)
        return 0
    print(f"fuzz: hostile part: {failed} case(s) failed: " + ", ".join(f"{n} x {k}" for k, n in sorted(tally.items(), key=lambda kv: -kv[1])), flush=True)
    print("\n".join(lines), flush=True)
    print(f"fuzz: every hostile case and its time are in {out_dir / 'hostile.ndjson'}; the curl lines send a failing "
          f"body again to `make serve` on 127.0.0.1:8000", flush=True)
    return 1
