"""Hostile requests for `make fuzz` (the runner is fuzz/hostile.py).

Six groups, each a generator of `Case`s; all but the last are fixed lists, and the last
draws from a seeded random.Random, so the same seed sends the same requests:

- nesting:    JSON nested past any parser's recursion limit (arrays 200,000 deep, objects
              1,100 deep), at the top of the body and inside fields, batch items and mixtures;
- magnitude:  value models at the edges of magnitude (shapes of 1e-200, subnormal sds and
              widths, parameters at the 1e150 cap whose moments overflow), on every route;
- reserve:    reserves at, just inside and beyond the support's ends, one bidder below the support;
- caps:       the documented caps filled (2,000,000-byte bodies, 10,000 points and sample values,
              200 quantiles, 1,000 batch items, 401 grid points) and caps given two ways at once;
- doors:      the GET doors with repeated, conflicting and extreme query parameters;
- random:     seeded combinations of the above drawn afresh (FUZZ_HOSTILE_EXAMPLES of them);
- contention: heavy requests, batches and /healthz sent while one heavy request runs, so that
              the busy path (503 with Retry-After) is taken for certain (sent last, on its own).

Every value model and figure here is invented for the purpose; none is a check value.
"""
from __future__ import annotations

import json
import math
import random
from dataclasses import dataclass, field

POST_ROUTES = ("/v1/top-values", "/v1/top-values/joint-density", "/v1/revenue", "/v1/bid-strategy",
               "/v1/reserve-price", "/v1/sweeps")
RULES = ["first_price", "second_price", "ascending", "descending", "all_pay"]
QUOTE_METRICS = {
    "forward": ["expected_revenue", "revenue_sd", "probability_of_sale", "expected_winner_surplus", "efficiency",
                "optimal_reserve", "mean_highest", "mean_second", "expected_gap"],
    "reverse": ["expected_payment", "payment_sd", "probability_of_award", "mean_lowest", "mean_second_lowest",
                "optimal_reserve"],
}
MAX_BODY_BYTES = 2_000_000   # the documented caps (openapi.yaml, README), as the contract states them
MAX_POINTS = 10_000
MAX_QUANTILES = 200
MAX_BATCH = 1000
MAX_GRID = 401
MAX_CURVE = 2001
MAX_RANKS = 50
MAX_COMPONENTS = 50


@dataclass
class Case:
    """One request: a POST of ``body`` bytes (``doc`` is its parsed form, when it parses) or a GET of ``query``."""

    group: str
    name: str
    path: str
    method: str = "POST"
    body: bytes = b""
    doc: object = None
    query: list = field(default_factory=list)
    headers: dict = field(default_factory=dict)
    heavy: bool = False


def post(group, name, path, doc, heavy=False, headers=None):
    body = json.dumps(doc, separators=(",", ":"), allow_nan=False).encode()
    return Case(group, name, path, body=body, doc=doc, heavy=heavy, headers=headers or {})


def raw(group, name, path, data, heavy=False):
    return Case(group, name, path, body=data, heavy=heavy)


def get(group, name, path, pairs, accept=None, heavy=False):
    return Case(group, name, path, method="GET", query=[(k, str(v)) for k, v in pairs],
                headers={"Accept": accept} if accept else {}, heavy=heavy)


# ------------------------------------------------------------------ value models
LOGNORMAL = {"family": "lognormal", "median": 62000, "sigma": 0.35}
UNIFORM01 = {"family": "uniform", "low": 0, "high": 1}


def mixture(k, spread=1.0):
    """k components of six families, spread over a wide range (an invented stress shape);
    ``spread`` scales every location and scale, so two such mixtures can sit apart."""
    shapes = [
        lambda i: {"family": "lognormal", "median": (40000 + 1000 * i) * spread, "sigma": 0.2 + 0.02 * i},
        lambda i: {"family": "gamma", "shape": 2 + i, "scale": 3000 * spread},
        lambda i: {"family": "pareto", "shape": 3.5 + 0.1 * i, "minimum": (20000 + 500 * i) * spread},
        lambda i: {"family": "weibull", "shape": 1.5 + 0.1 * i, "scale": 50000 * spread},
        lambda i: {"family": "triangular", "low": 10000 * i * spread, "mode": (10000 * i + 5000) * spread,
                   "high": (10000 * i + 20000) * spread},
        lambda i: {"family": "uniform", "low": 1000 * i * spread, "high": (1000 * i + 30000) * spread},
    ]
    return {"family": "mixture", "components": [{"weight": 1.0 / k, "model": shapes[i % len(shapes)](i)} for i in range(k)]}


def nested_mixture(k):
    """A mixture of two mixtures of k components each (mixtures nest two deep at most)."""
    return {"family": "mixture", "components": [{"weight": 0.5, "model": mixture(k)}, {"weight": 0.5, "model": mixture(k, 1.7)}]}


def sample(n, seed=11):
    """n invented past values: a seeded lognormal draw, rounded to cents."""
    rng = random.Random(seed)
    return [round(rng.lognormvariate(11.0, 0.4), 2) for _ in range(n)]


def hostile_models():
    """(name, model) at the edges of magnitude: tiny and huge shapes, subnormal scales, the 1e150 cap."""
    m = [
        ("gamma shape 1e-200", {"family": "gamma", "shape": 1e-200, "scale": 1}),
        ("gamma shape 1e-100 scale 1e150", {"family": "gamma", "shape": 1e-100, "scale": 1e150}),
        ("gamma shape 1e-5", {"family": "gamma", "shape": 1e-5, "scale": 1}),
        ("gamma shape 1e10 scale 1e-315", {"family": "gamma", "shape": 1e10, "scale": 1e-315}),
        ("beta 1e-310/1e-310", {"family": "beta", "alpha": 1e-310, "beta": 1e-310}),
        ("beta 1e-310/1", {"family": "beta", "alpha": 1e-310, "beta": 1}),
        ("beta 1/1e-310", {"family": "beta", "alpha": 1, "beta": 1e-310}),
        ("beta 1e10/1e10", {"family": "beta", "alpha": 1e10, "beta": 1e10}),
        ("beta 1e10/1e-310", {"family": "beta", "alpha": 1e10, "beta": 1e-310}),
        ("beta 1e-5/1e10 on +-1e150", {"family": "beta", "alpha": 1e-5, "beta": 1e10, "low": -1e150, "high": 1e150}),
        ("normal sd 1e-315", {"family": "normal", "mean": 1, "sd": 1e-315}),
        ("normal mean 1e150 sd 1e150", {"family": "normal", "mean": 1e150, "sd": 1e150}),
        ("normal mean -1e150 sd 1e-300", {"family": "normal", "mean": -1e150, "sd": 1e-300}),
        ("uniform width 1e-315", {"family": "uniform", "low": 0, "high": 1e-315}),
        ("uniform -1e150..1e150", {"family": "uniform", "low": -1e150, "high": 1e150}),
        ("lognormal median 1e150 sigma 10", {"family": "lognormal", "median": 1e150, "sigma": 10}),
        ("lognormal median 1e-300 sigma 10", {"family": "lognormal", "median": 1e-300, "sigma": 10}),
        ("lognormal median 1 sigma 1e-315", {"family": "lognormal", "median": 1, "sigma": 1e-315}),
        ("lognormal median 1e150 sigma 1e-5", {"family": "lognormal", "median": 1e150, "sigma": 1e-5}),
        ("lognormal mean 1e150 sd 1e150", {"family": "lognormal", "mean": 1e150, "sd": 1e150}),
        ("lognormal mean 1 sd 1e150", {"family": "lognormal", "mean": 1, "sd": 1e150}),
        ("exponential mean 1e-315 shift 1e150", {"family": "exponential", "mean": 1e-315, "shift": 1e150}),
        ("exponential mean 1e150", {"family": "exponential", "mean": 1e150}),
        ("weibull shape 1e-5", {"family": "weibull", "shape": 1e-5, "scale": 1}),
        ("weibull shape 1e10 scale 1e150", {"family": "weibull", "shape": 1e10, "scale": 1e150}),
        ("pareto shape 1e-5", {"family": "pareto", "shape": 1e-5, "minimum": 1}),
        ("pareto shape 1e10 minimum 1e150", {"family": "pareto", "shape": 1e10, "minimum": 1e150}),
        ("pareto shape 2.0000001 minimum 1e-315", {"family": "pareto", "shape": 2.0000001, "minimum": 1e-315}),
        ("triangular 0/0/1e-315", {"family": "triangular", "low": 0, "mode": 0, "high": 1e-315}),
        ("triangular -1e150/1e150/1e150", {"family": "triangular", "low": -1e150, "mode": 1e150, "high": 1e150}),
        ("power exponent 1e-200", {"family": "power", "exponent": 1e-200, "high": 1}),
        ("power exponent 1e10 on +-1e150", {"family": "power", "exponent": 1e10, "low": -1e150, "high": 1e150}),
    ]
    return m + composite_models()


def composite_models():
    """Truncations, mixtures, tables and samples with extreme parts."""
    huge = {"family": "lognormal", "median": 1e150, "sigma": 10}
    return [
        ("normal truncated 37 sd up", {"family": "normal", "mean": 0, "sd": 1, "truncate": {"low": 37}}),
        ("lognormal truncated below 1e-315", {"family": "lognormal", "median": 1, "sigma": 1, "truncate": {"high": 1e-315}}),
        ("gamma 1e-5 truncated to [1e-300, 1e150]", {"family": "gamma", "shape": 1e-5, "scale": 1, "truncate": {"low": 1e-300, "high": 1e150}}),
        ("mixture with a 1e-310 weight on a huge lognormal", {"family": "mixture", "components": [
            {"weight": 1, "model": LOGNORMAL}, {"weight": 1e-310, "model": huge}]}),
        ("mixture of subnormal and huge scales", {"family": "mixture", "components": [
            {"weight": 0.5, "model": {"family": "uniform", "low": 0, "high": 1e-315}},
            {"weight": 0.5, "model": {"family": "exponential", "mean": 1e150}}]}),
        ("nested mixture of extremes", {"family": "mixture", "components": [
            {"weight": 0.5, "model": {"family": "mixture", "components": [
                {"weight": 0.5, "model": {"family": "gamma", "shape": 1e-200, "scale": 1}},
                {"weight": 0.5, "model": {"family": "beta", "alpha": 1e10, "beta": 1e10}}]}},
            {"weight": 0.5, "model": {"family": "normal", "mean": 1, "sd": 1e-315}}]}),
        ("quantile table with a subnormal step", {"family": "quantile_table", "points": [
            {"p": 0, "value": 0}, {"p": 0.5, "value": 1e-315}, {"p": 1, "value": 1e150}]}),
        ("quantile table with p 1e-300", {"family": "quantile_table", "points": [
            {"p": 0, "value": -1e150}, {"p": 1e-300, "value": 0}, {"p": 1, "value": 1}]}),
        ("empirical kernel of 5 extreme values", {"family": "empirical", "sample": [0, 1e-315, 2e-315, 1e149, 1e150]}),
        ("empirical kernel of nearly equal values", {"family": "empirical", "sample": [1, 1, 1, 1, 1.0000000000000002]}),
        ("empirical step of 5 extreme values", {"family": "empirical", "sample": [-1e150, 0, 1e-315, 1, 1e150], "smoothing": "none"}),
        ("lognormal median just over the cap", {"family": "lognormal", "median": 1.0000000000000002e150, "sigma": 1}),
    ]


def flat_model(model):
    """A parametric model as GET query pairs (truncation as truncate_low/_high), or None."""
    if not isinstance(model, dict) or model.get("family") in ("mixture", "quantile_table", "empirical"):
        return None
    pairs = [("family", model["family"])]
    for k, v in model.items():
        if k == "truncate":
            pairs += [(f"truncate_{tk}", _query_number(tv)) for tk, tv in v.items()]
        elif k != "family":
            pairs.append((k, _query_number(v)))
    return pairs


def _query_number(x):
    """A number as the GET doors take it: digits, '.', an exponent (repr, never 'inf')."""
    return repr(float(x)) if isinstance(x, float) else str(x)


def _ends(model):
    """Reserves at a model's ends where they are finite numbers, else a few plain ones."""
    lo, hi = model_support(model)
    picks = [x for x in (lo, hi) if math.isfinite(x)]
    return picks + [0.0] if picks else [0.0, 1.0]


def model_support(model):
    from consistency import support  # the fuzz run's own reading of a model, not the service's
    return support(model)


def on_every_route(group, name, model, bidders=6):
    """One model on every POST route, forward and reverse, and through the quote door."""
    out = [
        post(group, f"{name}: revenue", "/v1/revenue", {"bidder_values": model, "bidders": bidders}),
        post(group, f"{name}: revenue, reverse", "/v1/revenue", {"bidder_costs": model, "bidders": bidders}),
        post(group, f"{name}: top values", "/v1/top-values",
             {"bidder_values": model, "bidders": bidders, "ranks": [1, 2, bidders], "curve_points": 21}),
        post(group, f"{name}: bids", "/v1/bid-strategy", {"bidder_values": model, "bidders": bidders, "points": 51}),
        post(group, f"{name}: all-pay asks", "/v1/bid-strategy",
             {"bidder_costs": model, "bidders": bidders, "rule": "all_pay", "points": 51}),
        post(group, f"{name}: reserve price", "/v1/reserve-price", {"bidder_values": model, "bidders": bidders}),
        post(group, f"{name}: joint density", "/v1/top-values/joint-density",
             {"bidder_values": model, "bidders": bidders, "grid_points": 21}),
        post(group, f"{name}: sweep", "/v1/sweeps",
             {"bidder_values": model, "bidders": [1, 2, 1000], "reserves": _ends(model), "rules": RULES}),
    ]
    flat = flat_model(model)
    if flat:
        for i, metric in enumerate(("expected_revenue", "mean_highest", "optimal_reserve")):
            accept = "application/json" if i % 2 else None
            out.append(get(group, f"{name}: quote {metric}", "/v1/quote", [("metric", metric), ("bidders", bidders)] + flat, accept))
    return out


# ------------------------------------------------------------------ the groups
def nesting_cases():
    """Arrays and objects nested past the recursion limit, wherever JSON may stand."""
    g = "nesting"
    out = []
    for path in POST_ROUTES + ("/v1/batch",):
        out.append(raw(g, f"[ x 200,000 to {path}", path, b"[" * 200_000))
        out.append(raw(g, f"object nested 1,100 deep to {path}", path, b'{"a":' * 1100 + b"1" + b"}" * 1100))
    for depth in (990, 1100, 5000, 200_000):
        arr = b"[" * depth + b"]" * depth
        obj = b'{"x":' * depth + b"1" + b"}" * depth
        out += [
            raw(g, f"bidder_values as an object {depth:,} deep", "/v1/revenue", b'{"bidder_values":' + obj + b',"bidders":6}'),
            raw(g, f"quantiles as an array {depth:,} deep", "/v1/revenue",
                b'{"bidder_values":{"family":"uniform","low":0,"high":1},"bidders":6,"quantiles":' + arr + b"}"),
            raw(g, f"a mixture component's model {depth:,} deep", "/v1/top-values",
                b'{"bidder_values":{"family":"mixture","components":[{"weight":1,"model":' + obj + b'}]},"bidders":6}'),
            raw(g, f"a batch item's body {depth:,} deep", "/v1/batch",
                b'{"requests":[{"id":1,"path":"/v1/revenue","body":' + obj + b"}]}"),
            raw(g, f"batch requests as an array {depth:,} deep", "/v1/batch", b'{"requests":' + arr + b"}"),
        ]
    out.append(raw(g, "unclosed object 200,000 deep", "/v1/revenue", b'{"a":' * 200_000))
    return out


SLOW_MODELS = ("nested mixture of extremes", "empirical kernel of 5 extreme values")


def magnitude_cases():
    """Each extreme model on every route, and number literals a double cannot hold."""
    out = []
    for name, model in hostile_models():
        cases = on_every_route("magnitude", name, model)
        if name in SLOW_MODELS:   # each takes the whole budget today: three routes, one at a time
            cases = [c for c in cases if c.name.endswith((": revenue", ": top values", ": reserve price"))]
            for c in cases:
                c.heavy = True
        out += cases
    base = b'{"bidder_values":{"family":"lognormal","median":%s,"sigma":0.35},"bidders":6}'
    for lit in (b"1e999", b"-1e999", b"1e-400", b"5e-324", b"-0.0", b"1" * 5000, b"0." + b"0" * 5000 + b"1",
                b"1.0000000000000002e150", b"100000000000000000000000000000000000000000000000000000000000000000"):
        out.append(raw("magnitude", f"median written as {lit[:24].decode()}{'...' if len(lit) > 24 else ''}",
                       "/v1/revenue", base % lit))
    huge_bidders = b'{"bidder_values":{"family":"uniform","low":0,"high":1},"bidders":%s}'
    for lit in (b"1e300", b"1000000.0", b"1000001", b"9" * 400, b"6.000000000000001"):
        out.append(raw("magnitude", f"bidders written as {lit[:24].decode()}", "/v1/revenue", huge_bidders % lit))
    return out


def reserve_cases():
    """Reserves at, just inside and beyond the support's ends; one bidder below the support."""
    g, out = "reserve", []
    just_below_one = 1 - 2 ** -53
    for r in (1, 1.5, 0, -1, 1e-315, just_below_one, -1e150, 1e150):
        for n in (1, 2, 6, 1_000_000):
            out.append(post(g, f"uniform 0-1, reserve {r!r}, {n} bidders", "/v1/revenue",
                            {"bidder_values": UNIFORM01, "bidders": n, "reserve": r}))
        out.append(get(g, f"quote: uniform 0-1, reserve {r!r}", "/v1/quote",
                       [("metric", "probability_of_sale"), ("bidders", 6), ("reserve", _query_number(float(r))),
                        ("family", "uniform"), ("low", 0), ("high", 1)]))
    for r in (1, 1.5, 0, -1, just_below_one):
        for rule in ("first_price", "all_pay"):
            out.append(post(g, f"uniform 0-1 {rule} bids, reserve {r!r}", "/v1/bid-strategy",
                            {"bidder_values": UNIFORM01, "bidders": 6, "reserve": r, "rule": rule,
                             "at": [-1, 0, 1e-315, 0.5, just_below_one, 1, 1.5]}))
    for r in (0, -0.5, 1, 1.5, 1e-315):
        for n in (1, 6):
            out.append(post(g, f"uniform 0-1 costs, maximum price {r!r}, {n} bidders", "/v1/revenue",
                            {"bidder_costs": UNIFORM01, "bidders": n, "reserve": r}))
    below = [
        ("pareto 3 from 10", {"family": "pareto", "shape": 3, "minimum": 10}, 5),
        ("exponential shifted to 5", {"family": "exponential", "mean": 2, "shift": 5}, 1),
        ("lognormal", LOGNORMAL, -1),
        ("uniform 2-3", {"family": "uniform", "low": 2, "high": 3}, 1),
        ("normal", {"family": "normal", "mean": 0, "sd": 1}, -1e150),
        ("beta 2/5 on 0-1", {"family": "beta", "alpha": 2, "beta": 5}, -1e-315),
    ]
    for name, model, r in below:
        out.append(post(g, f"one bidder, {name}, reserve {r!r} below the support", "/v1/revenue",
                        {"bidder_values": model, "bidders": 1, "reserve": r}))
        out.append(post(g, f"one bidder, {name}, bids with reserve {r!r}", "/v1/bid-strategy",
                        {"bidder_values": model, "bidders": 1, "reserve": r, "points": 11}))
        flat = flat_model(model)
        out.append(get(g, f"quote: one bidder, {name}, reserve {r!r}", "/v1/quote",
                       [("metric", "expected_revenue"), ("bidders", 1), ("reserve", _query_number(float(r)))] + flat))
    return out + _bounded_ends(g)


def _bounded_ends(g):
    """Bounded families with the reserve on a kink or an end, and a sweep across both ends."""
    out = []
    for name, model, rs in (
        ("beta 2/5", {"family": "beta", "alpha": 2, "beta": 5}, (0, 1)),
        ("triangular 0/0.5/1", {"family": "triangular", "low": 0, "mode": 0.5, "high": 1}, (0.5, 1)),
        ("power 3 to 1", {"family": "power", "exponent": 3, "high": 1}, (1, 0)),
        ("quantile table", {"family": "quantile_table", "points": [{"p": 0, "value": 0}, {"p": 0.9, "value": 1}, {"p": 1, "value": 100}]}, (1, 100)),
    ):
        for r in rs:
            out.append(post(g, f"{name}, reserve {r!r}", "/v1/revenue", {"bidder_values": model, "bidders": 4, "reserve": r}))
    edges = [-1, 0, 1e-315, 0.5, 1 - 2 ** -53, 1, 1.5]
    out.append(post(g, "uniform 0-1 sweep across both ends", "/v1/sweeps",
                    {"bidder_values": UNIFORM01, "bidders": [1, 2, 6], "reserves": edges, "rules": RULES,
                     "metrics": ["expected_revenue", "revenue_sd", "probability_of_sale", "efficiency"]}))
    out.append(post(g, "uniform 0-1 costs sweep across both ends", "/v1/sweeps",
                    {"bidder_costs": UNIFORM01, "bidders": [1, 2, 6], "reserves": edges, "rules": RULES}))
    out.append(get(g, "sweeps.csv: uniform 0-1 across both ends", "/v1/sweeps.csv",
                   [("family", "uniform"), ("low", 0), ("high", 1), ("bidders", "1,2,6"),
                    ("reserves", ",".join(_query_number(float(x)) for x in edges)), ("rules", ",".join(RULES))]))
    return out


def padded(group, name, path, doc, size=MAX_BODY_BYTES, heavy=False):
    """``doc`` as JSON followed by spaces up to exactly ``size`` bytes (whitespace is valid JSON)."""
    body = json.dumps(doc, separators=(",", ":")).encode()
    assert len(body) <= size, f"{name}: {len(body)} bytes before padding"
    return Case(group, name, path, body=body + b" " * (size - len(body)), doc=doc, heavy=heavy)


def cap_cases():
    """Every documented cap filled exactly, the heaviest shapes within them, and one past each."""
    g = "caps"
    big = sample(MAX_POINTS)
    kernel = {"family": "empirical", "sample": big}
    rng = random.Random(7)
    points = [{"higher": rng.uniform(2e4, 2e5), "lower": rng.uniform(2e4, 2e5)} for _ in range(MAX_POINTS)]
    at = sorted(rng.uniform(-1e5, 4e5) for _ in range(MAX_POINTS))
    qs = [1e-300] + [i / (MAX_QUANTILES - 1) for i in range(1, MAX_QUANTILES - 2)] + [1 - 1e-16, 1 - 2 ** -53]
    out = [
        padded(g, "a 2,000,000-byte body (lognormal revenue and spaces)", "/v1/revenue", {"bidder_values": LOGNORMAL, "bidders": 6}),
        padded(g, "a 2,000,001-byte body", "/v1/revenue", {"bidder_values": LOGNORMAL, "bidders": 6}, size=MAX_BODY_BYTES + 1),
        padded(g, "a 2,000,000-byte body: a kernel sample of 10,000 values, revenue", "/v1/revenue",
               {"bidder_values": kernel, "bidders": 10}, heavy=True),
        post(g, "kernel sample of 10,000: reserve price", "/v1/reserve-price", {"bidder_values": kernel, "bidders": 10}, heavy=True),
        post(g, "kernel sample of 10,000: 401 x 401 joint density", "/v1/top-values/joint-density",
             {"bidder_values": kernel, "bidders": 10, "grid_points": MAX_GRID}, heavy=True),
        post(g, "10,000 joint-density points", "/v1/top-values/joint-density", {"bidder_values": LOGNORMAL, "bidders": 6, "points": points}),
        post(g, "10,000 bid values, lognormal", "/v1/bid-strategy", {"bidder_values": LOGNORMAL, "bidders": 6, "at": at}),
        post(g, "2,001 bids, nested mixture of 2 x 25", "/v1/bid-strategy",
             {"bidder_values": nested_mixture(25), "bidders": 10, "points": MAX_CURVE}, heavy=True),
        post(g, "200 quantiles to the ends of (0, 1)", "/v1/revenue", {"bidder_values": LOGNORMAL, "bidders": 6, "quantiles": qs}),
        post(g, "50 ranks x 200 quantiles x 2,001 curve points, 50-component mixture, 10^6 bidders", "/v1/top-values",
             {"bidder_values": mixture(MAX_COMPONENTS), "bidders": 1_000_000, "ranks": list(range(1, MAX_RANKS + 1)),
              "quantiles": qs, "curve_points": MAX_CURVE}, heavy=True),
        post(g, "401 x 401 joint density, 50-component mixture, ranks 1 and 50 of 10^6", "/v1/top-values/joint-density",
             {"bidder_values": mixture(MAX_COMPONENTS), "bidders": 1_000_000, "ranks": [1, 50], "grid_points": MAX_GRID}, heavy=True),
        post(g, "sweep of 200,000 rows, lognormal", "/v1/sweeps",
             {"bidder_values": LOGNORMAL, "bidders": {"from": 2, "to": 1001}, "reserves": {"from": 30000, "to": 80000, "steps": 100}}, heavy=True),
        post(g, "sweep of 30 rows, 50-component mixture, first price", "/v1/sweeps",
             {"bidder_values": mixture(MAX_COMPONENTS), "bidders": {"from": 2, "to": 31}, "reserves": [50000], "rules": ["first_price"]}, heavy=True),
    ]
    return out + batch_cap_cases(g) + over_cap_cases(g)


def batch_cap_cases(g):
    """1,000-item batches: light, null, mixed-up, heavy, and heavy to encode."""
    light = [{"id": i, "path": "/v1/revenue", "body": {"bidder_values": LOGNORMAL, "bidders": 2 + i % 50}} for i in range(MAX_BATCH)]
    odd = [None, [], "x", 7, {"id": 1}, {"id": True, "path": "/v1/revenue", "body": {}},
           {"id": "b", "path": "/v1/batch", "body": {"requests": []}}, {"id": "n", "path": "/v1/revenue", "body": None},
           {"id": "u", "path": "/v1/revenue", "body": {"bidder_values": UNIFORM01, "bidders": 3, "reserve": 1}}]
    joint = {"id": 0, "path": "/v1/top-values/joint-density", "body": {"bidder_values": LOGNORMAL, "bidders": 6, "grid_points": MAX_GRID}}
    heavy = {"id": 0, "path": "/v1/revenue", "body": {"bidder_values": mixture(20), "bidders": 10}}
    return [
        post(g, "batch of 1,000 light items", "/v1/batch", {"requests": light}, heavy=True),
        post(g, "batch of 1,000 null items", "/v1/batch", {"requests": [None] * MAX_BATCH}),
        post(g, "batch of 1,000 mixed-up items", "/v1/batch", {"requests": (odd * (MAX_BATCH // len(odd) + 1))[:MAX_BATCH]}),
        post(g, "batch of 1,000 20-component mixtures", "/v1/batch", {"requests": [dict(heavy, id=i) for i in range(MAX_BATCH)]}, heavy=True),
        post(g, "batch of 100 joint densities of 401 x 401 (a 200 MB answer)", "/v1/batch",
             {"requests": [dict(joint, id=i) for i in range(100)]}, heavy=True),
        post(g, "batch whose requests is null", "/v1/batch", {"requests": None}),
    ]


def over_cap_cases(g):
    """One past each cap, and caps given two ways at once."""
    return [
        post(g, "joint density with both points and grid_points", "/v1/top-values/joint-density",
             {"bidder_values": LOGNORMAL, "bidders": 6, "grid_points": MAX_GRID, "points": [{"higher": 7e4, "lower": 6e4}]}),
        post(g, "bids with both points and at", "/v1/bid-strategy", {"bidder_values": LOGNORMAL, "bidders": 6, "points": MAX_CURVE, "at": [6e4]}),
        post(g, "sweep bidders as a range with list keys", "/v1/sweeps",
             {"bidder_values": LOGNORMAL, "bidders": {"from": 2, "to": 5, "0": 6, "step": 1}, "reserves": [0]}),
        post(g, "201 quantiles", "/v1/revenue", {"bidder_values": LOGNORMAL, "bidders": 6, "quantiles": [0.5] * (MAX_QUANTILES + 1)}),
        post(g, "51 ranks", "/v1/top-values", {"bidder_values": LOGNORMAL, "bidders": 100, "ranks": list(range(1, MAX_RANKS + 2))}),
        post(g, "10,001 bid values", "/v1/bid-strategy", {"bidder_values": LOGNORMAL, "bidders": 6, "at": [6e4] * (MAX_POINTS + 1)}),
        post(g, "10,001 sample values", "/v1/revenue", {"bidder_values": {"family": "empirical", "sample": sample(MAX_POINTS + 1)}, "bidders": 6}),
        post(g, "51 components", "/v1/revenue", {"bidder_values": mixture(MAX_COMPONENTS + 1), "bidders": 6}),
        post(g, "402 grid points", "/v1/top-values/joint-density", {"bidder_values": LOGNORMAL, "bidders": 6, "grid_points": MAX_GRID + 1}),
        post(g, "2,002 curve points", "/v1/top-values", {"bidder_values": LOGNORMAL, "bidders": 6, "curve_points": MAX_CURVE + 1}),
        post(g, "1,001 batch items", "/v1/batch", {"requests": [None] * (MAX_BATCH + 1)}),
    ]


def door_cases():
    """The GET doors with repeated, conflicting, extreme and long query parameters."""
    g = "doors"
    lg = [("family", "lognormal"), ("median", 62000), ("sigma", 0.35)]
    rev = [("metric", "expected_revenue"), ("bidders", 6)] + lg
    out = [
        get(g, "quote: bidders=6&bidders=7", "/v1/quote", rev + [("bidders", 7)]),
        get(g, "quote: family twice", "/v1/quote", [("family", "uniform"), ("metric", "mean_highest"), ("bidders", 6), ("low", 0), ("high", 1), ("family", "normal")]),
        get(g, "quote: metric twice", "/v1/quote", rev + [("metric", "optimal_reserve")], "application/json"),
        get(g, "quote: reserve twice, inside then beyond", "/v1/quote", rev + [("reserve", 60000), ("reserve", 1e150)]),
        get(g, "quote: median twice, capped then huge", "/v1/quote", rev + [("median", "1e+150"), ("median", "1e+400")]),
        get(g, "quote: direction twice", "/v1/quote", rev + [("direction", "reverse"), ("direction", "forward")], "application/json"),
        get(g, "quote: lognormal median 1e150 sigma 10", "/v1/quote",
            [("metric", "expected_revenue"), ("bidders", 6), ("family", "lognormal"), ("median", "1e+150"), ("sigma", 10)], "application/json"),
        get(g, "quote: normal sd 1e-315, mean highest of 10^6", "/v1/quote",
            [("metric", "mean_highest"), ("bidders", 1_000_000), ("family", "normal"), ("mean", 1), ("sd", "1e-315")]),
        get(g, "quote: gamma shape 1e-200, optimal reserve", "/v1/quote",
            [("metric", "optimal_reserve"), ("bidders", 3), ("family", "gamma"), ("shape", "1e-200"), ("scale", 1)]),
        get(g, "quote: a 300-digit bidder count", "/v1/quote", [("metric", "expected_revenue"), ("bidders", "9" * 300)] + lg),
        get(g, "quote: a 400-digit median", "/v1/quote", [("metric", "expected_revenue"), ("bidders", 6), ("family", "lognormal"), ("median", "9" * 400), ("sigma", 1)]),
    ]
    for raw_value in ("nan", "inf", "-0", "0x10", "", "1e-400", "1_000"):
        out.append(get(g, f"quote: median={raw_value!r}", "/v1/quote", [("metric", "mean_second"), ("bidders", 6), ("family", "lognormal"), ("median", raw_value), ("sigma", 1)]))
    return out + _csv_door_cases(g, lg)


def _csv_door_cases(g, lg):
    counts = ",".join(str(i) for i in range(1, 700))   # a query line of about 3,000 bytes, inside gunicorn's 4,094
    return [
        get(g, "sweeps.csv: bidders=6&bidders=7", "/v1/sweeps.csv", lg + [("bidders", 6), ("bidders", 7), ("reserves", 50000)]),
        get(g, "sweeps.csv: a bidders list and a bidders range", "/v1/sweeps.csv",
            lg + [("bidders", "2,4"), ("bidders_from", 2), ("bidders_to", 1_000_000), ("reserves", 50000)]),
        get(g, "sweeps.csv: a reserves list and a range of 2,000", "/v1/sweeps.csv",
            lg + [("bidders", 6), ("reserves", "0.5"), ("reserves_from", 0), ("reserves_to", 1e5), ("reserves_steps", 2000)]),
        get(g, "sweeps.csv: a range of 10^6 bidder counts", "/v1/sweeps.csv", lg + [("bidders_from", 1), ("bidders_to", 1_000_000), ("reserves", 0)]),
        get(g, "sweeps.csv: 200,000 rows", "/v1/sweeps.csv",
            lg + [("bidders_from", 2), ("bidders_to", 2001), ("reserves_from", 30000), ("reserves_to", 80000), ("reserves_steps", 100), ("rules", "first_price")], heavy=True),
        get(g, "sweeps.csv: 699 bidder counts in a 3 kB query", "/v1/sweeps.csv", lg + [("bidders", counts), ("reserves", 50000), ("rules", "second_price")]),
        get(g, "sweeps.csv: rules and metrics repeated", "/v1/sweeps.csv",
            lg + [("bidders", 6), ("reserves", 0), ("rules", "first_price,first_price"), ("metrics", "efficiency"), ("metrics", "bogus")]),
        get(g, "sweeps.csv: lognormal median 1e150 sigma 10", "/v1/sweeps.csv",
            [("family", "lognormal"), ("median", "1e+150"), ("sigma", 10), ("bidders", "1,2,6"), ("reserves", "0,1e+150")]),
        get(g, "sweeps.csv: beta 1e-310/1e-310", "/v1/sweeps.csv",
            [("family", "beta"), ("alpha", "1e-310"), ("beta", "1e-310"), ("bidders", "1,2,6"), ("reserves", "0,0.5,1"), ("rules", ",".join(RULES))]),
        get(g, "sweeps.csv: problem+json asked, bad range", "/v1/sweeps.csv",
            lg + [("bidders_from", 9), ("bidders_to", 2), ("reserves", 0)], "application/json"),
    ]


# ------------------------------------------------------------------ seeded random combinations
SPECIAL = (5e-324, 1e-315, 1e-310, 2.2250738585072014e-308, 1e-200, 1e-30, 1e-5, 0.5, 1.0, 2.0, 1e10, 1e100,
           1e150, 1.0000000000000002e150)


def extreme(rng, positive=True):
    """A number from the edges: a special value or 10^u for u uniform in [-320, 150]."""
    x = rng.choice(SPECIAL) if rng.random() < 0.5 else 10.0 ** rng.uniform(-320, 150)
    return x if positive or rng.random() < 0.5 else -x


def random_parametric(rng):
    fam = rng.choice(["uniform", "normal", "lognormal", "exponential", "gamma", "weibull", "beta", "triangular", "pareto", "power"])
    lo = extreme(rng, positive=False) if rng.random() < 0.7 else 0.0
    width = extreme(rng)
    if fam in ("uniform", "triangular"):
        m = {"family": fam, "low": lo, "high": lo + width}
        if fam == "triangular":
            m["mode"] = lo + width * rng.choice([0.0, 1.0, rng.random()])
    elif fam == "normal":
        m = {"family": fam, "mean": lo, "sd": width}
    elif fam == "lognormal":
        m = {"family": fam, "median": extreme(rng), "sigma": extreme(rng)} if rng.random() < 0.7 else \
            {"family": fam, "mean": extreme(rng), "sd": extreme(rng)}
    elif fam == "exponential":
        m = {"family": fam, "mean": width, "shift": lo}
    elif fam in ("gamma", "weibull"):
        m = {"family": fam, "shape": extreme(rng), "scale": width}
    elif fam == "beta":
        m = {"family": fam, "alpha": extreme(rng), "beta": extreme(rng), "low": lo, "high": lo + width}
    elif fam == "pareto":
        m = {"family": fam, "shape": extreme(rng), "minimum": width}
    else:
        m = {"family": fam, "exponent": extreme(rng), "low": lo, "high": lo + width}
    if rng.random() < 0.2:
        m["truncate"] = {"low": extreme(rng, positive=False)} if rng.random() < 0.5 else {"high": extreme(rng)}
    return m


def random_model(rng):
    """A parametric model with extreme parameters, or a small mixture of them."""
    if rng.random() < 0.15:
        k = rng.randint(2, 4)
        weights = [rng.choice([1e-310, 0.5, 1.0, rng.random()]) for _ in range(k)]
        total = sum(weights)
        return {"family": "mixture", "components": [{"weight": w / total, "model": random_parametric(rng)} for w in weights]}
    return random_parametric(rng)


def random_reserve(rng, model):
    """None, a support end, a hair inside or beyond one, 0, or an extreme number."""
    lo, hi = model_support(model)
    ends = [x for x in (lo, hi) if math.isfinite(x)]
    pick = rng.random()
    if pick < 0.3 or not ends:
        return None if pick < 0.15 else extreme(rng, positive=False)
    end = rng.choice(ends)
    nudge = rng.choice([0.0, 1e-315, abs(end) * 2 ** -52, abs(end) * 1e-9, 1.0])
    return end + rng.choice([-1, 1]) * nudge


def random_body(rng, path):
    """A small request to ``path`` around a random hostile model."""
    model = random_model(rng)
    side = "bidder_costs" if rng.random() < 0.3 and path not in ("/v1/top-values", "/v1/top-values/joint-density") else "bidder_values"
    n = rng.choice([1, 2, 3, 6, 50, 1000, 999_999, 1_000_000, rng.randint(1, 100)])
    body = {side: model, "bidders": n}
    reserve = random_reserve(rng, model)
    if path == "/v1/revenue":
        body.update(rules=rng.sample(RULES, rng.randint(1, 5)), quantiles=[1e-300, 0.5, 1 - 2 ** -53][: rng.randint(0, 3)])
    elif path == "/v1/top-values":
        body.update(ranks=sorted(rng.sample(range(1, min(n, 60) + 1), min(n, rng.randint(1, 3)))), curve_points=rng.choice([0, 2, 11]))
        body["ranks"] = body["ranks"][:50]
    elif path == "/v1/top-values/joint-density":
        body.update(bidders=max(n, 2), grid_points=rng.choice([2, 11, 21]))
    elif path == "/v1/bid-strategy":
        body.update(rule=rng.choice(RULES), points=rng.choice([2, 11, 51]))
    elif path == "/v1/sweeps":
        body.update(bidders=sorted({rng.choice([1, 2, 6, 1000]) for _ in range(3)}), reserves=[0.0] + ([reserve] if reserve is not None else []),
                    rules=rng.sample(RULES, rng.randint(1, 3)))
        return body
    if reserve is not None and path in ("/v1/revenue", "/v1/bid-strategy"):
        body["reserve"] = reserve
    return body


def random_cases(seed, count):
    """``count`` seeded draws over every route, the batch and the GET doors."""
    rng = random.Random(seed)
    out = []
    for i in range(count):
        path = rng.choice(POST_ROUTES + ("/v1/batch", "/v1/quote", "/v1/sweeps.csv"))
        if path == "/v1/batch":
            items = [None if rng.random() < 0.1 else {"id": j, "path": p, "body": random_body(rng, p)}
                     for j, p in enumerate(rng.choice(POST_ROUTES) for _ in range(rng.randint(1, 5)))]
            out.append(post("random", f"random {i}: batch of {len(items)}", path, {"requests": items}))
        elif path in ("/v1/quote", "/v1/sweeps.csv"):
            out.append(random_door(rng, i, path))
        else:
            out.append(post("random", f"random {i}: {path}", path, random_body(rng, path)))
    return out


def random_door(rng, i, path):
    model = random_parametric(rng)
    flat = flat_model(model)
    direction = rng.choice(["forward", "reverse"])
    pairs = [("direction", direction), ("bidders", rng.choice([1, 2, 6, 1_000_000]))] + flat
    if rng.random() < 0.2:
        pairs.append(("bidders", rng.choice([7, 0, 2_000_000])))   # repeated: the first one counts
    reserve = random_reserve(rng, model)
    if path == "/v1/quote":
        pairs.append(("metric", rng.choice(QUOTE_METRICS[direction])))
        if reserve is not None and rng.random() < 0.5:
            pairs.append(("reserve", _query_number(float(reserve))))
        return get("random", f"random {i}: quote", path, pairs, rng.choice([None, "application/json"]))
    pairs = [(k, v) for k, v in pairs if k != "bidders"] + [("bidders", "1,2,6"), ("reserves", ",".join(
        _query_number(float(x)) for x in [0.0] + ([reserve] if reserve is not None else [])))]
    return get("random", f"random {i}: sweeps.csv", path, pairs)


def contention_cases():
    """(holder, contenders): while the holder runs (a heavy request that takes seconds), the
    contenders arrive one by one; each heavy one must get an answer or a busy 503, never a 500."""
    holder = post("contention", "holder: 2,001 bids, nested mixture of 2 x 25", "/v1/bid-strategy",
                  {"bidder_values": nested_mixture(25), "bidders": 10, "points": MAX_CURVE}, heavy=True)
    light = [{"id": i, "path": "/v1/revenue", "body": {"bidder_values": LOGNORMAL, "bidders": 2 + i % 50}} for i in range(MAX_BATCH)]
    mixed = [{"id": i, "path": "/v1/revenue", "body": {"bidder_values": mixture(20), "bidders": 10}} for i in range(20)]
    lg = [("family", "lognormal"), ("median", 62000), ("sigma", 0.35)]
    contenders = [
        get("contention", "while a heavy request runs: /healthz", "/healthz", []),
        post("contention", "while a heavy request runs: batch of 1,000 light items", "/v1/batch", {"requests": light}),
        post("contention", "while a heavy request runs: batch of 20 20-component mixtures", "/v1/batch", {"requests": mixed}),
        post("contention", "while a heavy request runs: 50-component mixture revenue", "/v1/revenue",
             {"bidder_values": mixture(MAX_COMPONENTS), "bidders": 10}),
        get("contention", "while a heavy request runs: sweeps.csv of 200,000 rows", "/v1/sweeps.csv",
            lg + [("bidders_from", 2), ("bidders_to", 2001), ("reserves_from", 30000), ("reserves_to", 80000),
                  ("reserves_steps", 100), ("rules", "first_price")]),
        get("contention", "while a heavy request runs: /healthz again", "/healthz", []),
    ]
    return holder, contenders


def count_cases():
    """Uncertain counts, risk aversion and the simulation check at and past their caps."""
    g = "counts"
    table = [{"bidders": i, "p": 1.0 / 400} for i in range(400)]
    return [
        post(g, "Poisson mean 10^6: past the counts summed", "/v1/revenue", {"bidder_values": LOGNORMAL, "bidders": {"distribution": "poisson", "mean": 1e6}}),
        post(g, "Poisson mean 1e-300: nobody", "/v1/revenue", {"bidder_values": LOGNORMAL, "bidders": {"distribution": "poisson", "mean": 1e-300}}),
        post(g, "a table of 400 counts, 50-component mixture", "/v1/revenue",
             {"bidder_values": mixture(MAX_COMPONENTS), "bidders": {"distribution": "table", "probabilities": table}}, heavy=True),
        post(g, "a table of 401 counts", "/v1/revenue",
             {"bidder_values": LOGNORMAL, "bidders": {"distribution": "table", "probabilities": table + [{"bidders": 1, "p": 0.0}]}}),
        post(g, "costly entry of 400, reserve price, 50-component mixture", "/v1/reserve-price",
             {"bidder_values": mixture(MAX_COMPONENTS), "bidders": {"distribution": "entry", "potential": 400, "entry_cost": 1e-300}},
             heavy=True),
        post(g, "binomial of 10^6 at 1e-300", "/v1/top-values",
             {"bidder_values": LOGNORMAL, "bidders": {"distribution": "binomial", "potential": 1_000_000, "entry_probability": 1e-300}}),
        post(g, "10^6 draws, all five rules, 50-component mixture", "/v1/revenue",
             {"bidder_values": mixture(MAX_COMPONENTS), "bidders": 6, "monte_carlo": {"draws": 1_000_000}}, heavy=True),
        post(g, "10^6 draws, Poisson mean 300, all-pay", "/v1/revenue",
             {"bidder_values": LOGNORMAL, "bidders": {"distribution": "poisson", "mean": 300}, "rules": ["all_pay"],
              "monte_carlo": {"draws": 1_000_000}}, heavy=True),
        post(g, "batch of 1,000 checks of 10^6 draws", "/v1/batch",
             {"requests": [{"id": i, "path": "/v1/top-values", "body": {"bidder_values": LOGNORMAL, "bidders": 6,
                                                                         "monte_carlo": {"draws": 1_000_000}}} for i in range(MAX_BATCH)]},
             heavy=True),
        post(g, "risk aversion 0.99, 10^6 bidders, 2,001 bids", "/v1/bid-strategy",
             {"bidder_values": LOGNORMAL, "bidders": 1_000_000, "risk_aversion": {"crra": 0.99}, "points": MAX_CURVE}, heavy=True),
        post(g, "risk aversion 0.99, reserve by rule, 50-component mixture", "/v1/reserve-price",
             {"bidder_values": mixture(MAX_COMPONENTS), "bidders": 2, "risk_aversion": {"crra": 0.99}}, heavy=True),
    ]


def group_cases():
    """Bidder groups at and past their caps, with hostile models, preferences and reserves."""
    g = "groups"
    U = {"family": "uniform", "low": 0, "high": 1}

    def grp(i, model=None, count=1, preference=0.0, key="bidder_values"):
        return {"name": f"g{i}", "count": count, key: model or U, "preference": preference}

    six = [grp(i, mixture(MAX_COMPONENTS // 6)) for i in range(6)]
    many = [grp(i, {"family": "uniform", "low": 0, "high": 1 + 0.1 * i}, count=1000) for i in range(6)]
    return [
        post(g, "six groups of mixtures, every rule but all-pay", "/v1/revenue", {"bidder_groups": six}, heavy=True),
        post(g, "seven groups: past the cap", "/v1/revenue", {"bidder_groups": [grp(i) for i in range(7)]}),
        post(g, "six groups of 1,000 bidders, first price", "/v1/revenue", {"bidder_groups": many, "rules": ["first_price"]},
             heavy=True),
        post(g, "two groups, a preference of 1e150", "/v1/revenue", {"bidder_groups": [grp(0, preference=1e150), grp(1)]}),
        post(g, "two groups, a preference of 1e-300", "/v1/revenue", {"bidder_groups": [grp(0, preference=1e-300), grp(1)]}),
        post(g, "two cost groups, a preference just below 1", "/v1/revenue",
             {"cost_groups": [grp(0, key="bidder_costs", preference=1 - 1e-16), grp(1, key="bidder_costs")]}),
        post(g, "two groups, a reserve at the top", "/v1/revenue", {"bidder_groups": [grp(0), grp(1)], "reserve": 1.0}),
        post(g, "two groups, a reserve above everything", "/v1/revenue",
             {"bidder_groups": [grp(0), grp(1, {"family": "uniform", "low": 0, "high": 2})], "reserve": 1e150}),
        post(g, "two groups, values 1e-300 apart", "/v1/revenue",
             {"bidder_groups": [grp(0, {"family": "uniform", "low": 1, "high": 1 + 1e-15}),
                                grp(1, {"family": "uniform", "low": 1, "high": 1 + 2e-15})], "rules": ["first_price"]}),
        post(g, "groups of different directions", "/v1/revenue", {"bidder_groups": [grp(0), grp(1, key="bidder_costs")]}),
        post(g, "a heavy-tailed group (Pareto 1.5)", "/v1/revenue",
             {"bidder_groups": [grp(0), grp(1, {"family": "pareto", "shape": 1.5, "minimum": 1})]}),
        post(g, "groups and bidders at once", "/v1/revenue", {"bidder_groups": [grp(0), grp(1)], "bidders": 3}),
        post(g, "top values of six groups, 200 quantiles", "/v1/top-values",
             {"bidder_groups": six, "quantiles": [(i + 0.5) / 200 for i in range(200)]}, heavy=True),
        post(g, "bids of two groups at 10,000 values", "/v1/bid-strategy",
             {"bidder_groups": [grp(0, count=3), grp(1, {"family": "uniform", "low": 0, "high": 1.5}, count=3)],
              "at": [i / 10000 for i in range(10000)]}, heavy=True),
        get(g, "a quote with groups numbered 1 and 3", "/v1/quote",
            [("metric", "expected_revenue"), ("group1_name", "a"), ("group1_count", 2), ("group1_family", "uniform"),
             ("group1_low", 0), ("group1_high", 1), ("group3_name", "c"), ("group3_count", 2), ("group3_family", "uniform"),
             ("group3_low", 0), ("group3_high", 1)]),
    ]


def chart_cases():
    """The chart doors at their size caps, with long axes, heavy models, and refused in both ways."""
    g = "charts"
    lg = [("family", "lognormal"), ("median", 62000), ("sigma", 0.35), ("bidders", 8)]
    png, svg = "/v1/charts/revenue-by-reserve.png", "/v1/charts/top-values.svg"
    records = [{"bidders": 3 + i % 5, "price": 50000 + 37 * ((i * 7919) % 1000)} for i in range(2000)]
    return [
        get(g, "the largest picture", png, lg + [("width", 2400), ("height", 1600), ("seller_value", 30000)], heavy=True),
        get(g, "1,000 reserves on the axis", png, lg + [("reserves_from", 0), ("reserves_to", 200000), ("reserves_steps", 1000)],
            heavy=True),
        get(g, "revenue by bidders up to 10^6", "/v1/charts/revenue-by-bidders.png", lg[:3] + [("bidders", 1000000)], heavy=True),
        get(g, "a width of 1e300", svg, lg + [("width", "1e300")]),
        get(g, "a currency of markup", svg, lg + [("currency", "<b>&amp;")]),
        get(g, "a chart that is not one", "/v1/charts/pie.png", lg),
        get(g, "a format that is not one", "/v1/charts/top-values.gif", lg),
        get(g, "the points of a mixture's joint density", "/v1/charts/joint-density.svg",
            [("family", "pareto"), ("shape", 2.5), ("minimum", 1), ("bidders", 1000000)], accept="application/json"),
        get(g, "a refused chart, as JSON", svg, lg + [("bidders", 0)], accept="application/json"),
        post(g, "bids of a 10-component mixture, as an image", "/v1/charts/bid-strategy",
             {"bidder_values": mixture(10), "bidders": 6, "rules": ["first_price", "second_price", "all_pay"]},
             headers={"Accept": "image/png"}, heavy=True),
        post(g, "a fit chart of 2,000 auctions", "/v1/charts/fit", {"rule": "ascending", "auctions": records,
                                                                    "families": ["lognormal", "gamma"]}, heavy=True),
        post(g, "a fit chart of bids", "/v1/charts/fit", {"rule": "first_price", "auctions": [{"bidders": 3, "bids": [1, 2, 3]}] * 5}),
        post(g, "a refused chart, as an image", "/v1/charts/top-values", {"bidder_values": {"family": "uniform"}, "bidders": 3},
             headers={"Accept": "image/svg+xml"}),
    ]


def all_cases(seed, random_count):
    """Every group in order, the heavy cases first so that the light ones fill the gaps."""
    cases = nesting_cases() + magnitude_cases() + reserve_cases() + cap_cases() + count_cases() + group_cases() + chart_cases() + \
        door_cases() + random_cases(seed, random_count)
    return [c for c in cases if c.heavy] + [c for c in cases if not c.heavy]
