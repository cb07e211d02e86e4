"""POST /v1/sweeps and GET /v1/sweeps.csv: a long table over bidder counts,
reserves and rules, as JSON {columns, rows} or CSV with a header row."""
from __future__ import annotations

import csv
import io as _io

from flask import Blueprint, Response, request
from marshmallow import Schema, ValidationError, fields, validate, validates_schema

from .. import settings
from ..core import auctions, sweeps
from . import query
from . import admission
from .auctions import _AuctionRequest, _case, _model_work
from .fields import CappedList, StrictFloat, StrictInteger
from .io import json_body, json_response, load
from .problems import validation_problem
from .top_values import core_call

bp = Blueprint("sweeps", __name__)
CAPS = settings.CAPS


class IntRange(Schema):
    from_ = StrictInteger(minimum=1, maximum=CAPS.bidders, required=True, data_key="from")
    to = StrictInteger(minimum=1, maximum=CAPS.bidders, required=True)
    step = StrictInteger(minimum=1, load_default=1)


class FloatRange(Schema):
    from_ = StrictFloat(required=True, data_key="from")
    to = StrictFloat(required=True)
    steps = StrictInteger(minimum=1, maximum=CAPS.sweep_axis, required=True)


class _ListOrRange(fields.Field):
    """A JSON list of items, or a range object expanded into one."""

    def __init__(self, item, range_schema, expand, **kw):
        super().__init__(**kw)
        self.item, self.range_schema, self.expand = item, range_schema, expand

    def _deserialize(self, value, attr, data, **kw):
        if isinstance(value, list):
            if not 1 <= len(value) <= CAPS.sweep_axis:
                raise ValidationError(f"Give 1 to {CAPS.sweep_axis} values (the cap BIDSTATS_MAX_SWEEP_AXIS).")
            out, errors = [], {}
            for i, v in enumerate(value):
                try:
                    out.append(self.item.deserialize(v))
                except ValidationError as e:
                    errors[i] = e.messages
            if errors:
                raise ValidationError(errors)
            return out
        if isinstance(value, dict):
            return self.expand(self.range_schema().load(value))
        raise ValidationError("Must be a list or a range object.")


def _int_range(r):
    if r["to"] < r["from_"]:
        raise ValidationError({"to": ["Must be at least from."]})
    count = (r["to"] - r["from_"]) // r["step"] + 1
    if count > CAPS.sweep_axis:
        raise ValidationError({"step": [f"The range holds {count} bidder counts; the cap is {CAPS.sweep_axis} (BIDSTATS_MAX_SWEEP_AXIS)."]})
    return list(range(r["from_"], r["to"] + 1, r["step"]))


def _float_range(r):
    if r["to"] < r["from_"]:
        raise ValidationError({"to": ["Must be at least from."]})
    if r["steps"] == 1:
        return [r["from_"]]
    width = (r["to"] - r["from_"]) / (r["steps"] - 1)
    return [r["from_"] + i * width for i in range(r["steps"] - 1)] + [r["to"]]


class SweepRequest(_AuctionRequest):
    bidders = _ListOrRange(StrictInteger(minimum=1, maximum=CAPS.bidders), IntRange, _int_range, required=True)
    reserves = _ListOrRange(StrictFloat(), FloatRange, _float_range, required=True)
    rules = CappedList(fields.String(validate=validate.OneOf(auctions.RULES)), 1, len(auctions.RULES),
                       load_default=lambda: ["first_price", "second_price"])
    metrics = CappedList(fields.String(), 1, len(sweeps.METRICS["forward"]), load_default=None)

    @validates_schema
    def _size(self, data, **kw):
        if len(set(data.get("rules") or [])) != len(data.get("rules") or []):
            raise ValidationError({"rules": ["Each rule at most once."]})
        if all(k in data for k in ("bidders", "reserves", "rules")):
            rows = len(data["bidders"]) * len(data["reserves"]) * len(data["rules"])
            if rows > CAPS.sweep_rows:
                raise ValidationError({"bidders": [f"The sweep has {rows} rows; the cap is {CAPS.sweep_rows} (BIDSTATS_MAX_SWEEP_ROWS)."]})


def sweeps_handler(body):
    req = load(SweepRequest, body)
    model, direction, own = _case(req)
    metrics = req["metrics"] or list(sweeps.METRICS[direction][:3])
    rows = len(req["bidders"]) * len(req["reserves"]) * len(req["rules"])
    admission.admit(work=_model_work(body) * len(req["bidders"]) * (1 + len(req["reserves"]) / 50),
                    numbers=rows * (3 + len(metrics)), field="bidders")
    return core_call(
        sweeps.sweep, field_prefix="bidder_values" if direction == "forward" else "bidder_costs",
        model=model, direction=direction, bidders=req["bidders"], reserves=req["reserves"],
        rules=req["rules"], metrics=metrics, own_value=own if direction == "reverse" or req["seller_value"] is not None else None,
    )


HANDLERS = {"/v1/sweeps": sweeps_handler}


def to_csv(table):
    """The table as CSV: a header row, numbers at full precision, null as empty."""
    buf = _io.StringIO()
    w = csv.writer(buf, lineterminator="\r\n")
    w.writerow(table["columns"])
    for row in table["rows"]:
        w.writerow(["" if x is None else (repr(x) if isinstance(x, float) else x) for x in row])
    return Response(buf.getvalue(), mimetype="text/csv")


def _wants_csv():
    accept = request.accept_mimetypes
    return accept["text/csv"] > accept["application/json"]


@bp.post("/v1/sweeps")
def post_sweeps():
    table = sweeps_handler(json_body())
    return to_csv(table) if _wants_csv() else json_response(table)


_LIST_KEYS = ("bidders", "reserves", "rules", "metrics")
_RANGE_KEYS = ("bidders_from", "bidders_to", "bidders_step", "reserves_from", "reserves_to", "reserves_steps")


@bp.get("/v1/sweeps.csv")
def get_sweeps_csv():
    """The same sweep from flat query parameters: lists comma-separated, or
    bidders_from/_to/_step and reserves_from/_to/_steps."""
    args, errors = request.args, {}
    query.unknown(args, {"direction", "family", "seller_value", "buyer_value", *query.MODEL_KEYS, *_LIST_KEYS, *_RANGE_KEYS}, errors)
    body = query.case_body(args, errors, ("seller_value", "buyer_value"))
    for axis, keys in (("bidders", ("from", "to", "step")), ("reserves", ("from", "to", "steps"))):
        ranged = [f"{axis}_{k}" for k in keys if f"{axis}_{k}" in args]
        if axis in args and ranged:
            errors[axis] = [f"Give either the list {axis} or the range {', '.join(ranged)}, not both."]
        elif axis in args:
            body[axis] = query.number_list(axis, args[axis], errors)
        elif ranged:
            body[axis] = {k: query.number(f"{axis}_{k}", args[f"{axis}_{k}"], errors) for k in keys if f"{axis}_{k}" in args}
    for key in ("rules", "metrics"):
        if key in args:
            body[key] = [x.strip() for x in args[key].split(",")]
    try:
        if errors:
            raise ValidationError(errors)
        table = sweeps_handler(body)
    except ValidationError as err:
        err = query.flat_errors(err)
        return validation_problem(err) if request.accept_mimetypes["application/json"] > request.accept_mimetypes["text/csv"] else query.text_error(err)
    return to_csv(table)
