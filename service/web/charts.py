"""GET /v1/charts/{chart}.svg|.png and POST /v1/charts/{chart}: the answers as pictures.

Each chart asks the JSON routes' own handlers (the same schemas, caps and time budget) and
hands their answers to :mod:`service.charts`, which only draws. GET reads the flat query of
/v1/quote; POST reads the owning route's JSON body. Accept picks SVG or PNG, or
application/json for the points the chart plotted. A refused request answers an image caller
with a small picture that says why (with the 4xx status) and a JSON caller with problem+json.
"""
from __future__ import annotations

import re

from flask import Blueprint, Response, request
from marshmallow import ValidationError

from .. import charts as draw
from ..core.budget import BudgetSpent
from . import auctions, fits, groups, query, sweeps, top_values
from .fields import caps
from .io import json_body, json_response, load
from .problems import flatten, spent_error, validation_problem

bp = Blueprint("charts", __name__)

#: Pixel sizes: (least, default, most).
WIDTH, HEIGHT = (240, 720, 2400), (160, 450, 1600)
#: Points along the reserve axis by default (each a call of /v1/revenue), and a bid curve's.
RESERVE_POINTS, BID_POINTS = 21, 101
#: The most bidder counts drawn where one count n is given (1 to 2n).
BIDDER_POINTS = 40
#: Quantiles drawn for a distribution function (across groups; a fitted model's price).
QUANTILES = [(i + 0.5) / 99 for i in range(99)]
_CURRENCY = re.compile(r"^[A-Za-z€$£¥₹₩₺₽¢]{1,8}$")
_OPTIONS = ("width", "height", "currency")


def _own(body):
    return "bidder_values" if "bidder_values" in body else "bidder_costs"


def _direction(body):
    return "reverse" if "bidder_costs" in body or "cost_groups" in body else "forward"


def _footnote(answer, width):
    """One line: the answer's assumptions, each without its parenthesis, as many as fit."""
    line = "Estimates under stated assumptions"
    for said in answer.get("assumptions") or []:
        part = re.sub(r"\s*\(.*?\)", "", said)
        if len(line) + len(part) + 2 > width / 5.8:  # about 5.8 pixels a character at 7 points
            break
        line += (": " if line.endswith("assumptions") else "; ") + part
    return line + "."


def _top_values(body, opts):
    if groups.asks_for_groups(body):  # no density curves across groups: their distribution functions
        answer = top_values.top_values_handler({**body, "quantiles": QUANTILES})
        return draw.top_values_cdf(answer, _direction(body), footnote=_footnote(answer, opts["width"]), **opts)
    if isinstance(body.get("bidders"), dict):
        raise ValidationError({"bidders": ["The top-values chart draws the densities for a certain number of bidders: "
                                           "give a number."]})
    ranks = [1] if body.get("bidders") == 1 else [1, 2]  # one bidder: the one value there is
    answer = top_values.top_values_handler({"curve_points": 201, **body, "ranks": ranks, "quantiles": []})
    return draw.top_values(answer, _direction(body), footnote=_footnote(answer, opts["width"]), **opts)


def _joint_density(body, opts):
    answer = top_values.joint_density_handler({"grid_points": 81, **body})
    said = {"assumptions": ["independent private values drawn from the stated value model"]}
    return draw.joint_density(answer, footnote=_footnote(said, opts["width"]), **opts)


def _value_range(body):
    """The 0.1% and 99% quantiles of one bidder's value (cost), /v1/top-values for one bidder; with
    groups (loaded by their schema, which also refuses a malformed body), from the lowest group's
    0.1% to the highest group's 99%."""
    if groups.asks_for_groups(body):
        plain = {k: v for k, v in body.items() if k not in ("reserve", "rules", "seller_value", "buyer_value")}
        req = load(groups.GroupRevenueRequest, plain)
        key = "bidder_groups" if req["bidder_groups"] is not None else "cost_groups"
        own = "bidder_values" if key == "bidder_groups" else "bidder_costs"
        models = [g[own] for g in req[key]]
        return min(float(m.ppf(0.001)) for m in models), max(float(m.ppf(0.99)) for m in models)
    one = top_values.top_values_handler({_own(body): body.get(_own(body)), "bidders": 1, "ranks": [1],
                                         "quantiles": [0.001, 0.99]})
    q = one["results"][0]["quantiles"]
    return q[0]["value"], q[1]["value"]


#: Rules drawn where none are asked: the two the trade compares most.
DEFAULT_RULES = ["first_price", "second_price"]


def _axis(name, given):
    """A chart's axis as /v1/sweeps reads it: a list, or a range object ({from, to, step(s)})."""
    try:
        return sweeps.SweepRequest._declared_fields[name].deserialize(given)
    except ValidationError as e:
        raise ValidationError({name: e.messages}) from None


def _revenue_at(body, **change):
    """/v1/revenue with the revenue's 5% and 95% quantiles (groups: the mean and sd alone)."""
    band = {} if groups.asks_for_groups(body) else {"quantiles": [0.05, 0.95]}
    return auctions.revenue_handler({**body, **change, **band})


def _payoffs(body, axis, xs):
    """The auctioneer's expected payoff by rule at each x (the sweep's), where an own value is given."""
    own = "seller_value" if _direction(body) == "forward" else "buyer_value"
    if body.get(own) is None:
        return [None] * len(xs)
    swept = {"bidders": [body["bidders"]], "reserves": xs} if axis == "reserve" else \
        {"bidders": xs, "reserves": [body.get("reserve")] if body.get("reserve") is not None else None}
    if swept["reserves"] is None:
        return [None] * len(xs)
    plain = {k: v for k, v in body.items() if k not in ("reserve", "reserves", "quantiles", "monte_carlo")}
    table = sweeps.sweeps_handler({**plain, **swept, "metrics": ["expected_payoff"]})
    col = {c: i for i, c in enumerate(table["columns"])}
    at = {(row[col[axis if axis == "reserve" else "bidders"]], row[col["rule"]]): row[col["expected_payoff"]]
          for row in table["rows"]}
    return [{rule: v for (x0, rule), v in at.items() if x0 == x} for x in xs]


def _by_reserve(body, opts):
    body = {"rules": DEFAULT_RULES, **body}
    grouped = groups.asks_for_groups(body)
    axis = body.pop("reserves", None)
    if axis is None:
        lo, hi = _value_range(body)
        axis = {"from": lo, "to": hi, "steps": RESERVE_POINTS}
    xs = sorted(set(_axis("reserves", axis)))  # drawn left to right, each once
    if grouped:  # a reserve where the first-price equilibrium is not found is left out, and said
        answers, missed = [], []
        for x in xs:
            try:
                answers.append(_revenue_at(body, reserve=x))
            except ValidationError as e:
                if not isinstance(e.messages, dict) or not set(e.messages) & {"bidder_groups", "cost_groups"}:
                    raise
                missed.append(x)
        if not answers:
            raise ValidationError({"bidder_groups" if "bidder_groups" in body else "cost_groups": [
                "The first-price equilibrium was not found at any reserve asked; ask for second price."]})
        xs = [x for x in xs if x not in missed]
    else:
        answers, missed = [_revenue_at(body, reserve=x) for x in xs], []
    # the sweep and the optimal reserve take one model: with groups, the revenue lines alone
    payoffs = [None] * len(xs) if grouped else _payoffs(body, "reserve", xs)
    optimum = None
    own = "seller_value" if _direction(body) == "forward" else "buyer_value"
    if not grouped and (_direction(body) == "forward" or body.get(own) is not None):
        keep = {k: body[k] for k in (_own(body), "bidders", own, "risk_aversion") if k in body}
        found = auctions.reserve_price_handler(keep)
        optimum = found.get("optimal_reserve")
    note = _footnote(answers[0], opts["width"] - (300 if missed else 0)) + \
        (f" First price not found at {len(missed)} reserve(s) asked: left out." if grouped and missed else "")
    drawn = draw.by_axis(list(zip(xs, answers, payoffs)), "reserve", _direction(body), optimum=optimum, footnote=note, **opts)
    if grouped and missed:
        drawn.series["left_out"] = missed
    return drawn


def _by_bidders(body, opts):
    if groups.asks_for_groups(body):
        key = "bidder_groups" if "bidder_groups" in body else "cost_groups"
        raise ValidationError({key: ["A chart against the number of bidders takes one model; with groups, change each "
                                     "group's count."]})
    body = {"rules": DEFAULT_RULES, **body}
    counts = body.pop("bidders", None)
    if isinstance(counts, int) and not isinstance(counts, bool) and counts >= 1:
        top = min(max(2 * counts, 8), caps().bidders)
        counts = {"from": 1, "to": top, "step": -(-top // BIDDER_POINTS)}
    if counts is None:
        raise ValidationError({"bidders": ["Missing data for required field."]})
    xs = _axis("bidders", counts)
    if not all(isinstance(n, int) for n in xs):
        raise ValidationError({"bidders": ["A chart against the number of bidders takes counts (a list or a range)."]})
    xs = sorted(set(xs))
    answers = [_revenue_at(body, bidders=n) for n in xs]
    payoffs = _payoffs(body, "bidders", xs)
    return draw.by_axis(list(zip(xs, answers, payoffs)), "bidders", _direction(body), footnote=_footnote(answers[0], opts["width"]), **opts)


def _bid_strategy(body, opts):
    body = dict(body)
    key = "rules" if "rules" in body else "rule"
    rules = body.pop("rules", None) or [body.pop("rule", "first_price")]
    if not isinstance(rules, list) or not rules:
        raise ValidationError({"rules": ["Must be a list of rules."]})
    if "at" not in body:
        body.setdefault("points", BID_POINTS)
    answers = []
    for rule in rules:
        try:
            answers.append(auctions.bid_strategy_handler({**body, "rule": rule}))
        except ValidationError as e:  # named as the caller wrote it
            messages = dict(e.messages) if isinstance(e.messages, dict) else {"(request)": e.messages}
            if "rule" in messages and key == "rules":
                messages["rules"] = messages.pop("rule")
            raise ValidationError(messages) from None
    return draw.bid_strategy(answers, _direction(body), footnote=_footnote(answers[0], opts["width"]), **opts)


def _fit(body, opts):
    """Past prices (or first-price bids) against the fitted models: /v1/fits (its bootstrap left
    out: the chart shows no intervals), then what each model implies through the JSON routes."""
    if not isinstance(body.get("auctions"), list) or not body["auctions"]:
        raise ValidationError({"auctions": ["Give the past auctions, as /v1/fits takes them."]})
    answer = fits.fits_handler({**body, "confidence": {**(body.get("confidence") or {}), "replications": 0}})
    records = body["auctions"]  # valid: the fit loaded them
    key = "bidder_values" if answer["direction"] == "forward" else "bidder_costs"
    if any(a.get("reserve") is not None for a in records):
        raise ValidationError({"auctions": ["The fit chart draws records without a reserve."]})
    if all(a.get("price") is not None for a in records):
        return _fit_prices(answer, records, key, opts)
    if answer["rule"] == "first_price" and all(a.get("bids") for a in records):
        return _fit_bids(answer, records, key, opts)
    raise ValidationError({"auctions": ["The fit chart draws prices (second price, ascending) or every bid (first "
                                        "price); these records hold winning bids alone."]})


def _fit_prices(answer, records, key, opts):
    """Each candidate's distribution of the price (rank 2) over the records' bidder counts, as a
    table (/v1/top-values), against the prices."""
    counts = {}
    for a in records:
        counts[a["bidders"]] = counts.get(a["bidders"], 0) + 1
    table = {"distribution": "table", "probabilities": [{"bidders": n, "p": k / len(records)} for n, k in sorted(counts.items())]}
    models = []
    for cand in answer.get("candidates", [])[:4]:
        implied = top_values.top_values_handler({key: cand["model"], "bidders": table, "ranks": [2], "quantiles": QUANTILES})
        models.append((cand["model"]["family"], cand.get("aic"), implied["results"][0]["quantiles"]))
    prices = sorted(a["price"] for a in records)
    return draw.fit(prices, models, answer["direction"], answer["selected"]["model"],
                    footnote=_footnote(answer, opts["width"]), **opts)


def _fit_bids(answer, records, key, opts):
    """The bids of the auctions with the most frequent bidder count n against each model's bid
    distribution there: the model's value quantiles (/v1/top-values, one bidder) and the
    first-price bids at them (/v1/bid-strategy with n bidders)."""
    counts = {}
    for a in records:
        counts[a["bidders"]] = counts.get(a["bidders"], 0) + 1
    n = max(sorted(counts), key=counts.get)
    bids = sorted(b for a in records if a["bidders"] == n for b in a["bids"])
    candidates = [(c["model"]["family"], c.get("aic"), c["model"]) for c in answer.get("candidates", [])[:3]]
    if answer.get("nonparametric"):
        candidates.append(("nonparametric", None, answer["nonparametric"]["model"]))
    models = []
    for name, aic, model in candidates:
        one = top_values.top_values_handler({key: model, "bidders": 1, "ranks": [1], "quantiles": QUANTILES})
        at = [q["value"] for q in one["results"][0]["quantiles"]]
        strategy = auctions.bid_strategy_handler({key: model, "bidders": n, "rule": "first_price", "at": at})
        models.append((name, aic, [{"p": p, "value": b} for p, b in zip(QUANTILES, strategy["bids"]) if b is not None]))
    return draw.fit(bids, models, answer["direction"], answer["selected"]["model"], of=f"bids (auctions of {n} bidders)",
                    footnote=_footnote(answer, opts["width"]), **opts)


CHARTS = {"top-values": _top_values, "joint-density": _joint_density, "revenue-by-reserve": _by_reserve,
          "revenue-by-bidders": _by_bidders, "bid-strategy": _bid_strategy, "fit": _fit}


def _options(args, door, errors):
    """width, height (pixels, within the caps) and currency (a label for the money axes)."""
    opts = {}
    for key, (least, default, most) in (("width", WIDTH), ("height", HEIGHT)):
        value = door.number(key, args[key], errors) if key in args else default
        if value is not None and (not isinstance(value, int) or not least <= value <= most):
            errors[key] = [f"Must be a whole number of pixels from {least} to {most}."]
            value = default
        opts[key] = value
    currency = args.get("currency")
    if currency is not None and not _CURRENCY.match(currency):
        errors["currency"] = ["Up to 8 letters or a currency sign (EUR, USD, €)."]
        currency = None
    opts["currency"] = currency
    return opts


def _answer(chart, fmt, build):
    """Run ``build`` (-> Drawn) and answer in ``fmt`` ('svg', 'png' or 'json'); a refusal as an
    image that says why, or as problem+json for a JSON caller."""
    if chart not in CHARTS:
        err = ValidationError({"chart": [f"One of: {', '.join(CHARTS)}."]})
        return _refuse(err, fmt, status=404)
    try:
        drawn = build()
    except BudgetSpent:
        return _refuse(spent_error(), fmt)
    except ValidationError as err:
        if request.method == "GET":
            err = query.flat_group_errors(err) if query.asks_for_groups(request.args) else query.flat_errors(err)
        return _refuse(err, fmt)
    if fmt == "json":
        return json_response({"chart": chart, "series": drawn.series})
    return Response(drawn.render(fmt), mimetype=draw.MEDIA[fmt])


def _refuse(err, fmt, status=422):
    if fmt == "json":
        resp = validation_problem(err)
        resp.status_code = status
        return resp
    line = "; ".join(f"{e['field']}: {e['message']}" for e in flatten(err.messages))
    return Response(draw.message(f"Not drawn. {line}", fmt), status=status, mimetype=draw.MEDIA[fmt])


def _chart_query(args, door, errors):
    """The POST body from the flat query: the value model, the case, and each chart's axis."""
    if query.asks_for_groups(args):
        body = query.groups_body(args, door, errors, caps().groups)
        for key in ("reserve", "seller_value", "buyer_value"):
            if key in args:
                body[key] = door.number(key, args[key], errors)
    else:
        body = query.case_body(args, door, errors, ("bidders", "reserve", "seller_value", "buyer_value"))
    for key in ("rule", "rules"):
        if key in args:
            body["rules"] = door.names(args[key])
    if "reserves" in args:
        body["reserves"] = door.number_list("reserves", args["reserves"], errors)
    for axis in ("reserves", "bidders"):
        ranged = {k: door.number(f"{axis}_{k}", args[f"{axis}_{k}"], errors)
                  for k in ("from", "to", "step", "steps") if f"{axis}_{k}" in args}
        if ranged:
            body[axis] = ranged
    if "points" in args:
        body["points"] = door.number("points", args["points"], errors)
    return body


def _query_keys():
    return {"direction", "family", "bidders", "reserve", "reserves", "seller_value", "buyer_value", "rule", "rules", "points",
            *_OPTIONS, *query.model_keys(), *query.COUNT_KEYS, *query.group_keys(caps().groups),
            *(f"{a}_{k}" for a in ("reserves", "bidders") for k in ("from", "to", "step", "steps"))}


@bp.get("/v1/charts/<chart>.<fmt>")
def get_chart(chart, fmt):
    errors = {}
    door = query.Door(request.args, errors)
    query.unknown(request.args, _query_keys() | set(query.FORMAT_KEYS), errors)
    opts = _options(request.args, door, errors)
    body = _chart_query(request.args, door, errors)

    def build():
        if chart == "fit":
            errors["chart"] = ["The fit chart needs the past auctions: POST them to /v1/charts/fit."]
        if errors:
            raise ValidationError(errors)
        if chart == "bid-strategy" and "rules" not in body:
            body["rules"] = ["first_price"]
        return CHARTS[chart](body, opts)

    want = "json" if _wants_json() else fmt
    if fmt not in draw.MEDIA:
        return _refuse(ValidationError({"format": ["The chart's name ends in .svg or .png."]}),
                       "json" if want == "json" else "svg", status=404)
    return _answer(chart, want, build)


def post_chart(chart):
    """The chart from the owning route's JSON body: SVG or PNG as Accept asks; without an image
    asked for, the points it plots, as JSON."""
    errors = {}
    door = query.Door({}, errors)
    opts = _options(request.args, door, errors)
    accept = request.accept_mimetypes
    quality = {kind: accept[media] for kind, media in draw.MEDIA.items()}
    best = max(quality, key=quality.get)
    fmt = best if quality[best] > accept["application/json"] else "json"

    def build():
        if errors:
            raise ValidationError(errors)
        return CHARTS[chart](json_body(), opts)

    return _answer(chart, fmt, build)


for _name in CHARTS:
    bp.add_url_rule(f"/v1/charts/{_name}", endpoint=f"post_chart_{_name}", view_func=post_chart,
                    methods=["POST"], defaults={"chart": _name})


def _wants_json():
    accept = request.accept_mimetypes
    return accept["application/json"] > max(accept["image/svg+xml"], accept["image/png"])
