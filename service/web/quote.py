"""GET /v1/quote: one number for a spreadsheet cell, every input a query parameter.

The query is turned into the body of the matching POST resource and loaded by
that resource's own schema, so the rules and caps are the same; the answer is
the bare number as text/plain, or {metric, value, ...} for Accept: application/json.
"""
from __future__ import annotations

import math
import re

from flask import Blueprint, Response, request
from marshmallow import ValidationError

from ..core import models as M
from . import auctions, top_values
from .io import json_response
from .problems import flatten, validation_problem

bp = Blueprint("quote", __name__)

# metric -> the direction it belongs to (None: both)
METRICS = {
    "expected_revenue": "forward", "revenue_sd": "forward", "probability_of_sale": "forward",
    "expected_payment": "reverse", "payment_sd": "reverse", "probability_of_award": "reverse",
    "expected_winner_surplus": None, "efficiency": None, "optimal_reserve": None,
    "mean_highest": "forward", "mean_second": "forward",
    "mean_lowest": "reverse", "mean_second_lowest": "reverse", "expected_gap": None,
}
_NUMBER = re.compile(r"^[+-]?(\d+(\.\d*)?|\.\d+)([eE][+-]?\d+)?$")
_MODEL_KEYS = sorted({k for cls in M.PARAMETRIC.values() for k in cls.parameters} | {"truncate_low", "truncate_high"})
_CASE_KEYS = ("bidders", "reserve", "seller_value", "buyer_value")


def _number(key, raw, errors):
    """A query value as a JSON number: plain decimal notation only."""
    if not _NUMBER.match(raw):
        errors[key] = [f"Must be a number written with digits and '.', not {raw!r}."]
        return None
    x = float(raw)
    return int(x) if x.is_integer() and "." not in raw and "e" not in raw.lower() else x


def _body_from_query(args):
    """(metric, direction, rule, POST body) from the query, or ValidationError."""
    errors = {}
    known = {"metric", "rule", "direction", "family", *_CASE_KEYS, *_MODEL_KEYS}
    for key in args:
        if key not in known:
            errors[key] = ["Unknown parameter (mixtures, tables and samples need POST)."]
    metric = args.get("metric")
    if metric not in METRICS:
        errors["metric"] = [f"One of: {', '.join(METRICS)}."]
    direction = args.get("direction", "forward")
    if direction not in ("forward", "reverse"):
        errors["direction"] = ["Must be forward or reverse."]
    family = args.get("family")
    if family not in M.PARAMETRIC:
        errors["family"] = [f"One of the parametric families: {', '.join(sorted(M.PARAMETRIC))}."]
    if errors.get("metric") is None and METRICS.get(metric) not in (None, direction) and "direction" not in errors:
        errors["metric"] = [f"{metric} belongs to a {METRICS[metric]} auction; set direction={METRICS[metric]} or pick another metric."]
    model = {"family": family}
    for key in _MODEL_KEYS:
        if key in args:
            value = _number(key, args[key], errors)
            if key.startswith("truncate_"):
                model.setdefault("truncate", {})[key.removeprefix("truncate_")] = value
            else:
                model[key] = value
    body = {("bidder_values" if direction == "forward" else "bidder_costs"): model}
    for key in _CASE_KEYS:
        if key in args:
            body[key] = _number(key, args[key], errors)
    if errors:
        raise ValidationError(errors)
    return metric, direction, args.get("rule", "second_price"), body


def _value(metric, direction, rule, body):
    """One call into the core, through the resource that owns the metric."""
    if metric == "optimal_reserve":
        body.pop("reserve", None)
        out = auctions.reserve_price_handler(body)
        return out["optimal_reserve"], out["warnings"]
    if metric in ("mean_highest", "mean_second", "mean_lowest", "mean_second_lowest", "expected_gap") and direction == "forward":
        body.pop("seller_value", None)
        if "reserve" in body:
            raise ValidationError({"reserve": ["Not used by this metric."]})
        out = top_values.top_values_handler(body)
        by_rank = {r["rank"]: r["mean"] for r in out["results"]}
        value = {"mean_highest": by_rank.get(1), "mean_second": by_rank.get(2), "expected_gap": out.get("expected_gap")}[metric]
        return value, out["warnings"]
    if metric in ("mean_lowest", "mean_second_lowest", "expected_gap"):
        body.pop("buyer_value", None)
        if "reserve" in body:
            raise ValidationError({"reserve": ["Not used by this metric."]})
        costs = body.pop("bidder_costs")
        # For costs the lowest rank k from the bottom is rank n-k+1 from the top.
        n = body.get("bidders")
        ranks = {1: n, 2: n - 1} if isinstance(n, int) and n >= 2 else {1: n}
        out = top_values.top_values_handler({"bidder_values": costs, **body, "ranks": sorted(set(ranks.values())), "quantiles": []})
        by_rank = {r["rank"]: r["mean"] for r in out["results"]}
        low1, low2 = by_rank.get(ranks.get(1)), by_rank.get(ranks.get(2))
        gap = None if low1 is None or low2 is None else low2 - low1
        return {"mean_lowest": low1, "mean_second_lowest": low2, "expected_gap": gap}[metric], out["warnings"]
    body["rules"] = [rule]
    out = auctions.revenue_handler(body)
    return out["results"][0][metric], out["warnings"]


def _wants_json():
    best = request.accept_mimetypes.best_match(["text/plain", "application/json"], default="text/plain")
    return best == "application/json" and request.accept_mimetypes["application/json"] > request.accept_mimetypes["text/plain"]


@bp.get("/v1/quote")
def get_quote():
    as_json = _wants_json()
    try:
        metric, direction, rule, body = _body_from_query(request.args)
        value, warnings = _value(metric, direction, rule, body)
        if value is None or not math.isfinite(value):
            raise ValidationError({"metric": ["This figure does not exist for the model given: " + "; ".join(warnings or ["no value"])]})
    except ValidationError as err:
        err = ValidationError(_strip_model_prefix(err.messages))
        if as_json:
            return validation_problem(err)
        first = flatten(err.messages)
        line = "; ".join(f"{e['field']}: {e['message']}" for e in first)
        return Response(f"error: {line}\n", status=422, mimetype="text/plain")
    if as_json:
        return json_response({"metric": metric, "value": value, "direction": direction, "rule": rule, "warnings": warnings})
    return Response(repr(float(value)), mimetype="text/plain")


def _strip_model_prefix(messages):
    """Query parameters are flat: report ``median``, not ``bidder_values.median``."""
    if not isinstance(messages, dict):
        return messages
    out = {}
    for key, val in messages.items():
        if key in ("bidder_values", "bidder_costs") and isinstance(val, dict):
            for k, v in val.items():
                if k == "truncate" and isinstance(v, dict):
                    for tk, tv in v.items():
                        out[f"truncate_{tk}"] = tv
                else:
                    out[k] = v
        else:
            out[key] = val
    return out
