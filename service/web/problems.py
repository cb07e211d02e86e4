"""RFC 9457 problem details: every error body the service sends."""
from __future__ import annotations

import json
import logging

from flask import Response, request
from marshmallow import ValidationError
from werkzeug.exceptions import HTTPException

from ..core.budget import BudgetSpent
from .admission import RETRY_AFTER, Busy

PROBLEM = "application/problem+json"
VALIDATION_TYPE = "urn:bidstats:problem:invalid-input"
BUSY_TYPE = "urn:bidstats:problem:busy"
#: The most field errors one problem body lists; the count says how many there were.
MAX_LISTED_ERRORS = 50
log = logging.getLogger("bidstats")


def flatten(messages, prefix=""):
    """marshmallow's nested error dict as [{field, message}] with dotted paths."""
    out = []
    if isinstance(messages, dict):
        for key, val in messages.items():
            name = prefix if key == "_schema" else (f"{prefix}.{key}" if prefix else str(key))
            out += flatten(val, name)
    elif isinstance(messages, (list, tuple)):
        for m in messages:
            out += flatten(m, prefix) if isinstance(m, (dict, list)) else [{"field": prefix or "(body)", "message": str(m)}]
    else:
        out.append({"field": prefix or "(body)", "message": str(messages)})
    return out


def problem_body(status, title, detail, type_="about:blank", **extra):
    return {"type": type_, "title": title, "status": status, "detail": detail, **extra}


def problem(status, title, detail, type_="about:blank", **extra):
    body = problem_body(status, title, detail, type_, **extra)
    return Response(json.dumps(body, allow_nan=False), status=status, mimetype=PROBLEM)


def validation_body(err: ValidationError):
    errors = flatten(err.messages)
    names = ", ".join(e["field"] for e in errors[:5]) + (" ..." if len(errors) > 5 else "")
    extra = {"errors_not_listed": len(errors) - MAX_LISTED_ERRORS} if len(errors) > MAX_LISTED_ERRORS else {}
    return problem_body(422, "Invalid request", f"{len(errors)} field(s) invalid: {names}", VALIDATION_TYPE,
                        errors=errors[:MAX_LISTED_ERRORS], **extra)


def spent_error():
    """The time budget as a validation error at the field `(request)`."""
    spent = BudgetSpent()
    return ValidationError({spent.field: [spent.message]})


def busy_body():
    return problem_body(503, "Service Unavailable", "Every slot for heavy requests on this instance is taken; "
                        f"retry after {RETRY_AFTER} s, or ask for less work.", BUSY_TYPE)


def busy_problem():
    resp = Response(json.dumps(busy_body()), status=503, mimetype=PROBLEM)
    resp.headers["Retry-After"] = str(RETRY_AFTER)
    return resp


def validation_problem(err: ValidationError):
    body = validation_body(err)
    return Response(json.dumps(body, allow_nan=False), status=422, mimetype=PROBLEM)


def register(app):
    """Error handlers: every 4xx/5xx becomes problem+json, never a traceback."""

    @app.errorhandler(ValidationError)
    def _invalid(err):
        return validation_problem(err)

    @app.errorhandler(BudgetSpent)
    def _spent(err):
        return validation_problem(spent_error())

    @app.errorhandler(Busy)
    def _busy(err):
        return busy_problem()

    @app.errorhandler(HTTPException)
    def _http(err):
        allowed = [m for m in getattr(err, "valid_methods", None) or () if m not in ("HEAD", "OPTIONS")]
        detail = err.description or err.name
        if err.code == 405 and allowed:
            how = ("POST with a JSON body (Content-Type: application/json)" if "POST" in allowed
                   else "GET with the inputs as query parameters")
            detail = f"{request.path} answers {' and '.join(allowed)}: send {how}."
        accept = request.accept_mimetypes
        if max(accept["text/plain"], accept["text/csv"]) > accept["application/json"]:  # a text caller: one plain line
            resp = Response(f"error: {err.name}: {detail}\n", status=err.code, mimetype="text/plain")
        else:
            resp = problem(err.code, err.name, detail)
        if err.code == 405 and allowed:
            resp.headers["Allow"] = ", ".join(err.valid_methods)
        return resp

    @app.errorhandler(Exception)
    def _crash(err):
        log.exception("unhandled error")
        return problem(500, "Internal Server Error", "The service failed to compute an answer; the error has been logged.")
