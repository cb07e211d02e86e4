"""POST /v1/top-values and /v1/top-values/joint-density."""
from __future__ import annotations

from flask import Blueprint
from marshmallow import Schema, ValidationError, fields, validate, validates_schema

from .. import settings
from ..core import budget, topvalues
from ..core.errors import ParameterError
from .fields import StrictFloat, StrictInteger, ValueModelField
from .io import load, register_posts

bp = Blueprint("top_values", __name__)
CAPS = settings.CAPS


# Core errors about the value model itself (not a request field) carry these names.
_MODEL_FIELDS = {"smoothing", "sample", "components", "truncate"}


def core_call(fn, field_prefix="bidder_values", **kw):
    """One call into the core; its parameter errors become 422s at their field."""
    try:
        with budget.within(settings.CAPS.seconds):
            return fn(**kw)
    except ParameterError as e:
        field = f"{field_prefix}.{e.field}" if e.field.split(".")[0] in _MODEL_FIELDS else e.field
        raise ValidationError({field: [e.message]}) from None


class TopValuesRequest(Schema):
    bidder_values = ValueModelField(required=True)
    bidders = StrictInteger(minimum=1, maximum=CAPS.bidders, required=True)
    ranks = fields.List(StrictInteger(minimum=1), load_default=None, validate=validate.Length(min=1, max=CAPS.ranks))
    quantiles = fields.List(
        StrictFloat(bound="open_probability"),
        load_default=lambda: [0.05, 0.25, 0.5, 0.75, 0.95],
        validate=validate.Length(max=CAPS.quantiles),
    )
    curve_points = StrictInteger(minimum=0, maximum=CAPS.curve_points, load_default=0)

    @validates_schema
    def _ranks_within(self, data, **kw):
        if data.get("ranks") and "bidders" in data:
            bad = {i: [f"Must be at most bidders ({data['bidders']})."] for i, r in enumerate(data["ranks"]) if r > data["bidders"]}
            if bad:
                raise ValidationError({"ranks": bad})
        if data.get("curve_points") == 1:
            raise ValidationError({"curve_points": ["Must be 0 (no curve) or at least 2."]})


class JointPoint(Schema):
    higher = StrictFloat(required=True)
    lower = StrictFloat(required=True)


class JointDensityRequest(Schema):
    bidder_values = ValueModelField(required=True)
    bidders = StrictInteger(minimum=2, maximum=CAPS.bidders, required=True)
    ranks = fields.List(StrictInteger(minimum=1), load_default=lambda: [1, 2], validate=validate.Length(equal=2))
    grid_points = StrictInteger(minimum=2, maximum=CAPS.grid_points, load_default=None)
    points = fields.List(fields.Nested(JointPoint), load_default=None, validate=validate.Length(min=1, max=CAPS.points))

    @validates_schema
    def _one_of(self, data, **kw):
        if data.get("grid_points") is not None and data.get("points") is not None:
            raise ValidationError({"points": ["Give grid_points or points, not both."]})
        if "ranks" in data and "bidders" in data:
            i, j = data["ranks"]
            if not i < j:
                raise ValidationError({"ranks": {1: ["Must be a lower rank (a larger number) than ranks.0."]}})
            if j > data["bidders"]:
                raise ValidationError({"ranks": {1: [f"Must be at most bidders ({data['bidders']})."]}})


def top_values_handler(body):
    req = load(TopValuesRequest, body)
    return core_call(
        topvalues.top_values,
        model=req["bidder_values"], bidders=req["bidders"], ranks=req["ranks"],
        quantiles=req["quantiles"], curve_points=req["curve_points"],
    )


def joint_density_handler(body):
    req = load(JointDensityRequest, body)
    pts = None if req["points"] is None else [(p["higher"], p["lower"]) for p in req["points"]]
    return core_call(
        topvalues.joint_density,
        model=req["bidder_values"], bidders=req["bidders"], ranks=tuple(req["ranks"]),
        grid_points=req["grid_points"] or 61, points=pts,
    )


HANDLERS = {"/v1/top-values": top_values_handler, "/v1/top-values/joint-density": joint_density_handler}
register_posts(bp, HANDLERS)
