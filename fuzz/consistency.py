"""Self-consistency of the service's answers, judged without the service's code (`make fuzz`).

Nothing here imports the service: the support of a value model and its mean and sd
come from the request alone, through the families' textbook definitions, and every
check is a law that any correct answer obeys whatever the numerics:

- a probability lies in [0, 1];
- the ranks are in order: the mean (and each quantile) of rank r is at least that of
  rank r + 1, and every rank's mean and quantiles lie in the model's support;
- a price lies in the support or is 0 (no sale), at or above the reserve when there is
  a sale: floor P(sale) <= E[revenue] <= top P(sale), so non-negative values give a
  non-negative revenue (forward) or payment (reverse); a lone bidder, with no rival to
  beat, pays the reserve itself, even one outside the support;
- no revenue above the mean of the highest value: the bidders' and the winner's
  expected surplus are not negative (individual rationality), and for non-negative
  values E[revenue] <= E[highest of n] <= mean + sd (n - 1) / sqrt(2n - 1), the bound of
  Hartley and David (1954, Ann. Math. Statist. 25) and Gumbel (1954, the same volume;
  both citations from memory), and <= n mean (the highest of non-negative values is at
  most their sum);
- revenue equivalence (Myerson 1981; Riley and Samuelson 1981): under the service's
  stated assumptions the five rules' expected revenues agree, given the same reserve;
- an equilibrium bid is increasing in the value and no higher than it (an ask: no lower
  than the cost); a density is not negative; a reserve that beats none is no worse
  than none.

An answer may carry a figure that fails one of these if its ``warnings`` flag it: a
warning flags a figure when it names the figure's field or its rule, or speaks of
consistency. `problems(path, request, answer)` returns the unflagged failures as lines.
"""
from __future__ import annotations

import csv
import io
import json
import math

INF = math.inf


def _refuse_constant(name):
    raise ValueError(f"non-standard JSON literal {name}")


def _finite_float(text):
    value = float(text)
    if not math.isfinite(value):
        raise ValueError(f"number literal {text} is not finite as a double")
    return value


def strict_json(body):
    """A body (bytes) parsed as strict JSON: no NaN, Infinity or number beyond the double range."""
    return json.loads(body.decode("utf-8"), parse_constant=_refuse_constant, parse_float=_finite_float)
RULES = ("first_price", "second_price", "ascending", "descending", "all_pay")
# Relative slack for comparisons between figures, far above rounding and far below any real error.
REL = 1e-9
# Slack of the revenue-equivalence check, relative to the revenue's scale (the service's own
# abs_error estimate is added to it).
REL_EQUIVALENCE = 1e-6
PROB_SLACK = 1e-9
GENERIC_FLAGS = ("consisten", "unreliable", "inaccura", "out of order")


def _num(x):
    """A finite float, or None for null, a non-number or a non-finite value."""
    if isinstance(x, bool) or not isinstance(x, (int, float)):
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def _fin(x):
    return x is not None and math.isfinite(x)


# ------------------------------------------------------------------ the value model
def _param(model, name, default=None):
    v = model.get(name, default) if isinstance(model, dict) else default
    return default if v is None else float(v)


def _parametric_support(fam, m):
    """(low, high) of an untruncated parametric family, from its definition."""
    if fam in ("uniform", "triangular"):
        return _param(m, "low"), _param(m, "high")
    if fam in ("beta", "power"):
        return _param(m, "low", 0.0), _param(m, "high", 0.0 if fam == "power" else 1.0)
    if fam == "normal":
        return -INF, INF
    if fam in ("lognormal", "gamma", "weibull"):
        return 0.0, INF
    if fam == "exponential":
        return _param(m, "shift", 0.0), INF
    if fam == "pareto":
        return _param(m, "minimum"), INF
    return -INF, INF


def support(model):
    """(low, high) of a value model given as a request object; (-inf, inf) if unknown."""
    if not isinstance(model, dict):
        return -INF, INF
    fam = model.get("family")
    if fam == "mixture":
        ends = [support(c.get("model")) for c in model.get("components", []) if _num(c.get("weight")) != 0.0]
        return (min(e[0] for e in ends), max(e[1] for e in ends)) if ends else (-INF, INF)
    if fam == "quantile_table":
        pts = model.get("points") or []
        lo = _param(model, "low", pts[0]["value"] if pts else -INF)
        hi = _param(model, "high", pts[-1]["value"] if pts else INF)
        return lo, hi
    if fam == "empirical":
        sample = [float(x) for x in model.get("sample", [])]
        if model.get("smoothing") == "none":
            return min(sample), max(sample)
        return _param(model, "low", -INF), _param(model, "high", INF)  # a Gaussian kernel reaches everywhere
    lo, hi = _parametric_support(fam, model)
    trunc = model.get("truncate") or {}
    if _num(trunc.get("low")) is not None:
        lo = max(lo, float(trunc["low"]))
    if _num(trunc.get("high")) is not None:
        hi = min(hi, float(trunc["high"]))
    return lo, hi


def _lognormal_moments(m):
    if m.get("mean") is not None:
        return float(m["mean"]), float(m["sd"])
    med, s = float(m["median"]), float(m["sigma"])
    return med * math.exp(s * s / 2), med * math.exp(s * s / 2) * math.sqrt(math.expm1(s * s))


def _weibull_moments(k, lam):
    g1 = math.exp(math.lgamma(1 + 1 / k))
    g2 = math.exp(math.lgamma(1 + 2 / k))
    return lam * g1, lam * math.sqrt(max(g2 - g1 * g1, 0.0))


def _moments(model):
    """(mean, sd) of an untruncated value model in closed form (textbook definitions), or None."""
    fam, m = model.get("family"), model
    if model.get("truncate"):
        return None
    if fam == "uniform":
        a, b = float(m["low"]), float(m["high"])
        return (a + b) / 2, (b - a) / math.sqrt(12)
    if fam == "normal":
        return float(m["mean"]), float(m["sd"])
    if fam == "lognormal":
        return _lognormal_moments(m)
    if fam == "exponential":
        return _param(m, "shift", 0.0) + float(m["mean"]), float(m["mean"])
    if fam == "gamma":
        k, th = float(m["shape"]), float(m["scale"])
        return k * th, math.sqrt(k) * th
    if fam == "weibull":
        return _weibull_moments(float(m["shape"]), float(m["scale"]))
    if fam == "beta":
        a, b = float(m["alpha"]), float(m["beta"])
        lo, w = _param(m, "low", 0.0), _param(m, "high", 1.0) - _param(m, "low", 0.0)
        p, q = a / (a + b), b / (a + b)  # a b alone underflows for subnormal shapes
        return lo + w * p, w * math.sqrt(p * q / (a + b + 1))
    if fam == "triangular":
        a, c, b = float(m["low"]), float(m["mode"]), float(m["high"])
        return (a + b + c) / 3, math.sqrt(max(a * a + b * b + c * c - a * b - a * c - b * c, 0.0) / 18)
    if fam == "pareto":
        al, xm = float(m["shape"]), float(m["minimum"])
        return (al * xm / (al - 1), xm * math.sqrt(al / (al - 2)) / (al - 1)) if al > 2 else None
    if fam == "power":
        a, lo = float(m["exponent"]), _param(m, "low", 0.0)
        w = float(m["high"]) - lo
        return lo + w * a / (a + 1), w * math.sqrt(a / (a + 2)) / (a + 1)
    if fam == "mixture":
        return _mixture_moments(m)
    return None


def _mixture_moments(m):
    """Law of total expectation and variance over the components."""
    mean = second = 0.0
    for c in m.get("components", []):
        got = moments(c.get("model"))
        if got is None:
            return None
        w = float(c["weight"])
        mean += w * got[0]
        root = math.sqrt(w)  # (sqrt(w) sd)^2 stays finite where sd^2 alone would overflow
        second += (root * got[1]) ** 2 + (root * got[0]) ** 2
    return mean, math.sqrt(max(second - mean * mean, 0.0))


def moments(model):
    """(mean, sd) finite, or None when unknown or not representable."""
    if not isinstance(model, dict):
        return None
    try:
        got = _moments(model)
    except (OverflowError, ValueError, ZeroDivisionError, KeyError, TypeError):
        return None
    if got is None or not all(_fin(x) for x in got):
        return None
    return got


def model_scale(model):
    """The size of a model's values, |mean| + sd (for a mixture without them, its largest
    component's), else its largest finite end, or 0:
    the scale that numerical error is measured against, so that a figure near 0 is not held
    to a tolerance relative to itself."""
    if not isinstance(model, dict):
        return 0.0
    got = moments(model)
    if got is not None:
        return abs(got[0]) + got[1]
    if model.get("family") == "mixture":
        return max((model_scale(c.get("model")) for c in model.get("components", []) if _num(c.get("weight"))), default=0.0)
    lo, hi = support(model)
    return max((abs(x) for x in (lo, hi) if math.isfinite(x)), default=0.0)


def count_of(bidders):
    """(the most bidders there can be, whether a lone bidder can take part) of a request's
    ``bidders``: an integer, a distribution object (a table's largest count, a binomial's or
    costly entry's potential, else unbounded), or a sweep's CSV label of one (unbounded)."""
    if isinstance(bidders, (int, float)) and not isinstance(bidders, bool):
        return int(bidders), int(bidders) == 1
    if isinstance(bidders, dict):
        if bidders.get("distribution") == "table":
            counts = [row.get("bidders", 0) for row in bidders.get("probabilities") or [] if isinstance(row, dict)]
            return max(counts, default=0), 1 in counts
        if bidders.get("distribution") in ("binomial", "entry") and isinstance(bidders.get("potential"), int):
            return bidders["potential"], True
    return math.inf, True


def top_bound(model, n):
    """Upper bound on E[highest of n] for values >= 0, or inf: the smaller of
    mean + sd (n - 1) / sqrt(2n - 1) (Hartley and David 1954) and n mean (the highest of
    non-negative values is at most their sum)."""
    got = moments(model)
    if got is None:
        return INF
    mean, sd = got
    if not math.isfinite(n):
        return math.inf
    bound = min(mean + sd * (n - 1) / math.sqrt(2 * n - 1), n * mean)
    return bound if math.isfinite(bound) else INF


# ------------------------------------------------------------------ findings
class Findings:
    """Failures found in one answer, each with the names a warning may flag it by."""

    def __init__(self, where=""):
        self.where, self.items = where, []

    def fail(self, names, message):
        self.items.append((tuple(n for n in names if n), f"{self.where}{message}"))

    def need(self, ok, names, message):
        if not ok:
            self.fail(names, message)

    def unflagged(self, warnings):
        text = " ".join(str(w) for w in (warnings or [])).lower()
        out = []
        for names, message in self.items:
            flagged = any(n.lower() in text for n in names) or any(g in text for g in GENERIC_FLAGS)
            if not flagged:
                out.append(message)
        return out


def _scale(*xs):
    vals = [abs(x) for x in xs if _fin(x)]
    return max(vals, default=0.0)


def _tol(*xs, err=0.0):
    return REL * _scale(*xs) + 4.0 * (err or 0.0) + 1e-300


def _probability(f, names, p):
    if p is not None:
        f.need(-PROB_SLACK <= p <= 1 + PROB_SLACK, names, f"{names[0]} = {p!r} lies outside [0, 1]")


def _within(f, names, x, lo, hi, tol, what):
    if x is None:
        return
    f.need(x >= lo - tol and x <= hi + tol, names, f"{what} = {x!r} lies outside the support [{lo!r}, {hi!r}]")


def _nondecreasing(f, names, xs, tol, what):
    pairs = [x for x in xs if x is not None]
    for a, b in zip(pairs, pairs[1:]):
        if b < a - tol:
            f.fail(names, f"{what} are out of order: {b!r} after {a!r}")
            return


# ------------------------------------------------------------------ the routes
def _case(req):
    """(model, direction, support) of an auction or top-values request."""
    if isinstance(req.get("bidder_costs"), dict):
        model, direction = req["bidder_costs"], "reverse"
    else:
        model, direction = req.get("bidder_values"), "forward"
    return model, direction, support(model)


def top_values(req, ans):
    """Ranks in order, inside the support; the highest below the Hartley-David bound."""
    f = Findings("/v1/top-values: ")
    model, direction, (lo, hi) = _case(req)
    n = count_of(req["bidders"])[0]
    results = sorted(ans.get("results", []), key=lambda r: r["rank"])
    if direction == "reverse":  # costs, ranks from the lowest: judged as the values X = -C, ranks from the highest
        lo, hi, results = -hi, -lo, [_mirrored(r) for r in results]
    means = [_num(r.get("mean")) for r in results]
    tol = _tol(lo, hi, model_scale(model), *means, err=_num((ans.get("numerics") or {}).get("abs_error")))
    for r, mean in zip(results, means):
        names = ("mean", f"rank {r['rank']}")
        _within(f, names, mean, lo, hi, tol, f"rank {r['rank']} mean")
        sd = _num(r.get("sd"))
        f.need(sd is None or sd >= 0, ("sd", f"rank {r['rank']}"), f"rank {r['rank']} sd = {sd!r} is negative")
        qs = sorted(r.get("quantiles") or [], key=lambda q: q["p"])
        values = [_num(q.get("value")) for q in qs]
        _nondecreasing(f, ("quantiles", f"rank {r['rank']}"), values, tol, f"rank {r['rank']} quantiles")
        for v in values:
            _within(f, ("quantiles", f"rank {r['rank']}"), v, lo, hi, tol, f"rank {r['rank']} quantile")
        _curve(f, r, tol)
        if r["rank"] == 1 and mean is not None and lo >= 0 and direction == "forward":
            bound = top_bound(model, n)
            f.need(mean <= bound + _tol(bound, mean), ("mean", "rank 1"),
                   f"rank 1 mean {mean!r} exceeds {bound!r}, the bound on E[highest of {n}] from the model's mean and sd")
    if isinstance(req["bidders"], int):  # under an uncertain count each rank is given that it exists: no order between them
        _nonincreasing_means(f, results, means, tol)
        _quantiles_by_rank(f, results, tol)
    gap = _num(ans.get("expected_gap"))
    f.need(gap is None or gap >= -tol, ("expected_gap",), f"expected_gap = {gap!r} is negative")
    return f.unflagged(ans.get("warnings"))


def _mirrored(r):
    """One rank of costs as the same rank of X = -C: means and quantiles negated (quantile p
    of C is minus quantile 1 - p of X), the curve mirrored."""
    neg = lambda x: None if _num(x) is None else -_num(x)  # noqa: E731
    out = {**r, "mean": neg(r.get("mean")),
           "quantiles": [{"p": 1.0 - q["p"], "value": neg(q.get("value"))} for q in r.get("quantiles") or []]}
    if r.get("curve"):
        c = r["curve"]
        out["curve"] = {"x": [neg(x) for x in c["x"][::-1]], "pdf": c["pdf"][::-1],
                        "cdf": [None if _num(y) is None else 1.0 - _num(y) for y in c["cdf"][::-1]]}
    return out


def _nonincreasing_means(f, results, means, tol):
    pairs = [(r["rank"], m) for r, m in zip(results, means) if m is not None]
    for (ra, a), (rb, b) in zip(pairs, pairs[1:]):
        f.need(b <= a + tol, ("mean", f"rank {ra}", f"rank {rb}"),
               f"ranks out of order: rank {rb} mean {b!r} exceeds rank {ra} mean {a!r}")


def _quantiles_by_rank(f, results, tol):
    """A higher rank dominates a lower one, so its p-quantile is no smaller."""
    by_p = {}
    for r in results:
        for q in r.get("quantiles") or []:
            by_p.setdefault(q["p"], []).append((r["rank"], _num(q.get("value"))))
    for p, pairs in by_p.items():
        pairs = [x for x in pairs if x[1] is not None]
        for (ra, a), (rb, b) in zip(pairs, pairs[1:]):
            f.need(b <= a + tol, ("quantiles", f"rank {ra}", f"rank {rb}"),
                   f"ranks out of order: rank {rb} quantile at p={p} {b!r} exceeds rank {ra}'s {a!r}")


def _curve(f, r, tol):
    curve = r.get("curve")
    if not curve:
        return
    names = ("curve", "pdf", "cdf", f"rank {r['rank']}")
    xs, pdf, cdf = ([_num(v) for v in curve.get(k, [])] for k in ("x", "pdf", "cdf"))
    _nondecreasing(f, names, xs, tol, f"rank {r['rank']} curve x values")
    _nondecreasing(f, names, cdf, PROB_SLACK, f"rank {r['rank']} curve cdf values")
    for p in cdf:
        _probability(f, ("cdf",) + names, p)
    bad = [d for d in pdf if d is not None and d < 0]
    f.need(not bad, names, f"rank {r['rank']} curve pdf is negative: {bad[:1]!r}")


def joint_density(req, ans):
    """A density is not negative; none above the diagonal; the grid holds at most all the mass."""
    f = Findings("/v1/top-values/joint-density: ")
    model, _, (lo, hi) = _case(req)
    dens = [d for row in ans.get("density", []) for d in row] + [p.get("density") for p in ans.get("points", [])]
    bad = [d for d in map(_num, dens) if d is not None and d < 0]
    f.need(not bad, ("density",), f"a density is negative: {bad[:1]!r}")
    for p in ans.get("points", []):
        h, l, d = _num(p.get("higher")), _num(p.get("lower")), _num(p.get("density"))
        if h is not None and l is not None and d is not None and h < l:
            f.need(d == 0, ("density",), f"density {d!r} at higher {h!r} < lower {l!r}, where the ranks cannot be")
    mass = _num(ans.get("mass"))
    if mass is not None:
        f.need(-PROB_SLACK <= mass <= 1.05, ("mass", "probability"), f"the grid holds {mass!r} of a probability of 1")
    axis = [_num(x) for x in ans.get("higher", [])]
    tol = _tol(lo, hi, model_scale(model), *axis)
    for x in axis[:1] + axis[-1:]:
        _within(f, ("higher", "grid"), x, lo, hi, tol, "a grid value")
    return f.unflagged(ans.get("warnings"))


NAMES = {
    "forward": ("expected_revenue", "revenue_sd", "probability_of_sale", "revenue_quantiles", "revenue"),
    "reverse": ("expected_payment", "payment_sd", "probability_of_award", "payment_quantiles", "payment"),
}


class Auction:
    """What the request fixes about one auction: direction, support, reserve, bidders."""

    def __init__(self, req, bidders=None, reserve=None):
        self.model, self.direction, (self.lo, self.hi) = _case(req)
        self.n, lone = count_of(bidders if bidders is not None else req["bidders"])
        self.reserve = _num(reserve if reserve is not None else req.get("reserve"))
        mean_k, sd_k, p_k, q_k, self.word = NAMES[self.direction]
        self.keys = {"mean": mean_k, "sd": sd_k, "p": p_k, "q": q_k}
        if self.direction == "forward":  # the price when sold lies in [floor, hi]
            self.low_end = self.lo if self.reserve is None else max(self.reserve, self.lo)
            self.high_end = self.hi
            self.sure = self.reserve is None or self.reserve <= self.lo
        else:  # the payment when awarded lies in [lo, ceiling]
            self.low_end = self.lo
            self.high_end = self.hi if self.reserve is None else min(self.reserve, self.hi)
            self.sure = self.reserve is None or self.reserve >= self.hi
        if not isinstance(bidders if bidders is not None else req["bidders"], (int, float)):
            self.sure = False  # a count's distribution can hold no bidder at all: no sale for certain then
        self.never = self.low_end >= self.high_end
        if self.n == 1 and self.reserve is not None:  # a lone bidder pays the reserve itself, inside the support or not
            self.low_end = self.high_end = self.reserve
        elif lone and self.reserve is not None:  # an uncertain count: a lone bidder may pay the reserve
            self.low_end, self.high_end = min(self.low_end, self.reserve), max(self.high_end, self.reserve)
        self.scale = model_scale(self.model)


def auction_figures(f, auc, fig, rule, err=0.0):
    """The laws every rule's figures obey, whatever the numerics (see the module's list)."""
    k, word = auc.keys, auc.word
    mean, p, sd = _num(fig.get(k["mean"])), _num(fig.get(k["p"])), _num(fig.get(k["sd"]))
    names = (k["mean"], rule)
    tol = _tol(auc.lo, auc.hi, auc.reserve, auc.scale, mean, err=err)
    _probability(f, (k["p"], rule), p)
    if p is not None and auc.never:
        f.need(p <= PROB_SLACK, (k["p"], rule), f"{rule}: {k['p']} = {p!r} although no price can lie in "
                                                 f"[{auc.low_end!r}, {auc.high_end!r}]")
    if p is not None and auc.sure:
        f.need(p >= 1 - PROB_SLACK, (k["p"], rule), f"{rule}: {k['p']} = {p!r} although every bidder takes part")
    f.need(sd is None or sd >= 0, (k["sd"], rule), f"{rule}: {k['sd']} = {sd!r} is negative")
    if mean is not None and auc.lo >= 0 and auc.low_end >= 0:
        f.need(mean >= -tol, names, f"{rule}: a negative {k['mean']} {mean!r} although every {'value' if auc.direction == 'forward' else 'cost'} is at least {auc.lo!r}")
    if mean is not None and p is not None:
        if _fin(auc.low_end) and not (auc.lo >= 0 and auc.low_end <= 0 and auc.n > 1):
            f.need(mean >= auc.low_end * p - tol, names, f"{rule}: {k['mean']} {mean!r} below the lowest price {auc.low_end!r} times {k['p']} {p!r}")
        if _fin(auc.high_end):
            f.need(mean <= auc.high_end * p + tol, names, f"{rule}: {k['mean']} {mean!r} above the highest price {auc.high_end!r} times {k['p']} {p!r}")
    if mean is not None and auc.direction == "forward" and auc.lo >= 0:
        bound = top_bound(auc.model, auc.n)
        f.need(mean <= bound + _tol(bound, mean), names, f"{rule}: {k['mean']} {mean!r} above {bound!r}, the bound on "
                                                          f"the mean of the highest of {auc.n} values from the model's mean and sd")
    # an all-pay winner's bid G b exceeds a negative value when b does not (a negative forward floor: costs above 0)
    forward_floor = auc.low_end if auc.direction == "forward" else -auc.high_end
    keys = ("expected_bidder_surplus",) if rule == "all_pay" and not forward_floor >= 0 else \
        ("expected_winner_surplus", "expected_bidder_surplus")
    for key in keys:
        s = _num(fig.get(key))
        f.need(s is None or s >= -tol, (key, rule), f"{rule}: {key} = {s!r} is negative: the {word} exceeds the mean of the "
                                                    f"{'highest value' if auc.direction == 'forward' else 'lowest cost'} over sales")
    eff = _num(fig.get("efficiency"))
    f.need(eff is None or eff <= 1 + REL, ("efficiency", rule), f"{rule}: efficiency = {eff!r} exceeds 1")
    _price_quantiles(f, auc, fig.get(k["q"]), rule, tol)


def _price_quantiles(f, auc, qs, rule, tol):
    if not qs:
        return
    k = auc.keys
    values = [_num(q.get("value")) for q in sorted(qs, key=lambda q: q["p"])]
    _nondecreasing(f, (k["q"], rule), values, tol, f"{rule}: {k['q']}")
    lo, hi = min(0.0, auc.low_end), max(0.0, auc.high_end)
    for v in values:
        if v is not None:
            f.need(lo - tol <= v <= hi + tol, (k["q"], rule), f"{rule}: a {auc.word} quantile {v!r} lies outside 0 and [{auc.low_end!r}, {auc.high_end!r}]")


def revenue(req, ans):
    """Each rule's figures, and revenue equivalence across the rules."""
    f = Findings("/v1/revenue: ")
    auc = Auction(req)
    err = _num((ans.get("numerics") or {}).get("abs_error")) or 0.0
    means = []
    for fig in ans.get("results", []):
        auction_figures(f, auc, fig, fig.get("rule", "?"), err)
        means.append(_num(fig.get(auc.keys["mean"])))
    known = [m for m in means if m is not None]
    risk_averse = isinstance(req.get("risk_aversion"), dict) and (_num(req["risk_aversion"].get("crra")) or 0.0) > 0.0
    if len(known) > 1 and not risk_averse:  # revenue equivalence holds for risk-neutral bidders only
        spread = max(known) - min(known)
        allowed = REL_EQUIVALENCE * _scale(*known, auc.scale) + 10 * err + 1e-300
        f.need(spread <= allowed, (auc.keys["mean"], "revenue_equivalence") + tuple(RULES),
               f"the rules' {auc.keys['mean']} differ by {spread!r} (means {known!r}); revenue equivalence allows "
               f"{allowed!r} with the stated abs_error {err!r}")
    return f.unflagged(ans.get("warnings"))


def sweep(req, ans):
    """Each row as one auction's figures; the chance of a sale falls with the reserve, rises with bidders."""
    f = Findings("/v1/sweeps: ")
    cols = ans.get("columns", [])
    p_cells = {}
    for row in ans.get("rows", []):
        cells = dict(zip(cols, row))
        auc = Auction(req, bidders=cells["bidders"], reserve=cells["reserve"])
        rule = str(cells["rule"])
        auction_figures(f, auc, cells, f"{rule} at bidders {cells['bidders']}, reserve {cells['reserve']!r}")
        if auc.keys["p"] in cells and isinstance(cells["bidders"], (int, float)):  # a count's distribution has no order
            p_cells.setdefault(rule, {})[(int(cells["bidders"]), float(cells["reserve"]))] = _num(cells[auc.keys["p"]])
    forward = _case(req)[1] == "forward"
    for rule, table in p_cells.items():
        _sweep_monotone(f, rule, table, forward)
    return f.unflagged(ans.get("warnings"))


def _sweep_monotone(f, rule, table, forward):
    """P(sale) = 1 - F(r)^n: non-increasing in the reserve r, non-decreasing in n
    (reverse: P(award) = 1 - S(p)^n, non-decreasing in the maximum price p and in n)."""
    keys = sorted(k for k, v in table.items() if v is not None)
    for (n1, r1), (n2, r2) in zip(keys, keys[1:]):
        if n1 == n2 and r2 > r1:
            a, b = table[(n1, r1)], table[(n2, r2)]
            ok = b <= a + PROB_SLACK if forward else b >= a - PROB_SLACK
            f.need(ok, ("probability", rule), f"{rule} at bidders {n1}: the chance of a {'sale' if forward else 'award'} "
                                              f"goes from {a!r} at {r1!r} to {b!r} at {r2!r}, the wrong way")
    reserves = {r for _, r in keys}
    for r in reserves:
        col = sorted((n, table[(n, r)]) for n, rr in keys if rr == r)
        for (n1, a), (n2, b) in zip(col, col[1:]):
            f.need(b >= a - PROB_SLACK, ("probability", rule), f"{rule} at reserve {r!r}: the chance of a "
                                                              f"{'sale' if forward else 'award'} falls from {a!r} to {b!r} as bidders go from {n1} to {n2}")


def bid_strategy(req, ans):
    """Bids rise with the value and stay at or below it (asks: at or above the cost)."""
    f = Findings("/v1/bid-strategy: ")
    auc = Auction(req)
    rule = ans.get("rule") or req.get("rule") or "first_price"
    key = "values" if auc.direction == "forward" else "costs"
    pairs = sorted((v, b) for v, b in zip(map(_num, ans.get(key, [])), map(_num, ans.get("bids", [])))
                   if v is not None and b is not None)
    if not pairs:
        return []
    tol = _tol(auc.lo, auc.hi, auc.reserve, auc.scale, *(x for pair in pairs[:1] + pairs[-1:] for x in pair))
    names = ("bids", rule)
    if rule == "all_pay" and not (auc.direction == "forward" and auc.lo >= 0):
        return f.unflagged(ans.get("warnings"))  # a(v) = F^(n-1) b(v) is monotone and below v only for values >= 0
    _nondecreasing(f, names, [b for _, b in pairs], tol, f"{rule} bids (in the order of the {key})")
    for v, b in pairs:
        if auc.direction == "forward":
            f.need(b <= v + tol, names, f"{rule}: the bid {b!r} exceeds the value {v!r}")
            if rule != "all_pay" and _fin(auc.low_end):
                f.need(b >= auc.low_end - tol, names, f"{rule}: the bid {b!r} at value {v!r} lies below the lowest price {auc.low_end!r}")
            if rule == "all_pay":
                f.need(b >= -tol, names, f"all_pay: the bid {b!r} at value {v!r} is negative")
        else:
            f.need(b >= v - tol, names, f"{rule}: the ask {b!r} lies below the cost {v!r}")
            if _fin(auc.high_end):
                f.need(b <= auc.high_end + tol, names, f"{rule}: the ask {b!r} at cost {v!r} exceeds the highest price {auc.high_end!r}")
    return f.unflagged(ans.get("warnings"))


def reserve_price(req, ans):
    """The optimal reserve lies in the support and does at least as well as none."""
    f = Findings("/v1/reserve-price: ")
    auc = Auction(req)
    forward = auc.direction == "forward"
    word, chance = ("revenue", "sale") if forward else ("payment", "award")
    r = _num(ans.get("optimal_reserve"))
    rev, rev0 = _num(ans.get(f"expected_{word}_at_optimum")), _num(ans.get(f"expected_{word}_without_reserve"))
    payoff, p = _num(ans.get("expected_payoff_at_optimum")), _num(ans.get(f"probability_of_{chance}_at_optimum"))
    tol = _tol(auc.lo, auc.hi, auc.scale, r, rev, rev0, payoff)
    _within(f, ("optimal_reserve",), r, auc.lo, auc.hi, tol, "optimal_reserve")
    _probability(f, (f"probability_of_{chance}_at_optimum",), p)
    if auc.lo >= 0:
        for key, x in ((f"expected_{word}_at_optimum", rev), (f"expected_{word}_without_reserve", rev0)):
            f.need(x is None or x >= -tol, (key,), f"a negative {key} {x!r} although every {'value' if forward else 'cost'} is at least {auc.lo!r}")
    if forward and payoff is not None and rev0 is not None:
        # No reserve sells for sure, so its payoff is its revenue; the optimum may not do worse.
        f.need(payoff >= rev0 - tol, ("expected_payoff_at_optimum", "optimal_reserve"),
               f"expected_payoff_at_optimum {payoff!r} is below the revenue without a reserve {rev0!r}")
    if forward and r is not None and ans.get("regular") is True:
        v0 = _num(req.get("seller_value")) or 0.0
        f.need(r >= min(v0, auc.hi) - tol, ("optimal_reserve",), f"optimal_reserve {r!r} is below the seller's value {v0!r} "
                                                                  "although the model is regular")
    if rev is not None and p is not None and _fin(auc.hi) and forward:
        f.need(rev <= auc.hi * p + tol, (f"expected_{word}_at_optimum",), f"expected_{word}_at_optimum {rev!r} above the top of the support {auc.hi!r} times {p!r}")
    return f.unflagged(ans.get("warnings"))


ROUTES = {
    "/v1/top-values": top_values,
    "/v1/top-values/joint-density": joint_density,
    "/v1/revenue": revenue,
    "/v1/bid-strategy": bid_strategy,
    "/v1/reserve-price": reserve_price,
    "/v1/sweeps": sweep,
}


def groups(req, ans):
    """Bidder groups: probabilities in [0, 1], sds not negative, the groups' win chances summing
    to the chance of a sale, the payments to the expected revenue, and a winner that is the
    highest-value bidder no more often than there is a sale."""
    f = Findings()
    for r in ans.get("results") or []:
        rule = r.get("rule")
        rev = r.get("expected_revenue", r.get("expected_payment"))
        sale = r.get("probability_of_sale", r.get("probability_of_award"))
        best = r.get("probability_highest_value_wins", r.get("probability_lowest_cost_wins"))
        sd = r.get("revenue_sd", r.get("payment_sd"))
        for name, p in (("probability_of_sale", sale), ("probability_highest_value_wins", best), ("efficiency", r.get("efficiency"))):
            _probability(f, (name, rule), p)
        if sd is not None:
            f.need(sd >= 0.0, ("revenue_sd", rule), f"{rule}: sd {sd!r} < 0")
        wins = [g.get("win_probability") for g in r.get("groups") or []]
        pays = [g.get("expected_payment") for g in r.get("groups") or []]
        for w in wins:
            _probability(f, ("win_probability", rule), w)
        if sale is not None and None not in wins:
            f.need(abs(sum(wins) - sale) <= 1e-6, ("win_probability", rule), f"{rule}: win chances sum to {sum(wins)!r}, sale {sale!r}")
        if rev is not None and None not in pays:
            f.need(abs(sum(pays) - rev) <= 1e-9 * _scale(rev, *pays), ("expected_payment", rule),
                   f"{rule}: payments sum to {sum(pays)!r}, revenue {rev!r}")
        if best is not None and sale is not None:
            f.need(best <= sale + 1e-9, ("probability_highest_value_wins", rule), f"{rule}: highest value wins {best!r} > sale {sale!r}")
    return f.unflagged(ans.get("warnings"))


def problems(path, req, ans):
    """The unflagged self-consistency failures of a 200 JSON answer to POST ``path``."""
    if not isinstance(req, dict) or not isinstance(ans, dict):
        return []
    if "bidder_groups" in req or "cost_groups" in req:
        return groups(req, ans) if path == "/v1/revenue" else []
    if path == "/v1/batch":
        out = []
        for i, (item, reply) in enumerate(zip(req.get("requests", []), ans.get("responses", []))):
            if isinstance(item, dict) and isinstance(reply, dict) and reply.get("status") == 200:
                out += [f"batch item {i}: {m}" for m in problems(item.get("path"), item.get("body"), reply.get("body"))]
        return out
    check = ROUTES.get(path)
    return check(req, ans) if check else []


# ------------------------------------------------------------------ the GET doors
def _first(query):
    """A query as {name: first value}, as the service reads repeated parameters."""
    out = {}
    for k, v in (query.items() if isinstance(query, dict) else query):
        for x in (v if isinstance(v, (list, tuple)) else [v]):
            out.setdefault(str(k), str(x))
    return out


def _query_number(raw, decimal="."):
    try:
        return float(raw.replace(",", ".") if decimal == "," else raw)
    except (TypeError, ValueError, AttributeError):
        return None


def door_marks(query):
    """(decimal mark, CSV field separator) a GET door writes for this query."""
    q = _first(query or {})
    decimal = q.get("decimal", ".")
    return decimal, {",": ",", ";": ";", "tab": "\t"}.get(q.get("separator", ";" if decimal == "," else ","), ",")


def door_number(text, decimal="."):
    """A quote's text as a number, or None for an error line (errors=inline answers 200 with one)."""
    text = text.strip()
    if text.startswith("error:"):
        return None
    value = float(text.replace(",", ".") if decimal == "," else text)
    if not math.isfinite(value):
        raise ValueError(f"the quote is {text!r}")
    return value


def query_case(q):
    """The POST body the GET doors build from a query (the model flattened), enough to judge figures."""
    model, decimal = {"family": q.get("family")}, q.get("decimal", ".")
    for k, v in q.items():
        if k in ("family", "direction", "metric", "rule", "bidders", "reserve", "seller_value", "buyer_value",
                 "reserves", "rules", "metrics", "decimal", "errors", "separator") or k.startswith(("bidders_", "reserves_")):
            continue
        if k.startswith("truncate_"):
            model.setdefault("truncate", {})[k[len("truncate_"):]] = _query_number(v, decimal)
        else:
            model[k] = _query_number(v, decimal)
    side = "bidder_costs" if q.get("direction") == "reverse" else "bidder_values"
    body = {side: model, "bidders": {"distribution": q["bidders_distribution"]} if "bidders_distribution" in q
            else _query_number(q.get("bidders"), decimal) or 1}
    for k in ("reserve", "seller_value", "buyer_value"):
        if k in q:
            body[k] = _query_number(q[k], decimal)
    return body


def quote(query, value, warnings=None):
    """One quoted figure against the laws that bind it alone."""
    q = _first(query)
    f = Findings("/v1/quote: ")
    value = _num(value)
    if value is None:  # no figure (an inline error line): nothing to judge
        return []
    metric, body = q.get("metric", ""), query_case(q)
    auc = Auction(body)
    tol = _tol(auc.lo, auc.hi, auc.reserve, auc.scale, value)
    if metric.startswith("probability_of_"):
        _probability(f, (metric,), value)
    elif metric in ("revenue_sd", "payment_sd", "expected_gap", "expected_winner_surplus"):
        f.need(value >= -tol, (metric,), f"{metric} = {value!r} is negative")
    elif metric == "efficiency":
        f.need(value <= 1 + REL, (metric,), f"efficiency = {value!r} exceeds 1")
    elif metric in ("expected_revenue", "expected_payment") and auc.lo >= 0 and auc.low_end >= 0:
        f.need(value >= -tol, (metric,), f"a negative {metric} {value!r} although the support starts at {auc.lo!r}")
    elif metric in ("mean_highest", "mean_second", "mean_lowest", "mean_second_lowest", "optimal_reserve"):
        _within(f, (metric,), value, auc.lo, auc.hi, tol, metric)
    return f.unflagged(warnings)


def csv_table(text, decimal=".", separator=","):
    """A CSV answer as {columns, rows}: numbers as floats, empty cells as None, other cells as text."""
    rows = list(csv.reader(io.StringIO(text), delimiter=separator))
    if not rows:
        raise ValueError("no header row")
    cols, out = rows[0], []
    for row in rows[1:]:
        if len(row) != len(cols):
            raise ValueError(f"a row of {len(row)} cells under {len(cols)} columns")
        cells = []
        for name, cell in zip(cols, row):
            if name == "rule":
                cells.append(cell)
            elif cell == "":
                cells.append(None)
            elif name == "bidders":
                cells.append(int(cell) if cell.isdigit() else cell)  # a count's distribution is a label
            else:
                x = float(cell.replace(",", ".") if decimal == "," else cell)
                if not math.isfinite(x):
                    raise ValueError(f"{name} holds {cell!r}")
                cells.append(x)
        out.append(cells)
    return {"columns": cols, "rows": out}


def sweep_csv(query, text):
    """A GET /v1/sweeps.csv table against the sweep's laws (a CSV has no warnings: refuse or be right)."""
    body = query_case(_first(query))
    body.pop("bidders", None)
    return sweep(body, csv_table(text, *door_marks(query)))
