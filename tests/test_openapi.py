"""openapi.yaml against the app it describes.

These are contract checks, not numerical ones: the description must be valid
OpenAPI 3.1 (OpenAPI Specification 3.1.0; JSON Schema draft 2020-12), list
exactly the app's routes, carry an example for every operation, and its
schemas must accept what the app answers and refuse what the app refuses.
Error bodies follow RFC 9457 (Problem Details for HTTP APIs, 2023, section 3).
"""
from __future__ import annotations

import copy
import json
import os
import re
from pathlib import Path

import jsonschema
import pytest
import yaml
from openapi_spec_validator import validate
from referencing import Registry
from referencing.jsonschema import DRAFT202012

from service import create_app, settings
from service.core import rules as core_rules
from service.web import auctions as web_auctions
from service.web import fields as web_fields
from service.web import groups as web_groups
from service.web import top_values as web_top_values

SPEC_PATH = Path(__file__).resolve().parents[1] / "openapi.yaml"
SPEC = yaml.safe_load(SPEC_PATH.read_text(encoding="utf-8"))
SPEC_URI = "urn:bidstats:openapi"
# The whole document as one 2020-12 resource, so every "#/components/..." $ref resolves.
REGISTRY = Registry().with_resource(SPEC_URI, DRAFT202012.create_resource(SPEC))
HTTP_METHODS = {"get", "put", "post", "delete", "options", "head", "patch", "trace"}
ERROR_STATUSES_OF_POST = {"400", "413", "415", "422", "500"}
PROBLEM = "application/problem+json"


# ---------------------------------------------------------------- helpers
def _esc(token):
    """One JSON-pointer token (RFC 6901, section 3)."""
    return str(token).replace("~", "~0").replace("/", "~1")


def _at(pointer):
    node = SPEC
    for token in pointer.lstrip("/").split("/"):
        node = node[token.replace("~1", "/").replace("~0", "~")]
    return node


def _deref(pointer):
    """Follow local $refs (as responses use them) to the node and its pointer."""
    node = _at(pointer)
    while isinstance(node, dict) and "$ref" in node:
        pointer = node["$ref"].removeprefix("#")
        node = _at(pointer)
    return pointer, node


def _validator(schema_pointer):
    return jsonschema.Draft202012Validator({"$ref": f"{SPEC_URI}#{schema_pointer}"}, registry=REGISTRY)


def _component(name):
    return _validator(f"/components/schemas/{_esc(name)}")


def _errors(validator, instance):
    return [f"{'/'.join(map(str, e.absolute_path)) or '(root)'}: {e.message}" for e in validator.iter_errors(instance)]


def _operations():
    for path, item in SPEC["paths"].items():
        for method, op in item.items():
            if method in HTTP_METHODS:
                yield path, method, op


def _media(path, method, where):
    """(schema pointer, media object) per content type of the request or a response."""
    base = f"/paths/{_esc(path)}/{method}"
    if where == "request":
        pointer, node = _deref(f"{base}/requestBody")
    else:
        pointer, node = _deref(f"{base}/responses/{where}")
    return {mt: (f"{pointer}/content/{_esc(mt)}/schema", media) for mt, media in node.get("content", {}).items()}


def _app_routes(app):
    """(path, method) of every route, HEAD/OPTIONS and the static route left out."""
    out = set()
    for rule in app.url_map.iter_rules():
        if rule.endpoint == "static":
            continue
        path = re.sub(r"<(?:[^:<>]+:)?([^<>]+)>", r"{\1}", rule.rule)
        out |= {(path, m.lower()) for m in rule.methods - {"HEAD", "OPTIONS"}}
    return out


def _strict_json(raw):
    def refuse(name):
        raise AssertionError(f"{name} in a response body")
    return json.loads(raw, parse_constant=refuse)


IMPLEMENTED = _app_routes(create_app())


def _example_cases(where_filter):
    cases = []
    for path, method, op in _operations():
        wheres = (["request"] if "requestBody" in op else []) + list(op["responses"])
        for where in wheres:
            if not where_filter(where):
                continue
            for mt, (_, media) in _media(path, method, where).items():
                for name in media.get("examples", {}):
                    cases.append(pytest.param(path, method, where, mt, name, id=f"{method} {path} {where} {mt} {name}"))
    return cases


# ---------------------------------------------------------------- the document
def test_spec_is_valid_openapi_3_1():
    assert SPEC["openapi"].startswith("3.1.")
    validate(SPEC)


def test_spec_paths_are_exactly_the_app_routes():
    spec_routes = {(path, method) for path, method, _ in _operations()}
    assert spec_routes == _app_routes(create_app())


def test_implemented_routes_are_all_described():
    # The part of the route check that holds already: nothing the app serves is undocumented.
    spec_routes = {(path, method) for path, method, _ in _operations()}
    assert IMPLEMENTED - spec_routes == set()


@pytest.mark.parametrize("path,method", [(p, m) for p, m, _ in _operations()], ids=lambda x: x)
def test_every_operation_has_examples(path, method):
    op = SPEC["paths"][path][method]
    ok = [mt for mt, (_, media) in _media(path, method, "200").items() if media.get("examples")]
    assert ok, "the 200 response has no example"
    if "requestBody" in op:
        requests = {name for _, (_, media) in _media(path, method, "request").items() for name in media.get("examples", {})}
        answers = {name for _, (_, media) in _media(path, method, "200").items() for name in media.get("examples", {})}
        assert requests, "the request body has no example"
        assert requests == answers, "each request example needs an answer of the same name, and no more"


@pytest.mark.parametrize("path,method,where,mt,name", _example_cases(lambda w: True))
def test_every_example_matches_its_schema(path, method, where, mt, name):
    pointer, media = _media(path, method, where)[mt]
    value = media["examples"][name]["value"]
    assert _errors(_validator(pointer), value) == []


def test_every_error_response_is_a_problem():
    for path, method, op in _operations():
        for status in op["responses"]:
            if status.startswith(("4", "5")):
                # The spreadsheet route answers errors as one plain line unless JSON is asked for;
                # a chart answers an image caller with a picture that says why.
                allowed = {PROBLEM, "text/plain"} if path in ("/v1/quote", "/v1/sweeps.csv") and status == "422" else {PROBLEM}
                if path.startswith("/v1/charts/") and status in ("404", "422"):
                    allowed = {PROBLEM, "image/svg+xml", "image/png"}
                assert set(_media(path, method, status)) == allowed, (path, method, status)
        if method == "post":
            assert ERROR_STATUSES_OF_POST <= set(op["responses"]), (path, method)
    for name, response in SPEC["components"]["responses"].items():
        if name not in ("Chart", "ChartRefused"):
            assert set(response["content"]) == {PROBLEM}, name


# ---------------------------------------------------------------- the app
@pytest.mark.parametrize(
    "path,method,where,mt,name",
    [c for c in _example_cases(lambda w: w == "request") if (c.values[0], c.values[1]) in IMPLEMENTED],
)
def test_implemented_examples_answer_200_and_match_the_schema(client, path, method, where, mt, name):
    pointer, media = _media(path, method, "request")[mt]
    body = media["examples"][name]["value"]
    r = client.open(path, method=method.upper(), json=body)
    assert r.status_code == 200, r.get_data(as_text=True)
    assert r.mimetype == "application/json"
    schema_pointer, _ = _media(path, method, "200")["application/json"]
    assert _errors(_validator(schema_pointer), _strict_json(r.get_data())) == []


def test_healthz_matches_the_schema(client):
    r = client.get("/healthz")
    assert r.status_code == 200 and r.mimetype == "application/json"
    pointer, _ = _media("/healthz", "get", "200")["application/json"]
    assert _errors(_validator(pointer), _strict_json(r.get_data())) == []


def test_openapi_yaml_is_served_byte_for_byte(client):
    r = client.get("/openapi.yaml")
    assert r.status_code == 200
    assert r.mimetype == "application/yaml"
    assert r.get_data() == SPEC_PATH.read_bytes()
    assert set(_media("/openapi.yaml", "get", "200")) == {"application/yaml"}


def _problem_cases():
    tri = {"family": "triangular", "low": 40000, "mode": 60000, "high": 90000}
    big = b"{" + b" " * settings.CAPS.body_bytes + b"}"
    return [
        ("BadRequest", 400, dict(method="POST", path="/v1/top-values", data=b"{", content_type="application/json")),
        ("BadRequest", 400, dict(method="POST", path="/v1/top-values", data=b"[1, 2]", content_type="application/json")),
        ("BadRequest", 400, dict(method="POST", path="/v1/top-values", data=b'{"bidders": NaN}', content_type="application/json")),
        ("NotFound", 404, dict(method="GET", path="/v1/no-such-thing")),
        ("MethodNotAllowed", 405, dict(method="GET", path="/v1/top-values")),
        ("MethodNotAllowed", 405, dict(method="POST", path="/healthz", json={})),
        ("PayloadTooLarge", 413, dict(method="POST", path="/v1/top-values", data=big, content_type="application/json")),
        ("UnsupportedMediaType", 415, dict(method="POST", path="/v1/top-values", data=b"bidders=6", content_type="application/x-www-form-urlencoded")),
        ("InvalidInput", 422, dict(method="POST", path="/v1/top-values", json={"bidder_values": {**tri, "sd": 1}, "bidders": 0})),
        ("InvalidInput", 422, dict(method="POST", path="/v1/top-values/joint-density", json={"bidder_values": tri, "bidders": 1})),
    ]


@pytest.mark.parametrize("name,status,request_kw", _problem_cases(), ids=lambda x: x if isinstance(x, (str, int)) else "")
def test_error_answers_match_the_problem_responses(client, name, status, request_kw):
    kw = dict(request_kw)
    r = client.open(kw.pop("path"), method=kw.pop("method"), **kw)
    assert r.status_code == status
    assert r.mimetype == PROBLEM
    response = SPEC["components"]["responses"][name]
    pointer = f"/components/responses/{name}/content/{_esc(PROBLEM)}/schema"
    body = _strict_json(r.get_data())
    assert _errors(_validator(pointer), body) == []
    assert body["status"] == status
    if status == 405:
        assert "Allow" in response["headers"]
        assert r.headers.get("Allow")


def test_internal_error_matches_the_problem_response():
    app = create_app()

    @app.get("/test-only-failure")
    def _fail():
        raise RuntimeError("deliberate failure for this test")

    r = app.test_client().get("/test-only-failure")
    assert r.status_code == 500 and r.mimetype == PROBLEM
    body = _strict_json(r.get_data())
    assert _errors(_validator(f"/components/responses/InternalError/content/{_esc(PROBLEM)}/schema"), body) == []
    assert "deliberate" not in r.get_data(as_text=True)


# ---------------------------------------------------------------- caps and limits
def _max(field):
    """A field's maximum, read from the caps where it names one."""
    return web_fields._limit(field.maximum)[0]


@pytest.mark.skipif(any(k.startswith("BIDSTATS_MAX_") for k in os.environ), reason="the spec documents the default caps")
def test_caps_in_the_spec_are_the_service_caps():
    caps = settings.CAPS
    s = SPEC["components"]["schemas"]
    tv = web_top_values.TopValuesRequest._declared_fields
    jd = web_top_values.JointDensityRequest._declared_fields
    qt = web_fields.QuantileTableSchema._declared_fields
    rev = web_auctions.RevenueRequest._declared_fields
    bid = web_auctions.BidStrategyRequest._declared_fields
    # (what the spec says, what the code enforces)
    pairs = {
        "Bidders = CAPS.bidders": (s["Bidders"]["oneOf"][0]["maximum"], caps.bidders),
        "count table maxItems = CAPS.bidder_counts": (s["Bidders"]["oneOf"][3]["properties"]["probabilities"]["maxItems"],
                                                      caps.bidder_counts),
        "entry potential = CAPS.bidder_counts": (s["Bidders"]["oneOf"][4]["properties"]["potential"]["maximum"], caps.bidder_counts),
        "JointDensityRequest.bidders": (s["JointDensityRequest"]["properties"]["bidders"]["anyOf"][0]["maximum"], caps.bidders),
        "ranks.maxItems": (s["TopValuesRequest"]["properties"]["ranks"]["maxItems"], caps.ranks),
        "quantiles.maxItems": (s["QuantileLevels"]["maxItems"], caps.quantiles),
        "curve_points.maximum": (s["TopValuesRequest"]["properties"]["curve_points"]["maximum"], _max(tv["curve_points"])),
        "bid-strategy points.maximum": (s["BidStrategyRequest"]["properties"]["points"]["maximum"], caps.curve_points),
        "grid_points.maximum": (s["JointDensityRequest"]["properties"]["grid_points"]["maximum"], _max(jd["grid_points"])),
        "points.maxItems": (s["JointDensityRequest"]["properties"]["points"]["maxItems"], caps.points),
        "bid-strategy at.maxItems": (s["BidStrategyRequest"]["properties"]["at"]["maxItems"], caps.points),
        "sample.maxItems": (s["EmpiricalValues"]["properties"]["sample"]["maxItems"], caps.sample),
        "components.maxItems": (s["MixtureValues"]["properties"]["components"]["maxItems"], caps.components),
        "inner components.maxItems": (s["InnerMixtureValues"]["properties"]["components"]["maxItems"], caps.components),
        "quantile_table points.maxItems": (s["QuantileTableValues"]["properties"]["points"]["maxItems"], _max(qt["points"])),
        "quantile_table points.minItems": (s["QuantileTableValues"]["properties"]["points"]["minItems"], qt["points"].minimum),
        "revenue quantiles.maxItems": (s["QuantileLevels"]["maxItems"], _max(rev["quantiles"])),
        "revenue rules.maxItems": (s["RevenueRequest"]["properties"]["rules"]["maxItems"], _max(rev["rules"])),
        "bid-strategy points.minimum": (s["BidStrategyRequest"]["properties"]["points"]["minimum"], bid["points"].minimum),
        "bid-strategy points (code)": (s["BidStrategyRequest"]["properties"]["points"]["maximum"], _max(bid["points"])),
        "bid-strategy at (code)": (s["BidStrategyRequest"]["properties"]["at"]["maxItems"], _max(bid["at"])),
    }
    assert {k: a for k, (a, b) in pairs.items() if a != b} == {}


@pytest.mark.skipif(any(k.startswith("BIDSTATS_MAX_") for k in os.environ), reason="the spec documents the default caps")
def test_group_caps_in_the_spec_are_the_service_caps():
    caps = settings.CAPS
    s = SPEC["components"]["schemas"]
    grp = web_groups.GroupSchema._declared_fields
    bids = web_groups.GroupBidsRequest._declared_fields
    name_length = next(v for v in grp["name"].validators if hasattr(v, "max"))
    pairs = {}
    for req, code in (("GroupRevenueRequest", web_groups.GroupRevenueRequest), ("GroupBidStrategyRequest", web_groups.GroupBidsRequest)):
        for key in ("bidder_groups", "cost_groups"):
            field = code._declared_fields[key]
            pairs[f"{req}.{key}.maxItems = CAPS.groups"] = (s[req]["properties"][key]["maxItems"], caps.groups)
            pairs[f"{req}.{key}.maxItems (code)"] = (s[req]["properties"][key]["maxItems"], _max(field))
            pairs[f"{req}.{key}.minItems (code)"] = (s[req]["properties"][key]["minItems"], field.minimum)
    for group in ("BidderGroup", "CostGroup"):
        pairs[f"{group}.count.maximum = CAPS.bidders"] = (s[group]["properties"]["count"]["maximum"], caps.bidders)
        pairs[f"{group}.count.maximum (code)"] = (s[group]["properties"]["count"]["maximum"], _max(grp["count"]))
        pairs[f"{group}.count.minimum (code)"] = (s[group]["properties"]["count"]["minimum"], grp["count"].minimum)
        pairs[f"{group}.name.maxLength (code)"] = (s[group]["properties"]["name"]["maxLength"], name_length.max)
        pairs[f"{group}.name.minLength (code)"] = (s[group]["properties"]["name"]["minLength"], name_length.min)
    gb = s["GroupBidStrategyRequest"]["properties"]
    pairs["group points.maximum (code)"] = (gb["points"]["maximum"], _max(bids["points"]))
    pairs["group points.minimum (code)"] = (gb["points"]["minimum"], bids["points"].minimum)
    pairs["group at.maxItems (code)"] = (gb["at"]["maxItems"], _max(bids["at"]))
    assert {k: a for k, (a, b) in pairs.items() if a != b} == {}
    assert f"`BIDSTATS_MAX_GROUPS` ({caps.groups} bidder groups)" in SPEC["info"]["description"]


def test_group_rules_are_the_code_rules_but_all_pay():
    spec = SPEC["components"]["schemas"]
    offered = [r for r in core_rules.names() if core_rules.get(r).pricing is not core_rules.ALL_PAY]
    assert spec["GroupRule"]["enum"] == offered
    assert spec["GroupRevenueRequest"]["properties"]["rules"]["default"] == offered
    assert spec["GroupRevenueRequest"]["properties"]["rules"]["maxItems"] == len(offered)


def test_auction_rules_are_the_code_rules():
    spec = SPEC["components"]["schemas"]
    assert spec["AuctionRule"]["enum"] == list(core_rules.names())
    assert spec["RevenueRequest"]["properties"]["rules"]["default"] == list(core_rules.names())


def test_value_model_families_are_the_code_families():
    mapping = SPEC["components"]["schemas"]["ValueModel"]["discriminator"]["mapping"]
    assert sorted(mapping) == web_fields.families()
    for family, ref in mapping.items():
        assert _at(ref.removeprefix("#"))["properties"]["family"] == {"const": family}


def test_parametric_families_list_the_code_parameters():
    from service.core import models as M

    for family, cls in M.PARAMETRIC.items():
        schema = SPEC["components"]["schemas"]["ValueModel"]["discriminator"]["mapping"][family]
        node = _at(schema.removeprefix("#"))
        assert set(node["properties"]) == {"family", "truncate", *cls.parameters}, family
        required = {name for name, p in cls.parameters.items() if p.required}
        assert set(node["required"]) == {"family", *required}, family
        for name, p in cls.parameters.items():
            prop = node["properties"][name]
            assert (prop.get("exclusiveMinimum") == 0) == (p.bound == "positive"), (family, name)
            if p.default is not None:
                assert prop.get("default") == p.default, (family, name)
            # The declared reliable range (models.Param.reliable) is the schema's minimum and maximum.
            assert (prop.get("minimum"), prop.get("maximum")) == tuple(p.reliable), (family, name)


# ---------------------------------------------------------------- accept/refuse agreement
TRI = {"family": "triangular", "low": 40000, "mode": 60000, "high": 90000}
COSTS = {"family": "triangular", "low": 120000, "mode": 150000, "high": 200000}
LOGN = {"family": "lognormal", "median": 60000, "sigma": 0.2}
TV, JD = "/v1/top-values", "/v1/top-values/joint-density"
REV, BID, RES = "/v1/revenue", "/v1/bid-strategy", "/v1/reserve-price"


def _tv(**kw):
    return {"bidder_values": TRI, "bidders": 4, **kw}


def _mix(*models):
    w = 1.0 / len(models)
    return {"family": "mixture", "components": [{"weight": w, "model": m} for m in models]}


# Bodies whose fate turns only on structure the schemas can express; the app's
# answer (200 or 422) and the spec's verdict must agree on each, and every 200
# answer must match the response schema.
AGREEMENT = [
    (TV, _tv()),
    (TV, _tv(bidders=6.0)),
    (TV, _tv(bidders=2.5)),
    (TV, _tv(bidders=0)),
    (TV, _tv(bidders=settings.CAPS.bidders + 1)),
    (TV, _tv(bidders="4")),
    (TV, _tv(bidders=True)),
    (TV, {"bidders": 4}),
    (TV, {"bidder_values": TRI}),
    (TV, _tv(colour="red")),
    (TV, _tv(ranks=None)),
    (TV, _tv(ranks=[])),
    (TV, _tv(ranks=[0])),
    (TV, _tv(ranks=[1, 2.5])),
    (TV, _tv(quantiles=[])),
    (TV, _tv(quantiles=[0.0])),
    (TV, _tv(quantiles=[1.0])),
    (TV, _tv(quantiles=None)),
    (TV, _tv(quantiles=[0.5] * (settings.CAPS.quantiles + 1))),
    (TV, _tv(curve_points=0)),
    (TV, _tv(curve_points=1)),
    (TV, _tv(curve_points=2)),
    (TV, _tv(curve_points=-1)),
    (TV, _tv(curve_points=settings.CAPS.curve_points + 1)),
    (TV, _tv(bidder_values={"family": "gaussian", "mean": 1, "sd": 1})),
    (TV, _tv(bidder_values={"mean": 1, "sd": 1})),
    (TV, _tv(bidder_values=[1, 2])),
    (TV, _tv(bidder_values={**TRI, "sd": 1})),
    (TV, _tv(bidder_values={**TRI, "truncate": None})),
    (TV, _tv(bidder_values={**TRI, "truncate": {"low": None, "high": 85000}})),
    (TV, _tv(bidder_values={**TRI, "truncate": {"top": 85000}})),
    (TV, _tv(bidder_values={**TRI, "low": None})),
    (TV, _tv(bidder_values={**TRI, "low": "40000"})),
    (TV, _tv(bidder_values={"family": "normal", "mean": 60000, "sd": 0})),
    (TV, _tv(bidder_values={"family": "normal", "mean": 60000, "sd": 8000})),
    (TV, _tv(bidder_values={"family": "normal", "mean": 60000})),
    (TV, _tv(bidder_values=LOGN)),
    (TV, _tv(bidder_values={"family": "lognormal", "mean": 62000, "sd": 9000})),
    (TV, _tv(bidder_values={"family": "lognormal", "mean": 62000, "sd": 9000, "median": None, "sigma": None})),
    (TV, _tv(bidder_values={**LOGN, "mean": 62000})),
    (TV, _tv(bidder_values={"family": "lognormal", "median": 60000})),
    (TV, _tv(bidder_values={"family": "lognormal"})),
    (TV, _tv(bidder_values={"family": "exponential", "mean": 5000, "shift": 40000})),
    (TV, _tv(bidder_values={"family": "exponential", "mean": 5000, "shift": None})),
    (TV, _tv(bidder_values={"family": "beta", "alpha": 2, "beta": 3, "low": 40000, "high": 90000})),
    (TV, _tv(bidder_values={"family": "beta", "alpha": 2, "beta": 3, "high": None})),
    (TV, _tv(bidder_values={"family": "pareto", "shape": 3, "minimum": 40000})),
    (TV, _tv(bidder_values={"family": "pareto", "shape": -3, "minimum": 40000})),
    (TV, _tv(bidder_values={"family": "power", "exponent": 2, "high": 90000})),
    (TV, _tv(bidder_values={"family": "gamma", "shape": 9, "scale": 7000})),
    (TV, _tv(bidder_values={"family": "weibull", "shape": 4, "scale": 65000})),
    (TV, _tv(bidder_values={"family": "uniform", "low": 40000, "high": 90000})),
    (TV, _tv(bidder_values={"family": "empirical", "sample": [50000, 55000, 61000, 64000, 70000]})),
    (TV, _tv(bidder_values={"family": "empirical", "sample": [50000, 55000, 61000, 64000]})),
    (TV, _tv(bidder_values={"family": "empirical", "sample": [50000, 55000, 61000, 64000, "70000"]})),
    (TV, _tv(bidder_values={"family": "empirical", "sample": [50000, 55000, 61000, 64000, 70000], "smoothing": "none"})),
    (TV, _tv(bidder_values={"family": "empirical", "sample": [50000, 55000, 61000, 64000, 70000], "smoothing": "box"})),
    (TV, _tv(bidder_values={"family": "empirical", "sample": [50000, 55000, 61000, 64000, 70000], "low": None, "high": 95000})),
    (TV, _tv(bidder_values={"family": "empirical", "sample": [50000, 55000, 61000, 64000, 70000], "truncate": {"low": 0}})),
    (TV, _tv(bidder_values={"family": "quantile_table", "points": [{"p": 0, "value": 40000}, {"p": 0.5, "value": 60000}, {"p": 1, "value": 90000}]})),
    (TV, _tv(bidder_values={"family": "quantile_table", "points": [{"p": 0.5, "value": 60000}], "low": 40000, "high": 90000})),
    (TV, _tv(bidder_values={"family": "quantile_table", "points": [{"p": 0.5, "value": 60000}, {"p": 1.5, "value": 90000}], "low": 40000})),
    (TV, _tv(bidder_values={"family": "quantile_table", "points": [{"p": 0, "value": 40000}, {"p": 1, "value": 90000, "weight": 1}]})),
    (TV, _tv(bidder_values=_mix(TRI, LOGN))),
    (TV, _tv(bidder_values=_mix(TRI, _mix(TRI, LOGN)))),
    (TV, _tv(bidder_values=_mix(TRI, _mix(TRI, _mix(TRI, LOGN))))),
    (TV, _tv(bidder_values={"family": "mixture", "components": []})),
    (TV, _tv(bidder_values={"family": "mixture", "components": [{"weight": 1.5, "model": TRI}]})),
    (TV, _tv(bidder_values={"family": "mixture", "components": [{"weight": 1, "model": TRI, "name": "dealers"}]})),
    (TV, _tv(bidder_values={"family": "mixture", "components": [{"weight": 1, "model": TRI}], "truncate": None})),
    (TV, _tv(bidder_values={"family": "mixture", "components": [{"weight": 1 / 60, "model": TRI}] * 60})),
    (JD, {"bidder_values": TRI, "bidders": 3}),
    (JD, {"bidder_values": TRI, "bidders": 1}),
    (JD, {"bidder_values": TRI, "bidders": 3, "ranks": [1, 3], "grid_points": 5}),
    (JD, {"bidder_values": TRI, "bidders": 3, "ranks": [1, 2, 3]}),
    (JD, {"bidder_values": TRI, "bidders": 3, "ranks": None}),
    (JD, {"bidder_values": TRI, "bidders": 3, "grid_points": 1}),
    (JD, {"bidder_values": TRI, "bidders": 3, "grid_points": settings.CAPS.grid_points + 1}),
    (JD, {"bidder_values": TRI, "bidders": 3, "grid_points": None, "points": [{"higher": 80000, "lower": 70000}]}),
    (JD, {"bidder_values": TRI, "bidders": 3, "grid_points": 5, "points": [{"higher": 80000, "lower": 70000}]}),
    (JD, {"bidder_values": TRI, "bidders": 3, "grid_points": 5, "points": None}),
    (JD, {"bidder_values": TRI, "bidders": 3, "points": []}),
    (JD, {"bidder_values": TRI, "bidders": 3, "points": [{"higher": 80000}]}),
    (JD, {"bidder_values": TRI, "bidders": 3, "points": [{"higher": 80000, "lower": 70000, "rank": 1}]}),
    (TV, _tv(bidder_values={"family": "pareto", "shape": 0.8, "minimum": 40000})),
    (REV, {"bidder_values": TRI, "bidders": 4}),
    (REV, {"bidder_values": TRI, "bidders": 4, "reserve": 55000, "seller_value": 45000, "rules": ["first_price"]}),
    (REV, {"bidder_values": TRI, "bidders": 1, "reserve": 50000, "rules": ["second_price", "all_pay"]}),
    (REV, {"bidder_values": TRI, "bidders": 4, "reserve": None, "seller_value": None, "bidder_costs": None, "buyer_value": None}),
    (REV, {"bidder_costs": COSTS, "bidders": 4}),
    (REV, {"bidder_costs": COSTS, "bidders": 4, "buyer_value": 210000, "reserve": 185000, "bidder_values": None, "seller_value": None}),
    (REV, {"bidder_values": TRI, "bidder_costs": COSTS, "bidders": 4}),
    (REV, {"bidders": 4}),
    (REV, {"bidder_values": None, "bidders": 4}),
    (REV, {"bidder_values": TRI, "bidders": 4, "buyer_value": 50000}),
    (REV, {"bidder_costs": COSTS, "bidders": 4, "seller_value": 50000}),
    (REV, {"bidder_values": TRI, "bidders": 0}),
    (REV, {"bidder_values": TRI, "bidders": 4, "rules": []}),
    (REV, {"bidder_values": TRI, "bidders": 4, "rules": ["first_price", "first_price"]}),
    (REV, {"bidder_values": TRI, "bidders": 4, "rules": ["sealed_bid"]}),
    (REV, {"bidder_values": TRI, "bidders": 4, "reserve": "55000"}),
    (REV, {"bidder_values": TRI, "bidders": 4, "quantiles": [1.0]}),
    (REV, {"bidder_values": TRI, "bidders": 4, "rule": "first_price"}),
    (BID, {"bidder_values": TRI, "bidders": 4}),
    (BID, {"bidder_values": TRI, "bidders": 4, "rule": "all_pay", "points": 5, "reserve": 55000}),
    (BID, {"bidder_costs": COSTS, "bidders": 4, "rule": "descending", "at": [130000, 150000], "reserve": 185000}),
    (BID, {"bidder_values": TRI, "bidders": 4, "points": None, "at": [50000.0], "seller_value": 45000}),
    (BID, {"bidder_values": TRI, "bidders": 4, "points": 1}),
    (BID, {"bidder_values": TRI, "bidders": 4, "points": settings.CAPS.curve_points + 1}),
    (BID, {"bidder_values": TRI, "bidders": 4, "at": []}),
    (BID, {"bidder_values": TRI, "bidders": 4, "at": ["50000"]}),
    (BID, {"bidder_values": TRI, "bidders": 4, "points": 5, "at": [50000]}),
    (BID, {"bidder_values": TRI, "bidders": 4, "rule": "dutch"}),
    (BID, {"bidder_values": TRI, "bidders": 4, "rule": None}),
    (BID, {"bidder_values": TRI, "bidders": 4, "buyer_value": 50000}),
    (BID, {"bidder_values": TRI, "bidders": 4, "rules": ["first_price"]}),
    (RES, {"bidder_values": TRI, "bidders": 4}),
    (RES, {"bidder_values": TRI, "bidders": 4, "seller_value": None}),
    (RES, {"bidder_costs": COSTS, "bidders": 4, "buyer_value": 210000}),
    (RES, {"bidder_costs": COSTS, "bidders": 4}),
    (RES, {"bidder_costs": COSTS, "bidders": 4, "buyer_value": None}),
    (RES, {"bidder_values": TRI, "bidders": 4, "reserve": 55000}),
    (RES, {"bidder_values": TRI, "bidder_costs": COSTS, "bidders": 4, "buyer_value": 210000}),
]


# Bidder groups: the same agreement for the group form of /v1/revenue and /v1/bid-strategy.
# Second price unless first price is the point (first price solves an equilibrium).
U_LOW, U_HIGH = {"family": "uniform", "low": 0, "high": 100}, {"family": "uniform", "low": 0, "high": 150}


def _fwd_groups(**kw):
    return [{"name": "a", "count": 2, "bidder_values": U_LOW, "preference": 0.1, **kw},
            {"name": "b", "count": 1, "bidder_values": U_HIGH}]


def _rev_groups(**kw):
    return [{"name": "local", "count": 2, "bidder_costs": U_LOW, "preference": 0.05, **kw},
            {"name": "national", "count": 1, "bidder_costs": U_HIGH}]


SP = ["second_price"]
AGREEMENT += [
    (REV, {"bidder_groups": _fwd_groups(), "reserve": 20, "rules": SP}),
    (REV, {"bidder_groups": _fwd_groups(), "reserve": 20, "seller_value": 10, "rules": ["first_price", "second_price", "ascending"]}),
    (REV, {"cost_groups": _rev_groups(), "reserve": 90, "buyer_value": 120, "rules": ["second_price", "ascending"]}),
    (REV, {"cost_groups": _rev_groups(), "reserve": 90, "rules": ["first_price", "second_price"]}),
    (REV, {"cost_groups": _rev_groups(), "rules": SP, "bidder_groups": None, "reserve": None, "seller_value": None, "buyer_value": None}),
    (REV, {"bidder_groups": _fwd_groups(bidder_costs=None), "rules": SP}),
    (REV, {"bidder_groups": _fwd_groups()[:1], "rules": SP}),
    (REV, {"bidder_groups": [{**g, "name": f"g{i}"} for i, g in enumerate(_fwd_groups() * 4)][: settings.CAPS.groups + 1], "rules": SP}),
    (REV, {"bidder_groups": _fwd_groups(), "cost_groups": _rev_groups(), "rules": SP}),
    (REV, {"bidder_groups": None, "cost_groups": None, "rules": SP}),
    (REV, {"bidder_groups": _fwd_groups(), "bidders": 3, "rules": SP}),
    (REV, {"bidder_groups": _fwd_groups(), "bidder_values": U_LOW, "rules": SP}),
    (REV, {"bidder_groups": _fwd_groups(bidder_costs=U_LOW), "rules": SP}),
    (REV, {"bidder_groups": [{"name": "a", "count": 2, "bidder_costs": U_LOW}, {"name": "b", "count": 1, "bidder_costs": U_HIGH}], "rules": SP}),
    (REV, {"bidder_groups": _fwd_groups(bidder_values=None), "rules": SP}),
    (REV, {"bidder_groups": _fwd_groups(), "buyer_value": 120, "rules": SP}),
    (REV, {"cost_groups": _rev_groups(), "seller_value": 10, "rules": SP}),
    (REV, {"bidder_groups": _fwd_groups(count=0), "rules": SP}),
    (REV, {"bidder_groups": _fwd_groups(count=1.5), "rules": SP}),
    (REV, {"bidder_groups": _fwd_groups(count=settings.CAPS.bidders + 1), "rules": SP}),
    (REV, {"bidder_groups": _fwd_groups(name=""), "rules": SP}),
    (REV, {"bidder_groups": _fwd_groups(name="x" * 81), "rules": SP}),
    (REV, {"bidder_groups": _fwd_groups(preference=-0.1), "rules": SP}),
    (REV, {"bidder_groups": _fwd_groups(preference=1.0), "rules": SP}),
    (REV, {"bidder_groups": [{"name": "a", "count": 2, "bidder_values": {"family": "normal", "mean": 50, "sd": 10}},
                             {"name": "b", "count": 1, "bidder_values": U_HIGH}]}),
    (REV, {"bidder_groups": _fwd_groups(), "reserve": 500, "rules": ["first_price", "second_price"]}),
    (REV, {"bidder_groups": _fwd_groups(preference=None), "rules": SP}),
    (REV, {"cost_groups": _rev_groups(preference=1.0), "rules": SP}),
    (REV, {"bidder_groups": _fwd_groups(colour="red"), "rules": SP}),
    (REV, {"bidder_groups": _fwd_groups(), "rules": ["all_pay"]}),
    (REV, {"bidder_groups": _fwd_groups(), "rules": []}),
    (REV, {"bidder_groups": _fwd_groups(), "rules": SP, "quantiles": [0.5]}),
    (REV, {"bidder_groups": _fwd_groups(), "rules": SP, "risk_aversion": {"crra": 0.3}}),
    (BID, {"bidder_groups": _fwd_groups(), "reserve": 20, "points": 5}),
    (BID, {"bidder_groups": _fwd_groups(), "rule": "ascending", "at": [10, 50, 120]}),
    (BID, {"cost_groups": _rev_groups(), "rule": "second_price", "reserve": 90, "points": 3}),
    (BID, {"cost_groups": _rev_groups(), "rule": "descending", "reserve": 90, "points": 3}),
    (BID, {"cost_groups": _rev_groups(), "rule": "second_price", "points": None, "at": [50.0], "bidder_groups": None}),
    (BID, {"bidder_groups": _fwd_groups(), "rule": "second_price", "points": 5, "at": [50]}),
    (BID, {"bidder_groups": _fwd_groups(), "rule": "second_price", "points": 1}),
    (BID, {"bidder_groups": _fwd_groups(), "rule": "second_price", "at": []}),
    (BID, {"bidder_groups": _fwd_groups(), "rule": "all_pay"}),
    (BID, {"bidder_groups": _fwd_groups(), "rule": None}),
    (BID, {"bidder_groups": _fwd_groups(), "rule": "second_price", "seller_value": 10}),
    (BID, {"cost_groups": _rev_groups(), "rule": "second_price", "buyer_value": 120}),
    (BID, {"bidder_groups": _fwd_groups(), "rules": SP}),
    (BID, {"bidder_groups": _fwd_groups(), "bidders": 3, "rule": "second_price"}),
    (RES, {"bidder_groups": _fwd_groups()}),
]


@pytest.mark.parametrize("path,body", AGREEMENT, ids=[f"{i}" for i in range(len(AGREEMENT))])
def test_spec_and_app_agree_on_what_is_valid(client, path, body):
    pointer, _ = _media(path, "post", "request")["application/json"]
    spec_errors = _errors(_validator(pointer), copy.deepcopy(body))
    r = client.post(path, json=body)
    assert r.status_code in (200, 422), r.get_data(as_text=True)
    if r.status_code == 200:
        assert spec_errors == [], "the app accepts this body but the spec refuses it"
        answer_pointer, _ = _media(path, "post", "200")["application/json"]
        assert _errors(_validator(answer_pointer), _strict_json(r.get_data())) == []
    else:
        assert spec_errors != [], f"the app refuses this body but the spec accepts it: {r.get_data(as_text=True)}"
