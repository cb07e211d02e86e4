"""POST /v1/revenue, /v1/bid-strategy and /v1/reserve-price.

Each request names the value model as ``bidder_values`` (forward: a sale) or
``bidder_costs`` (reverse: a procurement); the name sets the direction.
"""
from __future__ import annotations

from flask import Blueprint
from marshmallow import Schema, ValidationError, fields, validates_schema

from ..core import reports, reserve
from ..core import rules as core_rules
from .fields import WORK_PER_DRAW, BidGrid, BiddersField, MonteCarlo, count_work, CappedList, RuleName, StrictFloat, ValueModelField, rule_list
from . import admission, groups, wording
from .io import core_call, load, register_posts

bp = Blueprint("auctions", __name__)


class RiskAversion(Schema):
    """Constant relative risk aversion: the utility of a gain x is x^(1 - crra)."""

    crra = StrictFloat(required=True)

    @validates_schema
    def _range(self, data, **kw):
        if "crra" in data and not 0.0 <= data["crra"] < 1.0:
            raise ValidationError({"crra": ["Must be at least 0 and below 1 (utility x^(1 - crra))."]})


def crra_of(req):
    """The bidders' CRRA rho from a loaded request (0: risk-neutral)."""
    return 0.0 if req.get("risk_aversion") is None else req["risk_aversion"]["crra"]


class _AuctionRequest(Schema):
    """Fields every auction request shares, and the direction rules."""

    bidder_values = ValueModelField(load_default=None)
    bidder_costs = ValueModelField(load_default=None)
    bidders = BiddersField(required=True)
    seller_value = StrictFloat(load_default=None)
    buyer_value = StrictFloat(load_default=None)

    @validates_schema(skip_on_field_errors=False)
    def _direction(self, data, **kw):
        v, c = data.get("bidder_values"), data.get("bidder_costs")
        if (v is None) == (c is None):
            msg = "Give exactly one of bidder_values (forward) or bidder_costs (reverse)."
            raise ValidationError({"bidder_values": [msg], "bidder_costs": [msg]})
        if v is not None and data.get("buyer_value") is not None:
            raise ValidationError({"buyer_value": ["Only for a reverse auction (bidder_costs); a forward auction takes seller_value."]})
        if c is not None and data.get("seller_value") is not None:
            raise ValidationError({"seller_value": ["Only for a forward auction (bidder_values); a reverse auction takes buyer_value."]})


def _model_work(body):
    return admission.model_work(body.get("bidder_values") or body.get("bidder_costs"))


def _case(req):
    """(model, direction, own value) from a loaded auction request."""
    if req["bidder_values"] is not None:
        return req["bidder_values"], "forward", req["seller_value"] if req["seller_value"] is not None else 0.0
    return req["bidder_costs"], "reverse", req["buyer_value"]


class RevenueRequest(_AuctionRequest):
    reserve = StrictFloat(load_default=None)
    rules = rule_list(load_default=None)
    risk_aversion = fields.Nested(RiskAversion, load_default=None)
    monte_carlo = fields.Nested(MonteCarlo, load_default=None)
    quantiles = CappedList(StrictFloat(bound="open_probability"), 0, "quantiles",
                           load_default=lambda: [0.05, 0.25, 0.5, 0.75, 0.95])


class BidStrategyRequest(_AuctionRequest, BidGrid):
    reserve = StrictFloat(load_default=None)
    rule = RuleName(load_default="first_price")
    risk_aversion = fields.Nested(RiskAversion, load_default=None)


class ReservePriceRequest(_AuctionRequest):
    risk_aversion = fields.Nested(RiskAversion, load_default=None)

    @validates_schema
    def _buyer_value(self, data, **kw):
        if data.get("bidder_costs") is not None and data.get("buyer_value") is None:
            raise ValidationError({"buyer_value": ["Required for a reverse auction: the optimal maximum price depends on it."]})


def revenue_handler(body):
    if groups.asks_for_groups(body):
        return groups.revenue_handler(body)
    req = load(RevenueRequest, body)
    rules = len(req["rules"] or core_rules.names())
    draws = req["monte_carlo"]["draws"] if req["monte_carlo"] else 0
    admission.admit(work=_model_work(body) * rules * count_work(req["bidders"]) + WORK_PER_DRAW * draws * rules,
                    numbers=rules * (24 + 2 * len(req["quantiles"]) + (12 if draws else 0)), field="quantiles")
    model, direction, own = _case(req)
    return wording.revenue(core_call(
        reports.revenue_report, field_prefix="bidder_values" if direction == "forward" else "bidder_costs",
        model=model, direction=direction, bidders=req["bidders"], reserve=req["reserve"], own_value=own,
        rules=req["rules"], quantiles=req["quantiles"], risk_aversion=crra_of(req), monte_carlo=req["monte_carlo"],
    ))


def bid_strategy_handler(body):
    if groups.asks_for_groups(body):
        return groups.bids_handler(body)
    req = load(BidStrategyRequest, body)
    count = len(req["at"]) if req["at"] is not None else req["points"] or 51
    admission.admit(work=_model_work(body) * (1 + count / 100) * count_work(req["bidders"]), numbers=2 * count,
                    field="at" if req["at"] is not None else "points")
    model, direction, _ = _case(req)
    return wording.bids(core_call(
        reports.bid_strategy, field_prefix="bidder_values" if direction == "forward" else "bidder_costs",
        model=model, direction=direction, bidders=req["bidders"], reserve=req["reserve"], rule=req["rule"],
        points=req["points"] or 51, at=req["at"], risk_aversion=crra_of(req),
    ))


def reserve_price_handler(body):
    req = load(ReservePriceRequest, body)
    admission.admit(work=_model_work(body) * 20 * count_work(req["bidders"]) * (60 if crra_of(req) else 1), numbers=40,
                    field="bidders")
    model, direction, own = _case(req)
    return wording.reserve(core_call(
        reserve.reserve_report, field_prefix="bidder_values" if direction == "forward" else "bidder_costs",
        model=model, direction=direction, bidders=req["bidders"], own_value=own, risk_aversion=crra_of(req),
    ))


HANDLERS = {"/v1/revenue": revenue_handler, "/v1/bid-strategy": bid_strategy_handler,
            "/v1/reserve-price": reserve_price_handler}
register_posts(bp, HANDLERS)
