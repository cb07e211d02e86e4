"""Schemathesis hooks for `make fuzz`, loaded through SCHEMATHESIS_HOOKS by fuzz/run.py.

- `no_nan_or_infinity`, a custom check: no response body carries a NaN or an
  infinity. JSON bodies (application/json, application/problem+json, any +json)
  are parsed strictly: the literals NaN, Infinity and -Infinity are refused, and
  so is a number literal that overflows a double (1e999 parses to inf). Text
  bodies (text/plain quotes and errors, text/csv sweeps, the Prometheus text of
  /metrics) are scanned for nan/inf/infinity tokens in any case.
- `no_server_error_in_batch_items`, a custom check: no item of a /v1/batch answer
  has a 5xx status (the batch itself answers 200, so not_a_server_error cannot see it).
- An `after_call` hook that counts the requests sent, written to
  FUZZ_REQUEST_COUNT_FILE when the run ends.
"""
from __future__ import annotations

import atexit
import json
import math
import os
import re
import threading

import schemathesis

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


def _refuse_constant(name):
    raise ValueError(f"non-standard JSON literal {name}")


def _finite_float(text):
    value = float(text)
    if not math.isfinite(value):
        raise ValueError(f"number literal {text} is not finite as a double")
    return value


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
            json.loads(body.decode("utf-8"), parse_constant=_refuse_constant, parse_float=_finite_float)
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
