"""POST /v1/sweeps and GET /v1/sweeps.csv: a long table over bidder counts,
reserves and rules, as JSON {columns, rows} or CSV with a header row."""
from __future__ import annotations

import csv
import io as _io

import numpy as np

from flask import Blueprint, Response, request
from marshmallow import Schema, ValidationError, fields, validates_schema

from ..core import sweeps
from ..core.budget import BudgetSpent
from . import query
from . import admission, wording
from .auctions import _AuctionRequest, _case, _model_work
from .fields import BiddersField, CappedList, StrictFloat, StrictInteger, caps, count_work, rule_list
from .io import core_call, json_body, json_response, load
from .problems import spent_error, validation_problem

bp = Blueprint("sweeps", __name__)


class _Range(Schema):
    """A range from ``from`` to ``to``, both included, by ``step`` (the increment) or
    ``steps`` (the number of points), not both."""

    @validates_schema
    def _one_spacing(self, data, **kw):
        if "step" in data and "steps" in data:
            raise ValidationError({"steps": ["Give step (the increment) or steps (the number of points), not both."]})
        if data.get("to", 0) < data.get("from_", 0):
            raise ValidationError({"to": ["Must be at least from."]})


class IntRange(_Range):
    from_ = StrictInteger(minimum=1, maximum="bidders", required=True, data_key="from")
    to = StrictInteger(minimum=1, maximum="bidders", required=True)
    step = StrictInteger(minimum=1)
    steps = StrictInteger(minimum=1, maximum="sweep_axis")


class FloatRange(_Range):
    from_ = StrictFloat(required=True, data_key="from")
    to = StrictFloat(required=True)
    step = StrictFloat()
    steps = StrictInteger(minimum=1, maximum="sweep_axis")


class _ListOrRange(fields.Field):
    """A JSON list of items, or a range object expanded into one."""

    def __init__(self, item, range_schema, expand, **kw):
        super().__init__(**kw)
        self.item, self.range_schema, self.expand = item, range_schema, expand

    def _deserialize(self, value, attr, data, **kw):
        if isinstance(value, list):
            if not 1 <= len(value) <= caps().sweep_axis:
                raise ValidationError(f"Give 1 to {caps().sweep_axis} values (the cap BIDSTATS_MAX_SWEEP_AXIS).")
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


def _count_of(r, what):
    """The number of points of a range given by its ``step``, within the axis cap."""
    with np.errstate(over="ignore"):
        span = (r["to"] - r["from_"]) / r["step"] * (1.0 + 1e-12)
    if not span < caps().sweep_axis:
        raise ValidationError({"step": [f"The range holds more than {caps().sweep_axis} {what}, the cap (BIDSTATS_MAX_SWEEP_AXIS)."]})
    return int(span) + 1


def _single(r):
    if r["to"] != r["from_"]:
        raise ValidationError({"steps": ["One point cannot hold both ends of the range: give steps of at least 2."]})
    return [r["from_"]]


def _int_range(r):
    if "steps" in r:
        if r["steps"] == 1:
            return _single(r)
        step, left = divmod(r["to"] - r["from_"], r["steps"] - 1)
        if left or not step:
            raise ValidationError({"steps": [f"{r['steps']} points from {r['from_']} to {r['to']} do not fall on whole numbers of "
                                             "bidders: give another number of steps, or step (the increment)."]})
        return list(range(r["from_"], r["to"] + 1, step))
    step = r.get("step", 1)
    return list(range(r["from_"], r["from_"] + _count_of({**r, "step": step}, "bidder counts") * step, step))


def _float_range(r):
    if "steps" in r:
        if r["steps"] == 1:
            return _single(r)
        width = (r["to"] - r["from_"]) / (r["steps"] - 1)
        return [r["from_"] + i * width for i in range(r["steps"] - 1)] + [r["to"]]
    if "step" not in r or not r["step"] > 0:
        raise ValidationError({"step": ["Give step (a positive increment) or steps (the number of points)."]})
    count = _count_of(r, "reserves")
    points = [r["from_"] + i * r["step"] for i in range(count)]
    return points[:-1] + [r["to"]] if abs(points[-1] - r["to"]) <= 1e-9 * abs(r["step"]) else points


class SweepRequest(_AuctionRequest):
    bidders = _ListOrRange(BiddersField(), IntRange, _int_range, required=True)
    reserves = _ListOrRange(StrictFloat(), FloatRange, _float_range, required=True)
    rules = rule_list(load_default=lambda: ["first_price", "second_price"])
    metrics = CappedList(fields.String(), 1, len(sweeps.METRICS), load_default=None)

    @validates_schema
    def _size(self, data, **kw):
        if all(k in data for k in ("bidders", "reserves", "rules")):
            rows = len(data["bidders"]) * len(data["reserves"]) * len(data["rules"])
            if rows > caps().sweep_rows:
                raise ValidationError({"bidders": [f"The sweep has {rows} rows; the cap is {caps().sweep_rows} (BIDSTATS_MAX_SWEEP_ROWS)."]})


def sweeps_handler(body):
    req = load(SweepRequest, body)
    model, direction, own = _case(req)
    metrics = _core_metrics(req["metrics"], direction)
    rows = len(req["bidders"]) * len(req["reserves"]) * len(req["rules"])
    fixed = sum(isinstance(n, int) for n in req["bidders"])
    mixed = sum(count_work(n) for n in req["bidders"] if not isinstance(n, int))
    admission.admit(work=_model_work(body) * (fixed * (1 + len(req["reserves"]) / 50) + mixed * len(req["reserves"]) * len(req["rules"])),
                    numbers=rows * (3 + len(metrics)), field="bidders")
    return wording.sweep(core_call(
        sweeps.sweep, field_prefix="bidder_values" if direction == "forward" else "bidder_costs",
        model=model, direction=direction, bidders=req["bidders"], reserves=req["reserves"],
        rules=req["rules"], metrics=metrics, own_value=own if direction == "reverse" or req["seller_value"] is not None else None,
    ))


def _core_metrics(asked, direction):
    """The metrics asked, by the caller's names for the direction, as the core names them
    (default: the first three)."""
    names = [wording.name(m, direction) for m in sweeps.METRICS]
    if asked is None:
        return list(sweeps.METRICS[:3])
    bad = {f"metrics.{i}": [f"one of {', '.join(names)} for a {direction} sweep"] for i, m in enumerate(asked) if m not in names}
    if bad:
        raise ValidationError(bad)
    return [wording.CORE_NAMES[direction].get(m, m) for m in asked]


HANDLERS = {"/v1/sweeps": sweeps_handler}


def to_csv(table, decimal=".", separator=","):
    """The table as CSV: a header row, numbers at full precision with the ``decimal`` mark,
    null as empty, fields separated by ``separator``."""
    buf = _io.StringIO()
    w = csv.writer(buf, delimiter=separator, lineterminator="\r\n")
    w.writerow(table["columns"])
    def cell(x):
        if isinstance(x, dict):
            return count_label(x, decimal)
        return "" if x is None else (repr(x).replace(".", decimal) if isinstance(x, float) else x)

    for row in table["rows"]:
        w.writerow([cell(x) for x in row])
    return Response(buf.getvalue(), mimetype="text/csv")


def count_label(count, decimal="."):
    """A distribution over the count in one CSV cell: ``poisson(mean=4.5)``,
    ``binomial(potential=8 entry_probability=0.6)``, ``table(0:0.1 3:0.9)``."""
    def num(x):
        return repr(x).replace(".", decimal) if isinstance(x, float) else str(x)

    if count["distribution"] == "table":
        inner = " ".join(f"{row['bidders']}:{num(row['p'])}" for row in count["probabilities"])
    else:
        inner = " ".join(f"{k}={num(v)}" for k, v in count.items() if k != "distribution")
    return f"{count['distribution']}({inner})"


def _wants_csv():
    accept = request.accept_mimetypes
    return accept["text/csv"] > accept["application/json"]


@bp.post("/v1/sweeps")
def post_sweeps():
    table = sweeps_handler(json_body())
    return to_csv(table) if _wants_csv() else json_response(table)


_RANGE = ("from", "to", "step", "steps")
SEPARATOR_NAMES = {",": ",", ";": ";", "tab": "\t"}
def _known():
    """The query names this door takes (the families' parameters read when a request loads)."""
    return {"direction", "family", "seller_value", "buyer_value", "rule", "rules", "metrics", "separator", "bidders", "reserves",
            *query.model_keys(), *(f"{axis}_{k}" for axis in ("bidders", "reserves") for k in _RANGE), *query.COUNT_KEYS}


def _axes(args, door, body, errors):
    """Each axis from its list (items separated as ``door`` says) or its range keys, not both."""
    if "bidders_distribution" in args:
        given = [k for k in ("bidders", *(f"bidders_{k}" for k in _RANGE)) if k in args]
        if given:
            errors[given[0]] = ["Give bidder counts or bidders_distribution with its parameters, not both."]
        body["bidders"] = _count_axis(args, door, errors)
    for axis in ("bidders", "reserves"):
        if axis == "bidders" and "bidders_distribution" in args:
            continue
        ranged = [f"{axis}_{k}" for k in _RANGE if f"{axis}_{k}" in args]
        if axis in args and ranged:
            errors[axis] = [f"Give either the list {axis} or the range {', '.join(ranged)}, not both."]
        elif axis in args:
            body[axis] = door.number_list(axis, args[axis], errors)
        elif ranged:
            body[axis] = {k: door.number(f"{axis}_{k}", args[f"{axis}_{k}"], errors) for k in _RANGE if f"{axis}_{k}" in args}


def _count_axis(args, door, errors):
    """Distributions over the count from flat parameters: ``bidders_distribution`` and its
    parameters, each one number or a list; the lists (all of one length) make one
    distribution per item, so ``bidders_mean=2,4,8`` sweeps a Poisson count's mean."""
    kind = args["bidders_distribution"]
    if kind == "table":
        errors["bidders_distribution"] = ["A table of counts needs POST; here poisson, binomial or entry."]
    params = {k.removeprefix("bidders_"): door.number_list(k, args[k], errors) or [None] for k in query.COUNT_KEYS[1:] if k in args}
    lengths = {len(v) for v in params.values() if len(v) > 1}
    if len(lengths) > 1:
        errors["bidders_distribution"] = ["The lists of its parameters must be of one length."]
        return []
    size = lengths.pop() if lengths else 1
    return [{"distribution": kind, **{k: v[i] if len(v) > 1 else v[0] for k, v in params.items()}} for i in range(size)]


@bp.get("/v1/sweeps.csv")
def get_sweeps_csv():
    """The same sweep from flat query parameters: lists, or bidders_from/_to/_step(s) and
    reserves_from/_to/_step(s); numbers and the CSV in the ``decimal`` mark asked for."""
    args, errors = request.args, {}
    door = query.Door(args, errors)
    query.unknown(args, _known(), errors)
    body = query.case_body(args, door, errors, ("seller_value", "buyer_value"))
    _axes(args, door, body, errors)
    if "rule" in args and "rules" in args:
        errors["rules"] = ["Give rule or rules, not both."]
    for key, name in (("rule", "rules"), ("rules", "rules"), ("metrics", "metrics")):
        if key in args:
            body[name] = door.names(args[key])
    separator = SEPARATOR_NAMES.get(args.get("separator", ";" if door.decimal == "," else ","))
    if separator is None:
        errors["separator"] = ["One of ',', ';' or tab."]
    try:
        if errors:
            raise ValidationError(errors)
        table = sweeps_handler(body)
    except BudgetSpent:
        return door.error(spent_error())
    except ValidationError as err:
        err = query.flat_errors(err)
        as_json = request.accept_mimetypes["application/json"] > request.accept_mimetypes["text/csv"]
        return validation_problem(err) if as_json and not door.inline else door.error(err)
    return to_csv(table, door.decimal, separator)
