"""Reading strict JSON requests and writing strict JSON answers."""
from __future__ import annotations

import json

from flask import Response, request
from werkzeug.exceptions import BadRequest, UnsupportedMediaType


def _no_constants(name):
    raise ValueError(f"{name} is not a JSON number")


# Built once: json.loads with a parse_constant builds a new decoder on every call.
_DECODER = json.JSONDecoder(parse_constant=_no_constants)


def json_body():
    """The request body as a JSON object: 415 if not JSON, 400 if malformed."""
    mt = request.mimetype or ""
    if not (mt == "application/json" or mt.endswith("+json")):
        raise UnsupportedMediaType("Send the request body as application/json.")
    raw = request.get_data(cache=True)
    try:
        # As json.loads does with bytes: UTF-8, -16 or -32, told apart by the first bytes.
        data = _DECODER.decode(raw.decode(json.detect_encoding(raw), "surrogatepass"))
    except (ValueError, UnicodeDecodeError) as e:
        raise BadRequest(f"The body is not valid JSON: {e}") from None
    if not isinstance(data, dict):
        raise BadRequest("The body must be a JSON object.")
    return data


_SCHEMA_CACHE = {}


def load(schema_cls, data):
    """Validate a request body with a schema (422 on failure) and return it.
    Schema instances are built once: marshmallow schemas are costly to build."""
    schema = _SCHEMA_CACHE.get(schema_cls)
    if schema is None:
        schema = _SCHEMA_CACHE[schema_cls] = schema_cls()
    return schema.load(data)


def json_response(payload, status=200):
    """Strict JSON: a NaN or infinity here is a bug and fails loudly."""
    return Response(json.dumps(payload, allow_nan=False, separators=(",", ":")), status=status, mimetype="application/json")


def register_posts(bp, handlers):
    """A POST route per handler: strict JSON in, the handler's dict out as JSON.
    The batch resource calls the same handlers with each item's body."""
    for path, handler in handlers.items():
        def view(handler=handler):
            return json_response(handler(json_body()))
        bp.add_url_rule(path, endpoint=handler.__name__, view_func=view, methods=["POST"])
