"""Reading strict JSON requests and writing strict JSON answers."""
from __future__ import annotations

import json

from flask import Response, current_app, request
from marshmallow import ValidationError
from werkzeug.exceptions import BadRequest, RequestEntityTooLarge, UnsupportedMediaType

from .fields import caps
from ..core.errors import ParameterError


def _no_constants(name):
    raise ValueError(f"{name} is not a JSON number")


# Built once: json.loads with a parse_constant builds a new decoder on every call.
_DECODER = json.JSONDecoder(parse_constant=_no_constants)


def json_body():
    """The request body as a JSON object: 415 if not JSON, 400 if malformed."""
    mt = request.mimetype or ""
    if not (mt == "application/json" or mt.endswith("+json")):
        raise UnsupportedMediaType("Send the request body as application/json.")
    raw = body_bytes()
    try:
        # As json.loads does with bytes: UTF-8, -16 or -32, told apart by the first bytes.
        data = _DECODER.decode(raw.decode(json.detect_encoding(raw), "surrogatepass"))
    except (ValueError, UnicodeDecodeError) as e:
        raise BadRequest(f"The body is not valid JSON: {e}") from None
    except RecursionError:
        raise BadRequest("The body is not valid JSON here: it nests arrays or objects too deeply.") from None
    if not isinstance(data, dict):
        raise BadRequest("The body must be a JSON object.")
    return data


def body_bytes():
    """The request body. A body of declared length is capped before it is read
    (access.py); a chunked one is read up to one byte past the cap, so that an
    over-long body is a 413 and never cut short silently."""
    limit = current_app.config["MAX_CONTENT_LENGTH"]
    if request.content_length is None and request.environ.get("wsgi.input_terminated"):
        raw = request.environ["wsgi.input"].read(limit + 1)
        if len(raw) > limit:
            raise RequestEntityTooLarge(f"The body is over the {limit}-byte cap (BIDSTATS_MAX_BODY_BYTES).")
        return raw
    return request.get_data(cache=True)


_SCHEMA_CACHE = {}


def load(schema_cls, data):
    """Validate a request body with a schema (422 on failure) and return it.
    Schema instances are built once: marshmallow schemas are costly to build."""
    schema = _SCHEMA_CACHE.get(schema_cls)
    if schema is None:
        schema = _SCHEMA_CACHE[schema_cls] = schema_cls()
    return schema.load(data)


def json_response(payload, status=200):
    """Strict JSON: a NaN or infinity here is a bug and fails loudly. An answer over
    BIDSTATS_MAX_RESPONSE_BYTES (the admission estimate missed it) is refused."""
    text = json.dumps(payload, allow_nan=False, separators=(",", ":"))
    if len(text) > caps().response_bytes:
        raise ValidationError({"(request)": [f"The answer holds {len(text):,} bytes; the cap is {caps().response_bytes:,} "
                                             "(BIDSTATS_MAX_RESPONSE_BYTES). Ask for fewer points, rows or items."]})
    return Response(text, status=status, mimetype="application/json")


def register_posts(bp, handlers):
    """A POST route per handler: strict JSON in, the handler's dict out as JSON.
    The batch resource calls the same handlers with each item's body."""
    for path, handler in handlers.items():
        def view(handler=handler):
            return json_response(handler(json_body()))
        bp.add_url_rule(path, endpoint=handler.__name__, view_func=view, methods=["POST"])


# Core errors about the value model itself (not a request field) carry these names.
_MODEL_FIELDS = {"smoothing", "sample", "components", "truncate"}


def core_call(fn, field_prefix="bidder_values", **kw):
    """One call into the core; its parameter errors become 422s at their field."""
    try:
        return fn(**kw)
    except ParameterError as e:
        field = f"{field_prefix}.{e.field}" if e.field.split(".")[0] in _MODEL_FIELDS else e.field
        raise ValidationError({field: [e.message]}) from None
