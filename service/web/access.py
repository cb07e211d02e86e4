"""Access control and cross-origin rules, off unless configured.

BIDSTATS_API_KEYS: a comma-separated list of keys. When it is set, every route
but /healthz, /readyz, /openapi.yaml and the explorer page (/ and its two assets)
needs ``Authorization: Bearer KEY`` or
``X-API-Key: KEY``; keys are compared in constant time. BIDSTATS_CORS_ORIGINS:
a comma-separated allow-list of browser origins; without it no CORS headers
are sent. A body whose declared length is over the cap gets 413 before it is read.
"""
from __future__ import annotations

import hmac
import os

from flask import Flask, Response, request

from .problems import problem

# The explorer page and its assets are open too: its calls carry the key the person types in.
OPEN_PATHS = frozenset({"/healthz", "/readyz", "/openapi.yaml", "/", "/explorer/explorer.js", "/explorer/explorer.css"})
ALLOWED_HEADERS = "Content-Type, Accept, Authorization, X-API-Key, X-Request-ID"


def _split(raw):
    return tuple(x.strip() for x in (raw or "").split(",") if x.strip())


def _presented_key():
    auth = request.headers.get("Authorization", "")
    if auth[:7].lower() == "bearer ":
        return auth[7:].strip()
    return request.headers.get("X-API-Key", "").strip()


def _key_ok(given, keys):
    """Constant time in the key's content: every key is compared, whatever matches."""
    ok = False
    for key in keys:
        ok |= hmac.compare_digest(given.encode(), key.encode())
    return ok


def register(app: Flask):
    """Read the settings once, at app creation, and install the checks."""
    raw_keys = app.config.get("API_KEYS", os.environ.get("BIDSTATS_API_KEYS"))
    keys = _split(raw_keys)
    if raw_keys and not keys:
        # A list of blanks would turn authentication off without a word.
        raise SystemExit(f"BIDSTATS_API_KEYS is set but holds no key ({raw_keys!r}); unset it, or give at least one key")
    origins = frozenset(_split(app.config.get("CORS_ORIGINS", os.environ.get("BIDSTATS_CORS_ORIGINS"))))
    limit = app.config["MAX_CONTENT_LENGTH"]

    @app.before_request
    def _guard():
        origin = request.headers.get("Origin")
        if request.method == "OPTIONS" and origin and request.headers.get("Access-Control-Request-Method"):
            # A browser's preflight carries no credentials: answer it from the allow-list alone.
            if origin not in origins:
                return problem(403, "Forbidden", "This origin is not allowed (BIDSTATS_CORS_ORIGINS).")
            resp = Response(status=204)
            resp.headers["Access-Control-Allow-Methods"] = "GET, POST"
            resp.headers["Access-Control-Allow-Headers"] = ALLOWED_HEADERS
            resp.headers["Access-Control-Max-Age"] = "600"
            return resp
        if request.content_length is not None and request.content_length > limit:
            return problem(413, "Request Entity Too Large", f"The body is over the {limit}-byte cap (BIDSTATS_MAX_BODY_BYTES).")
        if keys and request.path not in OPEN_PATHS and not _key_ok(_presented_key(), keys):
            resp = problem(401, "Unauthorized", "Send a valid API key as 'Authorization: Bearer KEY' or 'X-API-Key: KEY'.")
            resp.headers["WWW-Authenticate"] = 'Bearer realm="bidstats"'
            return resp
        return None

    @app.after_request
    def _cors(resp):
        origin = request.headers.get("Origin")
        if origin and origin in origins:
            resp.headers["Access-Control-Allow-Origin"] = origin
            resp.headers["Access-Control-Expose-Headers"] = "X-Request-ID"
            resp.headers.add("Vary", "Origin")
        return resp

    return app
