"""Schemathesis hooks for `make fuzz`, loaded through SCHEMATHESIS_HOOKS by fuzz/run.py.

- `no_nan_or_infinity`, a custom check: no response body carries a NaN or an
  infinity. JSON bodies (application/json, application/problem+json, any +json)
  are parsed strictly: the literals NaN, Infinity and -Infinity are refused, and
  so is a number literal that overflows a double (1e999 parses to inf). Text
  bodies (text/plain quotes and errors, text/csv sweeps, the Prometheus text of
  /metrics) are scanned for nan/inf/infinity tokens in any case.
- `no_server_error_in_batch_items`, a custom check: no item of a /v1/batch answer
  has a 5xx status (the batch itself answers 200, so not_a_server_error cannot see it).
- `figures_consistent`, a custom check: every 200 answer (and 200 batch item) passes the
  independent self-consistency checks of fuzz/consistency.py, or its warnings flag what fails.
- `answered_within_budget`, a custom check: no answer takes longer than the time budget
  (BIDSTATS_MAX_SECONDS, default 10 s; FUZZ_BUDGET_SECONDS here) plus one second.
- An `after_call` hook that counts the requests sent, written to
  FUZZ_REQUEST_COUNT_FILE when the run ends.
"""
from __future__ import annotations

import atexit
import json
import os
import re
import sys
import threading
from pathlib import Path

import schemathesis

sys.path.insert(0, str(Path(__file__).resolve().parent))  # schemathesis loads this file by path
import consistency  # noqa: E402  (fuzz/consistency.py: judged without the service's code)

BUDGET_S = float(os.environ.get("FUZZ_BUDGET_SECONDS", "10"))

# A nan, inf or infinity token, signed or not, in any case, not part of a longer word
# ("information", "infeasible" and "financial" do not match; "-inf", "NaN", "+Inf" do).
_TEXT_TOKEN = re.compile(r"(?<![A-Za-z0-9_])[+-]?(?:nan|inf(?:inity)?)(?![A-Za-z0-9_])", re.IGNORECASE)
# Exemptions in text, each about how a thing is written, not about a figure:
# - the Prometheus text format names its last histogram bucket le="+Inf" (a label, not a sample);
# - an error line (4xx) echoes the caller's own input: a rejected value between single quotes,
#   as Python's repr writes it ("not 'inf'"), and the name of each offending query parameter
#   at the head of its "name: message" part ("error: INF: Unknown parameter ...").
#   Everything else in the line is the service's own words and numbers, and is scanned.
_PROMETHEUS_INF_BUCKET = re.compile(r'le="\+Inf"')
_QUOTED_ECHO = re.compile(r"'(?:[^'\\\n]|\\.)*'")


def _media_type(response):
    values = response.headers.get("content-type") or [""]
    return values[0].split(";", 1)[0].strip().lower()


@schemathesis.check
def no_nan_or_infinity(ctx, response, case):
    """No NaN or infinity in any body: JSON parsed strictly, text scanned for tokens."""
    body = response.content or b""
    if response.content_size > len(body):
        raise AssertionError(f"Only {len(body)} of {response.content_size} body bytes were kept; cannot scan the whole body")
    media = _media_type(response)
    if media == "application/json" or media.endswith("+json"):
        try:
            consistency.strict_json(body)
        except (UnicodeDecodeError, ValueError) as err:
            raise AssertionError(f"{media} body is not strict JSON with finite numbers: {err}") from None
    elif media.startswith("text/"):
        try:
            text = body.decode("utf-8")
        except UnicodeDecodeError as err:
            raise AssertionError(f"{media} body is not UTF-8: {err}") from None
        scanned = text
        if case.operation.path == "/metrics":
            scanned = _PROMETHEUS_INF_BUCKET.sub("", scanned)
        if response.status_code >= 400:
            scanned = _QUOTED_ECHO.sub("''", scanned)
            for name in sorted(case.query or {}, key=lambda k: -len(str(k))):
                scanned = re.sub(r"(^error: |; )" + re.escape(str(name)) + ": ", r"\1<parameter>: ", scanned)
        match = _TEXT_TOKEN.search(scanned)
        if match:
            start = max(0, match.start() - 60)
            raise AssertionError(f"{media} body holds the token {match.group(0)!r}: ...{scanned[start:match.end() + 60]!r}...")
    # Other media types (application/yaml: the API description itself) are not answers.
    return None


@schemathesis.check
def no_server_error_in_batch_items(ctx, response, case):
    """POST /v1/batch answers 200 as a whole and gives each item its own status, so an
    item that crashed (status 500 inside a 200) would slip past not_a_server_error."""
    if case.operation.path != "/v1/batch" or response.status_code != 200:
        return None
    try:
        items = json.loads(response.content.decode("utf-8")).get("responses", [])
    except (UnicodeDecodeError, ValueError, AttributeError):
        return None  # not this check's business: response_schema_conformance and no_nan_or_infinity judge the body
    crashed = [i for i, item in enumerate(items) if isinstance(item, dict) and item.get("status", 0) >= 500]
    if crashed:
        raise AssertionError(f"batch items {crashed} answered with a server error: {items[crashed[0]]!r}")
    return None


def _figure_problems(case, response):
    """fuzz/consistency.py's findings for a 200 answer, by route and media type."""
    path, media = case.operation.path, _media_type(response)
    text = response.content.decode("utf-8")
    if path == "/v1/quote":
        if media == "application/json":
            data = json.loads(text)
            return consistency.quote(case.query or {}, data.get("value"), data.get("warnings"))
        return consistency.quote(case.query or {}, consistency.door_number(text, consistency.door_marks(case.query)[0]))
    if path == "/v1/sweeps.csv":
        return consistency.sweep_csv(case.query or {}, text)
    if path == "/v1/sweeps" and media == "text/csv":
        return consistency.sweep(case.body, consistency.csv_table(text))
    if media != "application/json":
        return []
    return consistency.problems(path, case.body, json.loads(text))


@schemathesis.check
def figures_consistent(ctx, response, case):
    """A 200 answer's figures obey the laws of fuzz/consistency.py, or its warnings say which do not."""
    if response.status_code != 200 or not (case.operation.path.startswith("/v1/")):
        return None
    try:
        found = _figure_problems(case, response)
    except (UnicodeDecodeError, ValueError):
        return None  # not strict JSON or CSV: no_nan_or_infinity and the schema checks judge that
    if found:
        more = f" (and {len(found) - 5} more)" if len(found) > 5 else ""
        raise AssertionError("Self-consistency fails without a warning: " + "; ".join(found[:5]) + more)
    return None


@schemathesis.check
def answered_within_budget(ctx, response, case):
    """No answer later than the time budget plus one second (the service's contract)."""
    if response.elapsed > BUDGET_S + 1.0:
        raise AssertionError(f"Answered after {response.elapsed:.1f} s, over the {BUDGET_S:g} s budget + 1 s")
    return None


# ------------------------------------------------------------------ request count
_LOCK = threading.Lock()
_SENT = [0]


@schemathesis.hook
def after_call(context, case, response):
    with _LOCK:
        _SENT[0] += 1


def _write_count():
    path = os.environ.get("FUZZ_REQUEST_COUNT_FILE")
    if path:
        with open(path, "w") as fh:
            fh.write(f"{_SENT[0]}\n")


atexit.register(_write_count)
