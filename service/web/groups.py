"""Bidder groups on /v1/revenue and /v1/bid-strategy: a request that names ``bidder_groups``
(forward) or ``cost_groups`` (reverse) instead of one value model and a count."""
from __future__ import annotations

from marshmallow import Schema, ValidationError, fields, validate, validates_schema

from ..core import groups as core_groups
from . import admission, wording
from .fields import BidGrid, CappedList, RuleName, StrictFloat, StrictInteger, ValueModelField, caps, rule_list
from .io import core_call, load

GROUP_KEYS = ("bidder_groups", "cost_groups")


class GroupSchema(Schema):
    """One group: a name, how many bidders, their value (or cost) model, a bid preference."""

    name = fields.String(required=True, validate=validate.Length(min=1, max=80))
    count = StrictInteger(minimum=1, maximum="bidders", required=True)
    bidder_values = ValueModelField(load_default=None)
    bidder_costs = ValueModelField(load_default=None)
    preference = StrictFloat(bound="nonnegative", load_default=0.0)


class _GroupsRequest(Schema):
    bidder_groups = CappedList(fields.Nested(GroupSchema), 2, "groups", load_default=None)
    cost_groups = CappedList(fields.Nested(GroupSchema), 2, "groups", load_default=None)
    reserve = StrictFloat(load_default=None)

    @validates_schema(skip_on_field_errors=True)
    def _groups(self, data, **kw):
        fwd, rev = data.get("bidder_groups"), data.get("cost_groups")
        if (fwd is None) == (rev is None):
            msg = "Give exactly one of bidder_groups (forward) or cost_groups (reverse)."
            raise ValidationError({"bidder_groups": [msg], "cost_groups": [msg]})
        key, own, other = ("bidder_groups", "bidder_values", "bidder_costs") if fwd is not None \
            else ("cost_groups", "bidder_costs", "bidder_values")
        names = set()
        for i, g in enumerate(fwd if fwd is not None else rev):
            if g[other] is not None:
                raise ValidationError({key: {i: {other: [f"Every group in {key} takes {own}: the groups of one auction "
                                                         "share its direction."]}}})
            if g[own] is None:
                raise ValidationError({key: {i: {own: ["Missing data for required field."]}}})
            if g[own].discrete:
                raise ValidationError({key: {i: {own: ["Bidder groups need a continuous model; use smoothing: kernel."]}}})
            tail = g[own].upper_tail_index if key == "bidder_groups" else g[own].lower_tail_index
            if not tail > 2.0:
                raise ValidationError({key: {i: {own: ["Bidder groups need a model whose variance exists (a tail index "
                                                       "above 2): the surpluses, spreads and values lost are integrals "
                                                       "of it; give a lighter tail or truncate the model."]}}})
            if not g["preference"] < 1.0:
                rank = "(1 - preference) b" if key == "cost_groups" else "(1 + preference) b"
                raise ValidationError({key: {i: {"preference": [f"Must be below 1 (a bid b is ranked as {rank}; a "
                                                                "preference is a share of the bid)."]}}})
            if g["name"] in names:
                raise ValidationError({key: {i: {"name": ["Each group's name at most once."]}}})
            names.add(g["name"])
        total = sum(g["count"] for g in (fwd if fwd is not None else rev))
        if total > caps().bidders:
            raise ValidationError({key: [f"The groups hold {total} bidders; at most {caps().bidders} "
                                         "(the service's cap, BIDSTATS_MAX_BIDDERS)."]})
        if fwd is not None and data.get("buyer_value") is not None:
            raise ValidationError({"buyer_value": ["Only for a reverse auction (cost_groups); a forward one takes seller_value."]})
        if rev is not None and data.get("seller_value") is not None:
            raise ValidationError({"seller_value": ["Only for a forward auction (bidder_groups); cost_groups take buyer_value."]})


class GroupRevenueRequest(_GroupsRequest):
    rules = rule_list(load_default=None)
    seller_value = StrictFloat(load_default=None)
    buyer_value = StrictFloat(load_default=None)


class GroupBidsRequest(_GroupsRequest, BidGrid):
    rule = RuleName(load_default="first_price")


def asks_for_groups(body):
    """Whether a request body names groups (then it is this module's)."""
    return isinstance(body, dict) and any(k in body for k in GROUP_KEYS)


def _case(req):
    """(core groups, direction, the request's key)."""
    key = "bidder_groups" if req["bidder_groups"] is not None else "cost_groups"
    own = "bidder_values" if key == "bidder_groups" else "bidder_costs"
    return [core_groups.Group(g["name"], g["count"], g[own], g["preference"]) for g in req[key]], \
        ("forward" if key == "bidder_groups" else "reverse"), key


def _work(req):
    key = "bidder_groups" if req["bidder_groups"] is not None else "cost_groups"
    return float(len(req[key]) ** 2)


def revenue_handler(body):
    req = load(GroupRevenueRequest, body)
    groups, direction, key = _case(req)
    admission.admit(work=_work(req), numbers=40 * len(groups), field=key)
    own = req["seller_value"] if direction == "forward" else req["buyer_value"]
    if direction == "forward" and own is None:
        own = 0.0
    report = core_call(core_groups.group_report, field_prefix=key, groups=groups, direction=direction,
                       reserve=req["reserve"], own_value=own, rules=req["rules"])
    return wording.group_revenue(report, key)


def bids_handler(body):
    req = load(GroupBidsRequest, body)
    groups, direction, key = _case(req)
    count = len(req["at"]) if req["at"] is not None else req["points"] or 51
    admission.admit(work=_work(req), numbers=2 * count * len(groups), field="at" if req["at"] is not None else "points")
    report = core_call(core_groups.group_bids, field_prefix=key, groups=groups, direction=direction,
                       reserve=req["reserve"], rule=req["rule"], points=req["points"] or 51, at=req["at"])
    return wording.group_bids(report, key)


class GroupTopValuesRequest(_GroupsRequest):
    quantiles = CappedList(StrictFloat(bound="open_probability"), 0, "quantiles",
                           load_default=lambda: [0.05, 0.25, 0.5, 0.75, 0.95])

    @validates_schema
    def _no_reserve(self, data, **kw):
        if data.get("reserve") is not None:
            raise ValidationError({"reserve": ["Not used by top values."]})


def top_values_handler(body):
    req = load(GroupTopValuesRequest, body)
    groups, direction, key = _case(req)
    admission.admit(work=_work(req), numbers=2 * (6 + 2 * len(req["quantiles"]) + 2 * len(groups)), field=key)
    report = core_call(core_groups.group_top_values, field_prefix=key, groups=groups, direction=direction,
                       quantiles=req["quantiles"])
    return wording.group_top_values(report)
