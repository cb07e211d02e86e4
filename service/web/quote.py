"""GET /v1/quote: one number for a spreadsheet cell, every input a query parameter.

The query is turned into the body of the matching POST resource and loaded by
that resource's own schema, so the rules and caps are the same; the answer is
the bare number as text/plain, or {metric, value, ...} for Accept: application/json.
"""
from __future__ import annotations

import math

from flask import Blueprint, Response, request
from marshmallow import ValidationError

from ..core.budget import BudgetSpent
from . import auctions, query, top_values, wording
from .fields import caps
from .io import json_response
from .problems import spent_error, validation_problem

bp = Blueprint("quote", __name__)

# metric -> the direction it belongs to (None: both)
METRICS = {
    "expected_revenue": "forward", "revenue_sd": "forward", "probability_of_sale": "forward",
    "expected_payment": "reverse", "payment_sd": "reverse", "probability_of_award": "reverse",
    "expected_winner_surplus": None, "efficiency": None, "optimal_reserve": None,
    "mean_highest": "forward", "mean_second": "forward",
    "mean_lowest": "reverse", "mean_second_lowest": "reverse", "expected_gap": None,
    "win_probability": None,
}
#: Metrics a quote for bidder groups answers (win_probability needs ``group``, a group's name).
GROUP_METRICS = {m for m in METRICS if m not in ("optimal_reserve", "expected_winner_surplus")}
_CASE_KEYS = ("bidders", "reserve", "seller_value", "buyer_value")


def _rule(args, door, errors):
    """The one rule a quote is for: ``rule`` or ``rules`` (as on the other doors), one name."""
    given = [k for k in ("rule", "rules") if k in args]
    if len(given) > 1:
        errors["rules"] = ["Give rule or rules, not both."]
    names = door.names(args[given[0]]) if given else ["second_price"]
    if len(names) != 1:
        errors[given[0]] = ["A quote is one number: give one rule (a sweep takes several)."]
    return names[0]


def _group_body_from_query(args, door):
    """(metric, direction, rule, POST body, the group asked) for bidder groups, or ValidationError."""
    errors = {}
    most = caps().groups
    query.unknown(args, {"metric", "rule", "rules", "direction", "group", "reserve", "seller_value", "buyer_value",
                         *query.group_keys(most)}, errors)
    metric = args.get("metric")
    if metric not in GROUP_METRICS:
        errors["metric"] = [f"With bidder groups one of: {', '.join(sorted(GROUP_METRICS))}."]
    if metric == "win_probability" and "group" not in args:
        errors["group"] = ["win_probability is one group's: give group, the group's name."]
    rule = _rule(args, door, errors)
    body = query.groups_body(args, door, errors, most)
    for key in ("reserve", "seller_value", "buyer_value"):
        if key in args:
            body[key] = door.number(key, args[key], errors)
    direction = query.direction(args, {})
    if "metric" not in errors and METRICS.get(metric) not in (None, direction) and "direction" not in errors:
        errors["metric"] = [f"{metric} belongs to a {METRICS[metric]} auction; set direction={METRICS[metric]} or pick another metric."]
    if errors:
        raise ValidationError(errors)
    return metric, direction, rule, body, args.get("group")


def _group_value(metric, direction, rule, body, group):
    """One group quote: from the group revenue report, or the group top values."""
    key = "bidder_groups" if direction == "forward" else "cost_groups"
    if metric in ("mean_highest", "mean_second", "mean_lowest", "mean_second_lowest", "expected_gap"):
        for k in ("reserve", "seller_value", "buyer_value"):
            if k in body:
                raise ValidationError({k: ["Not used by this metric."]})
        out = top_values.top_values_handler({**body, "quantiles": []})
        by_rank = {r["rank"]: r["mean"] for r in out["results"]}
        first, second = ("mean_highest", "mean_second") if direction == "forward" else ("mean_lowest", "mean_second_lowest")
        return {first: by_rank[1], second: by_rank[2], "expected_gap": out["expected_gap"]}[metric], []
    out = auctions.revenue_handler({**body, "rules": [rule]})
    result = out["results"][0]
    if metric == "win_probability":
        names = [g["name"] for g in body[key]]
        if group not in names:
            raise ValidationError({"group": [f"One of the groups' names: {', '.join(names)}."]})
        return result["groups"][names.index(group)]["win_probability"], []
    return result[metric], []


def _body_from_query(args, door):
    """(metric, direction, rule, POST body) from the query, or ValidationError."""
    errors = {}
    query.unknown(args, {"metric", "rule", "rules", "direction", "family", "risk_aversion", *_CASE_KEYS, *query.COUNT_KEYS,
                         *query.model_keys()},
                  errors)
    metric = args.get("metric")
    if metric not in METRICS:
        errors["metric"] = [f"One of: {', '.join(METRICS)}."]
    rule = _rule(args, door, errors)
    body = query.case_body(args, door, errors, _CASE_KEYS)
    if "risk_aversion" in args:
        body["risk_aversion"] = {"crra": door.number("risk_aversion", args["risk_aversion"], errors)}
    direction = query.direction(args, {})
    if "metric" not in errors and METRICS.get(metric) not in (None, direction) and "direction" not in errors:
        errors["metric"] = [f"{metric} belongs to a {METRICS[metric]} auction; set direction={METRICS[metric]} or pick another metric."]
    if errors:
        raise ValidationError(errors)
    return metric, direction, rule, body


def _value(metric, direction, rule, body):
    """One call into the core, through the resource that owns the metric."""
    if metric == "optimal_reserve":
        body.pop("reserve", None)
        out = auctions.reserve_price_handler(body)
        if "optimal_reserve_by_rule" in out:  # risk-averse bidders: each rule has its own
            return out["optimal_reserve_by_rule"][rule][wording.name("optimal_reserve", direction)], out["warnings"]
        return out["optimal_reserve"], out["warnings"]
    if metric in ("mean_highest", "mean_second", "mean_lowest", "mean_second_lowest", "expected_gap") and "risk_aversion" in body:
        raise ValidationError({"risk_aversion": ["Not used by this metric."]})
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
        out = top_values.top_values_handler({**body, "quantiles": []})
        by_rank = {r["rank"]: r["mean"] for r in out["results"]}
        value = {"mean_lowest": by_rank.get(1), "mean_second_lowest": by_rank.get(2), "expected_gap": out.get("expected_gap")}[metric]
        return value, out["warnings"]
    body["rules"] = [rule]
    out = auctions.revenue_handler(body)
    return out["results"][0][metric], out["warnings"]


@bp.get("/v1/quote")
def get_quote():
    as_json, errors = wants_json(), {}
    door = query.Door(request.args, errors)
    try:
        if errors:
            raise ValidationError(errors)
        if query.asks_for_groups(request.args):
            metric, direction, rule, body, group = _group_body_from_query(request.args, door)
            value, warnings = _group_value(metric, direction, rule, body, group)
        else:
            metric, direction, rule, body = _body_from_query(request.args, door)
            value, warnings = _value(metric, direction, rule, body)
        if value is None or not math.isfinite(value):
            raise ValidationError({"metric": ["This figure does not exist for the model given: " + "; ".join(warnings or ["no value"])]})
    except BudgetSpent:
        return validation_problem(spent_error()) if as_json and not door.inline else door.error(spent_error())
    except ValidationError as err:
        err = query.flat_group_errors(err) if query.asks_for_groups(request.args) else query.flat_errors(err)
        return validation_problem(err) if as_json and not door.inline else door.error(err)
    if as_json:
        return json_response({"metric": metric, "value": value, "direction": direction, "rule": rule, "warnings": warnings})
    return Response(door.format(value), mimetype="text/plain")


def wants_json():
    """True when the caller prefers application/json to text/plain."""
    accept = request.accept_mimetypes
    return accept["application/json"] > accept["text/plain"]
