"""POST /v1/fits: value (or cost) models recovered from past auctions' prices or bids."""
from __future__ import annotations

from flask import Blueprint, request
from marshmallow import Schema, ValidationError, fields, validate, validates_schema

from ..core.fits import mle
from ..core.fits.report import check_replications, fit_report
from . import admission, wording
from .auctions import RiskAversion, crra_of
from .fields import CappedList, StrictFloat, StrictInteger, caps, rule_list
from .fits_csv import auctions_from_csv, options_from_query
from .io import body_bytes, core_call, json_body, json_response, load

bp = Blueprint("fits", __name__)

#: Seconds of work per price record and refit, measured (about 6 us on one CPU; see make bench),
#: on top of a refit's own 0.25 ms (its model builds and Newton steps, whatever the records).
_SECONDS_PER_RECORD_REFIT = 6e-6
_SECONDS_PER_REFIT = 2.5e-4
#: Seconds per bid of one Guerre-Perrigne-Vuong inversion (a reflected kernel summed on a
#: 1,024-point grid: about 3 us a bid).
_SECONDS_PER_BID_INVERSION = 4e-6
_SECONDS_PER_INVERSION = 4e-3
#: Seconds per replicate's counterfactual figures (the second-price route and the reserve
#: search under a kernel model of 400 points, the slowest a fit selects; about 0.025 s).
_SECONDS_PER_COUNTERFACTUAL = 0.03
#: Seconds per evaluation of first-price bids' likelihood and per bidder count and reserve in the records
#: (a grid of equilibrium bids and two splines, about 1 ms on one CPU, more for a family whose
#: quantiles are not closed forms); evaluations per full fit, and per refit (Newton steps).
_SECONDS_PER_BID_COUNT = 1.2e-3
_BID_FIT_EVALUATIONS = 500
_BID_REFIT_EVALUATIONS = 15
#: The most bootstrap replications a request may ask for.
MAX_REPLICATIONS = 2000


def _each_once(names):
    if len(set(names)) != len(names):
        raise ValidationError("Each family at most once.")


class AuctionRecord(Schema):
    """One past auction: its bidder count and what was seen of it."""

    bidders = StrictInteger(minimum=1, maximum="bidders", required=True)
    price = StrictFloat(load_default=None)
    bids = CappedList(StrictFloat(), 1, "bidders", load_default=None)
    winning_bid = StrictFloat(load_default=None)
    reserve = StrictFloat(load_default=None)
    sold = fields.Boolean(load_default=True, truthy={True}, falsy={False})
    covariates = fields.Dict(load_default=None)


class Confidence(Schema):
    level = StrictFloat(bound="open_probability", load_default=0.9)
    replications = StrictInteger(minimum=0, maximum=MAX_REPLICATIONS, load_default=200)
    seed = StrictInteger(minimum=0, maximum=2**32 - 1, load_default=0)


class Counterfactual(Schema):
    bidders = StrictInteger(minimum=1, maximum="bidders", required=True)
    reserve = StrictFloat(load_default=None)
    seller_value = StrictFloat(load_default=None)
    buyer_value = StrictFloat(load_default=None)
    rules = rule_list(load_default=lambda: ["first_price", "second_price"])


class FitRequest(Schema):
    rule = fields.String(required=True, validate=validate.OneOf(["first_price", "second_price", "ascending"]))
    direction = fields.String(load_default="forward", validate=validate.OneOf(["forward", "reverse"]))
    auctions = CappedList(fields.Nested(AuctionRecord), 2, "fit_auctions", required=True)
    families = CappedList(fields.String(validate=validate.OneOf(list(mle.FITTED))), 1, len(mle.FITTED), load_default=None,
                          validate=_each_once)
    nonparametric = fields.Boolean(load_default=True, truthy={True}, falsy={False})
    covariates = CappedList(fields.String(), 0, 20, load_default=list)
    confidence = fields.Nested(Confidence, load_default=lambda: Confidence().load({}))
    counterfactual = fields.Nested(Counterfactual, load_default=None)
    risk_aversion = fields.Nested(RiskAversion, load_default=None)

    @validates_schema(skip_on_field_errors=True)
    def _direction_values(self, data, **kw):
        cf = data.get("counterfactual")
        if cf is not None and data["direction"] == "forward" and cf.get("buyer_value") is not None:
            raise ValidationError({"counterfactual.buyer_value": ["Only for a reverse fit; a forward one takes seller_value."]})
        if cf is not None and data["direction"] == "reverse" and cf.get("seller_value") is not None:
            raise ValidationError({"counterfactual.seller_value": ["Only for a forward fit; a reverse one takes buyer_value."]})


def _admit(req):
    """Refuse, before the work, a fit whose bootstrap would run past the time budget."""
    conf = req["confidence"]
    refits = conf["replications"] + check_replications(conf["replications"])
    records = sum(len(a["bids"]) if a.get("bids") else 1 for a in req["auctions"])
    if req["rule"] == "first_price":
        # each replicate inverts every bid again (a kernel sum over a grid); each family named
        # evaluates the bids' likelihood per bidder count and reserve
        counts = len({(a["bidders"], a.get("reserve")) for a in req["auctions"]})
        evaluations = len(req["families"] or ()) * (_BID_FIT_EVALUATIONS + _BID_REFIT_EVALUATIONS * refits)
        seconds = (_SECONDS_PER_INVERSION + _SECONDS_PER_BID_INVERSION * records) * (1 + conf["replications"]) \
            + _SECONDS_PER_BID_COUNT * counts * evaluations
        families = len(req["families"] or ())
    else:
        families = len(req["families"] or mle.FITTED)
        seconds = (_SECONDS_PER_REFIT + _SECONDS_PER_RECORD_REFIT * records) * (families * refits + 50)
    if req["counterfactual"] is not None:
        seconds += _SECONDS_PER_COUNTERFACTUAL * conf["replications"]
    if seconds > caps().seconds:
        raise ValidationError({"confidence.replications": [
            f"This fit would take about {seconds:.0f} s, past the {caps().seconds:g} s budget: ask for fewer replications, "
            "fewer families, or fit a sample of the auctions."]})
    admission.admit(work=seconds * 100.0, numbers=40 * (families + 2), field="auctions")


def fits_handler(body):
    req = load(FitRequest, body)
    _admit(req)
    cf = req["counterfactual"]
    if cf is not None:
        own = cf.pop("seller_value") if req["direction"] == "forward" else cf.pop("buyer_value")
        cf.pop("buyer_value" if req["direction"] == "forward" else "seller_value", None)
        cf["own_value"] = own
    return wording.fits(core_call(
        fit_report, rule=req["rule"], direction=req["direction"], auctions=req["auctions"], families=req["families"],
        nonparametric=req["nonparametric"], confidence=req["confidence"], counterfactual=cf, covariates=req["covariates"],
        risk_aversion=crra_of(req)))


HANDLERS = {"/v1/fits": fits_handler}


@bp.post("/v1/fits")
def fits_view():
    """JSON as every POST route takes it, or CSV records with the options in the query string."""
    if (request.mimetype or "") in ("text/csv", "application/csv"):
        try:
            text = body_bytes().decode("utf-8-sig")
        except UnicodeDecodeError:
            raise ValidationError({"(body)": ["The CSV body must be UTF-8 text."]}) from None
        body = {**options_from_query(request.args), "auctions": auctions_from_csv(text)}
    else:
        body = json_body()
        if request.args:
            raise ValidationError({k: ["Options go in the JSON body; the query string is for a CSV body."] for k in request.args})
    return json_response(fits_handler(body))
