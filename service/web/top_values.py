"""POST /v1/top-values and /v1/top-values/joint-density."""
from __future__ import annotations

from flask import Blueprint
from marshmallow import Schema, ValidationError, fields, validates_schema

from ..core import topvalues
from .fields import WORK_PER_DRAW, BiddersField, MonteCarlo, count_work, CappedList, StrictFloat, StrictInteger, ValueModelField, most_bidders
from . import admission, groups
from .io import core_call, load, register_posts

bp = Blueprint("top_values", __name__)


class TopValuesRequest(Schema):
    """Values (ranks from the highest) or costs (ranks from the lowest), one of the two."""
    bidder_values = ValueModelField()
    bidder_costs = ValueModelField()
    bidders = BiddersField(required=True)
    ranks = CappedList(StrictInteger(minimum=1), 1, "ranks", load_default=None)
    quantiles = CappedList(StrictFloat(bound="open_probability"), 0, "quantiles",
                           load_default=lambda: [0.05, 0.25, 0.5, 0.75, 0.95])
    curve_points = StrictInteger(minimum=0, maximum="curve_points", load_default=0)
    monte_carlo = fields.Nested(MonteCarlo, load_default=None)

    @validates_schema
    def _ranks_within(self, data, **kw):
        if ("bidder_values" in data) == ("bidder_costs" in data):
            raise ValidationError({"bidder_values": ["Give bidder_values (ranks counted from the highest) or bidder_costs "
                                                     "(ranks counted from the lowest), one of the two."]})
        if data.get("ranks") and "bidders" in data:
            most = most_bidders(data["bidders"])
            bad = {i: [f"Must be at most bidders ({most})."] for i, r in enumerate(data["ranks"]) if r > most}
            if bad:
                raise ValidationError({"ranks": bad})
        if data.get("curve_points") == 1:
            raise ValidationError({"curve_points": ["Must be 0 (no curve) or at least 2."]})


class JointPoint(Schema):
    higher = StrictFloat(required=True)
    lower = StrictFloat(required=True)


class JointDensityRequest(Schema):
    bidder_values = ValueModelField(required=True)
    bidders = BiddersField(required=True)
    ranks = CappedList(StrictInteger(minimum=1), 2, 2, load_default=lambda: [1, 2])
    grid_points = StrictInteger(minimum=2, maximum="grid_points", load_default=None)
    points = CappedList(fields.Nested(JointPoint), 1, "points", load_default=None)

    @validates_schema
    def _one_of(self, data, **kw):
        if data.get("grid_points") is not None and data.get("points") is not None:
            raise ValidationError({"points": ["Give grid_points or points, not both."]})
        if data.get("bidders") == 1:
            raise ValidationError({"bidders": ["Must be at least 2."]})
        if "ranks" in data and "bidders" in data:
            i, j = data["ranks"]
            if not i < j:
                raise ValidationError({"ranks": {1: ["Must be a lower rank (a larger number) than ranks.0."]}})
            if j > most_bidders(data["bidders"]):
                raise ValidationError({"ranks": {1: [f"Must be at most bidders ({most_bidders(data['bidders'])})."]}})


def top_values_handler(body):
    if groups.asks_for_groups(body):
        return groups.top_values_handler(body)
    req = load(TopValuesRequest, body)
    ranks, curve = len(req["ranks"] or [1, 2]), req["curve_points"]
    name = "bidder_values" if "bidder_values" in req else "bidder_costs"
    draws = req["monte_carlo"]["draws"] if req["monte_carlo"] else 0
    admission.admit(work=admission.model_work(body.get(name)) * ranks * (1 + curve / 200) * count_work(req["bidders"])
                    + WORK_PER_DRAW * draws,
                    numbers=ranks * (4 + 2 * len(req["quantiles"]) + 3 * curve),
                    field="curve_points" if curve else "ranks")
    return core_call(
        topvalues.top_values if name == "bidder_values" else topvalues.lowest_costs, field_prefix=name,
        model=req[name], bidders=req["bidders"], ranks=req["ranks"],
        quantiles=req["quantiles"], curve_points=req["curve_points"], monte_carlo=req["monte_carlo"],
    )


def joint_density_handler(body):
    req = load(JointDensityRequest, body)
    grid, npts = req["grid_points"] or 61, len(req["points"] or [])
    admission.admit(work=admission.model_work(body.get("bidder_values")) * (npts / 50 if npts else grid / 20) * count_work(req["bidders"]),
                    numbers=3 * npts if npts else grid * grid + 2 * grid,
                    field="points" if npts else "grid_points")
    pts = None if req["points"] is None else [(p["higher"], p["lower"]) for p in req["points"]]
    return core_call(
        topvalues.joint_density,
        model=req["bidder_values"], bidders=req["bidders"], ranks=tuple(req["ranks"]),
        grid_points=grid, points=pts,
    )


HANDLERS = {"/v1/top-values": top_values_handler, "/v1/top-values/joint-density": joint_density_handler}
register_posts(bp, HANDLERS)
