"""The last check on every report before it is returned: laws that hold whatever the
value model, checked on the figures themselves.

Ranks are in order (rank 1 at or above rank 2, quantile by quantile too), quantiles
rise with p, sds are not negative, probabilities lie in [0, 1], a winner-pays price is
at least the floor, no bidder expects to lose by taking part (the surpluses are not
negative, so revenue never exceeds the highest value's mean), bids lie between the
floor and the value and rise with it; a reverse auction's figures obey the same laws
mirrored (asks between the cost and the maximum price, payments at most the maximum
price and at least the lowest cost's mean).

Reports are checked under the core's names (revenue, sale, values) with figures in the
caller's sign; a finding names its figure by its path (``notes.Finding``), which the web
layer writes under the caller's names.

A figure that breaks a law by no more than rounding (``ULPS`` units in the last place of
the figures compared) is set onto the bound, where the exact figure lies, so its error
only shrinks. A larger break is never silent: a warning names the figure, the law and
the size of the break.
"""
from __future__ import annotations

import math

import numpy as np

from . import rules as R
from .notes import Finding

#: How far, in units in the last place of the figures compared, rounding can carry a
#: figure across a bound that holds exactly (sums of a few rounded terms).
ULPS = 32


def _slack(*xs):
    return ULPS * max((float(np.spacing(abs(float(x)))) for x in xs if x is not None and math.isfinite(x)), default=0.0)


def _get(holder, key):
    return holder[key] if isinstance(holder, list) else holder.get(key)


class Audit:
    """The breaks found in one report; ``done`` adds them to its warnings. ``holder`` is
    a dict or a list and ``key`` its key or index, so figures are set in place."""

    def __init__(self, report):
        self.report, self.notes = report, []

    def at_least(self, holder, key, bound, path, law, scale=()):
        x = _get(holder, key)
        if x is None or bound is None or not math.isfinite(bound) or x >= bound:
            return
        if bound - x <= _slack(x, bound, *scale):
            holder[key] = float(bound) + 0.0
        else:
            self.notes.append(Finding(path, f"is {x:.9g}, below {bound:.9g}, though {law}: it is not reliable"))

    def at_most(self, holder, key, bound, path, law, scale=()):
        x = _get(holder, key)
        if x is None or bound is None or not math.isfinite(bound) or x <= bound:
            return
        if x - bound <= _slack(x, bound, *scale):
            holder[key] = float(bound) + 0.0
        else:
            self.notes.append(Finding(path, f"is {x:.9g}, above {bound:.9g}, though {law}: it is not reliable"))

    def within(self, holder, key, lo, hi, path, law, scale=()):
        self.at_least(holder, key, lo, path, law, scale)
        self.at_most(holder, key, hi, path, law, scale)

    def each(self, values, lo, hi, path, law):
        for i in range(len(values)):
            self.within(values, i, lo, hi, f"{path}.{i}", law)

    def rising(self, values, path, law):
        """values[i] never falls as i grows (None skipped)."""
        last = None
        for i in range(len(values)):
            if values[i] is None:
                continue
            if last is not None:
                self.at_least(values, i, values[last], f"{path}.{i}", law)
            last = i

    def done(self):
        warnings = self.report.setdefault("warnings", [])
        warnings.extend(note for note in dict.fromkeys(self.notes) if note not in warnings)
        return self.report


class _Column(list):
    """One field of a list of dicts, as a list whose writes go back to the dicts."""

    def __init__(self, items, key):
        super().__init__(item[key] for item in items)
        self.items, self.key = items, key

    def __setitem__(self, i, x):
        super().__setitem__(i, x)
        self.items[i][self.key] = x


# ---- top values --------------------------------------------------------------------

def top_values(report, model, ordered=True):
    """Ranks in order, quantiles rising and inside the support, sds not negative. Under an
    uncertain count (``ordered`` False) each rank is given that it exists, and the ranks need
    not be in order: the second-highest of many can exceed the highest of few."""
    a = Audit(report)
    results = report["results"]
    for i, item in enumerate(results):
        path = f"results.{i}"
        a.within(item, "mean", model.lower, model.upper, f"{path}.mean", "a mean lies within the support")
        a.at_least(item, "sd", 0.0, f"{path}.sd", "an sd is never negative")
        qs = _Column(item["quantiles"], "value")
        a.each(qs, model.lower, model.upper, f"{path}.quantiles", "a quantile lies within the support")
        a.rising(qs, f"{path}.quantiles", "quantiles rise with p")
        if "curve" in item:
            a.each(item["curve"]["pdf"], 0.0, math.inf, f"{path}.curve.pdf", "a density is never negative")
            a.each(item["curve"]["cdf"], 0.0, 1.0, f"{path}.curve.cdf", "a probability lies in [0, 1]")
            a.rising(item["curve"]["cdf"], f"{path}.curve.cdf", "a cdf rises")
    order = sorted(range(len(results)), key=lambda i: results[i]["rank"]) if ordered else []
    for hi, lo in zip(order, order[1:]):
        upper, lower = results[hi], results[lo]
        law = f"rank {lower['rank']} never exceeds rank {upper['rank']}"
        a.at_most(lower, "mean", upper.get("mean"), f"results.{lo}.mean", law)
        # The ranks are ordered draw by draw, so their quantiles are ordered p by p.
        above = {q["p"]: q["value"] for q in upper["quantiles"]}
        for j, q in enumerate(lower["quantiles"]):
            a.at_most(q, "value", above.get(q["p"]), f"results.{lo}.quantiles.{j}.value", law)
    a.at_least(report, "expected_gap", 0.0, "expected_gap", "the highest value is at least the second-highest")
    return a.done()


def joint_density(report):
    """A density is never negative, nor is the grid's mass."""
    a = Audit(report)
    for i, row in enumerate(report.get("density") or []):
        a.each(row, 0.0, math.inf, f"density.{i}", "a density is never negative")
    points = report.get("points")
    if points:
        a.each(_Column(points, "density"), 0.0, math.inf, "points", "a density is never negative")
    # The grid's mass is a trapezoid-type estimate, documented as such: the report itself
    # warns when it strays more than 0.05 from 1, so only its sign is a law here.
    a.at_least(report, "mass", 0.0, "mass", "a probability is never negative")
    return a.done()


# ---- auctions ----------------------------------------------------------------------

def _winner_pays(rule):
    """Whether only the winner pays under the rule (so it pays at least the floor)."""
    return R.get(rule).pricing.only_winner_pays


#: Revenue equivalence holds exactly under the stated assumptions (Myerson 1981; Riley and
#: Samuelson 1981); the routes agree to about 1e-13, so a wider gap is a lost digit, not a law.
EQUIVALENCE_RTOL = 1e-8


def _floor(model, reserve, lone, reverse):
    """The least a winner pays (forward) or the most it is paid (reverse): the reserve
    where it binds; a lone bidder (``lone``: one can take part) pays the reserve itself
    even outside the support."""
    if reverse:
        if reserve is None:
            return model.upper
        return reserve if lone else min(reserve, model.upper)
    if reserve is None:
        return model.lower
    return reserve if lone else max(reserve, model.lower)


def _trades_gain(model, reserve, own_value, reverse):
    """Whether every trade the reserve allows gains (a value at least the seller's own, a
    cost at most the buyer's), so that efficiency, realised over possible gains, is not negative."""
    if own_value is None:
        return False
    if reverse:
        return (model.upper if reserve is None else min(reserve, model.upper)) <= own_value
    return (model.lower if reserve is None else max(reserve, model.lower)) >= own_value


def revenue(report, model, reserve, own_value, lone=None, equivalent=True):
    """Each rule's figures, in the caller's sign (payments and costs when reverse) under the core's names."""
    a = Audit(report)
    reverse = report["direction"] == "reverse"
    mean_k, sd_k, q_k, p_k = "expected_revenue", "revenue_sd", "revenue_quantiles", "probability_of_sale"
    lone = report["bidders"] == 1 if lone is None else lone
    floor = _floor(model, reserve, lone, reverse)
    gains = _trades_gain(model, reserve, own_value, reverse)
    for i, res in enumerate(report["results"]):
        path, p = f"results.{i}", res.get(p_k)
        a.within(res, p_k, 0.0, 1.0, f"{path}.{p_k}", "a probability lies in [0, 1]")
        a.within(res, "efficiency", 0.0 if gains else None, 1.0, f"{path}.efficiency",
                 "efficiency is a share of the largest gains from trade")
        a.at_least(res, sd_k, 0.0, f"{path}.{sd_k}", "an sd is never negative")
        _surpluses(a, res, mean_k, path, floor, reverse)
        if p is not None and math.isfinite(floor) and (_winner_pays(res["rule"]) or lone):
            if reverse:
                a.at_most(res, mean_k, floor * p, f"{path}.{mean_k}", "the winner is paid at most the maximum price")
            else:
                a.at_least(res, mean_k, floor * p, f"{path}.{mean_k}", "the winner pays at least the floor")
        if reverse and model.lower >= 0.0:
            a.at_least(res, mean_k, 0.0, f"{path}.{mean_k}", "no cost is negative")
        if not reverse and floor >= 0.0:
            a.at_least(res, mean_k, 0.0, f"{path}.{mean_k}", "no bid is negative")
        if res.get(q_k):
            a.rising(_Column(res[q_k], "value"), f"{path}.{q_k}", "quantiles rise with p")
    error = (report.get("numerics") or {}).get("abs_error") or 0.0
    if equivalent:  # revenue equivalence holds for risk-neutral bidders only
        _equivalent(a, report["results"], mean_k, [f"results.{i}.{mean_k}" for i in range(len(report["results"]))],
                    (reserve,), 100.0 * error)
    return a.done()


def _surpluses(a, holder, mean_k, path, floor, reverse):
    """The bidders together never expect to lose by taking part; the winner does not
    either where it pays at most its value (every rule but all-pay, whose winner's bid
    F^(n-1) b exceeds a negative value when b does not: a negative forward floor). A
    surplus is a difference of figures of the revenue's size, which sets its rounding."""
    scale = (holder.get(mean_k),)
    a.at_least(holder, "expected_bidder_surplus", 0.0, f"{path}.expected_bidder_surplus",
               "no bidder expects to lose by taking part", scale)
    if _winner_pays(holder["rule"]) or (-floor if reverse else floor) >= 0.0:
        a.at_least(holder, "expected_winner_surplus", 0.0, f"{path}.expected_winner_surplus",
                   "the winner pays at most its value", scale)


def _equivalent(a, holders, mean_k, paths, scale, slack):
    """Each rule's expected revenue equals the others' (revenue equivalence): a figure further
    than EQUIVALENCE_RTOL from the rules' median is named, unless within the stated error
    or within rounding of the problem's own scale (its other figures and the reserve), as a
    revenue of 1e-17 is where the values run from -5 to 5."""
    live = [(h[mean_k], p) for h, p in zip(holders, paths) if h.get(mean_k) is not None]
    if len(live) < 2:
        return
    ordered = sorted(m for m, _ in live)
    centre = ordered[(len(ordered) - 1) // 2]
    figures = [abs(x) for h in holders for x in h.values() if isinstance(x, float) and math.isfinite(x)]
    figures += [abs(x) for x in scale if x is not None and math.isfinite(x)]
    tol = EQUIVALENCE_RTOL * max(abs(m) for m, _ in live) + slack + _slack(*figures)
    for m, path in live:
        if abs(m - centre) > tol:
            a.notes.append(Finding(path, f"is {m:.9g}, {abs(m - centre):.3g} from the other rules' {centre:.9g}, though "
                                         "revenue equivalence makes them equal: it is not reliable"))


def bids(report, model, reserve, lone=None):
    """Bids rise with the value; a winner-pays bid lies between the floor and the value,
    an all-pay bid (F^(n-1) times one) between 0 and the value when the floor is not
    negative. Reverse asks obey the same laws mirrored (checked on their negatives)."""
    a = Audit(report)
    reverse = report["direction"] == "reverse"
    sign = -1.0 if reverse else 1.0
    at = report["values"]
    lone = report["bidders"] == 1 if lone is None else lone
    floor = sign * _floor(model, reserve, lone, reverse)
    twin = [None if b is None else sign * b for b in report["bids"]]  # forward bids
    word = "cost" if reverse else "value"
    winner_pays = _winner_pays(report["rule"]) or lone
    for i, x in enumerate(at):
        if twin[i] is None or x is None:
            continue
        v = sign * x
        if winner_pays:
            a.within(twin, i, floor, v, f"bids.{i}", f"a bid lies between the floor and the {word}")
        elif floor >= 0.0:
            a.within(twin, i, 0.0, v, f"bids.{i}", f"an all-pay bid lies between 0 and the {word}")
    if winner_pays or floor >= 0.0:  # an all-pay bid F^(n-1) b falls as F rises where b < 0
        order = sorted((sign * x, i) for i, x in enumerate(at) if x is not None and twin[i] is not None)
        ranked = [twin[i] for _, i in order]
        a.rising(ranked, "bids", f"a bid rises with the {word}")
        for (_, i), b in zip(order, ranked):
            twin[i] = b
    report["bids"] = [None if b is None else sign * b + 0.0 for b in twin]
    return a.done()


def reserve_price(report, model, own_value):
    """The optimum lies in the support with its chance of a sale in [0, 1], and its
    payoff is at least that of no reserve, which the search could have chosen."""
    a = Audit(report)
    reverse = report["direction"] == "reverse"
    key = "probability_of_sale_at_optimum"
    a.within(report, key, 0.0, 1.0, key, "a probability lies in [0, 1]")
    a.within(report, "optimal_reserve", model.lower, model.upper, "optimal_reserve", "the optimum lies within the support")
    without = report.get("expected_revenue_without_reserve")
    if without is not None and own_value is not None:
        # Without a reserve every auction sells: the seller's payoff is its revenue, the buyer's its value less the payment.
        baseline = own_value - without if reverse else without
        a.at_least(report, "expected_payoff_at_optimum", baseline, "expected_payoff_at_optimum",
                   "the optimum does at least as well as no reserve", (without, own_value))
    return a.done()


def sweep(report, model, own_value=None, groups=None, lone=None):
    """Each row: probabilities and efficiency in [0, 1], sds and surpluses not negative,
    revenue (payment) not negative when no value (cost) is; across the rules of one
    (bidders, reserve), revenue equivalence. Column by column, as arrays: a sweep holds up
    to 200,000 rows. A law broken in many rows is named at its first rows and counted."""
    cols, rows = report["columns"], report["rows"]
    a = Audit(report)
    if not rows:
        return a.done()
    reverse = report["direction"] == "reverse"
    mean_k = "expected_revenue"
    table = _Table(cols, rows)
    # each row's count as a number for grouping (``groups``: a distribution's rows share a code
    # of their own) and whether a lone bidder can take part (``lone``)
    reserve = table.array("reserve")
    n = table.array("bidders") if groups is None else groups
    floor = _floor_array(model, reserve, n == 1 if lone is None else lone, reverse)
    table.bound(a, "probability_of_sale", 0.0, 1.0, "a probability lies in [0, 1]")
    table.bound(a, "revenue_sd", 0.0, None, "an sd is never negative")
    if mean_k in table:
        no_negative = (model.lower >= 0.0) if reverse else (floor >= 0.0)
        table.bound(a, mean_k, np.where(no_negative, 0.0, np.nan), None, "no " + ("cost" if reverse else "bid") + " is negative")
    scale = table.array(mean_k) if mean_k in table else None
    table.bound(a, "expected_bidder_surplus", 0.0, None, "no bidder expects to lose by taking part", scale)
    if "expected_winner_surplus" in table:
        pays = np.array([_winner_pays(c) for c in table.column("rule")]) | ((-floor if reverse else floor) >= 0.0)
        table.bound(a, "expected_winner_surplus", np.where(pays, 0.0, np.nan), None, "the winner pays at most its value", scale)
    if "efficiency" in table:
        gains = _trades_gain_array(model, reserve, own_value, reverse)
        table.bound(a, "efficiency", np.where(gains, 0.0, np.nan), 1.0, "efficiency is a share of the largest gains from trade")
    if mean_k in table:
        _equivalent_rows(a, table, mean_k, n, reserve)
    table.write_back()
    return a.done()


class _Table:
    """A sweep's numeric columns as float arrays (NaN for null), written back after the checks."""

    def __init__(self, cols, rows):
        self.cols, self.rows, self.changed = cols, rows, {}
        self.index = {c: j for j, c in enumerate(cols)}

    def __contains__(self, key):
        return key in self.index

    def column(self, key):
        j = self.index[key]
        return [row[j] for row in self.rows]

    def array(self, key):
        if key in self.changed:
            return self.changed[key]
        return np.array([np.nan if x is None else x for x in self.column(key)], float)

    def bound(self, a, key, lo, hi, law, scale=None):
        """lo <= column <= hi (NaN bounds do not apply): within rounding, set onto the bound;
        beyond, named in a warning."""
        if key not in self:
            return
        x = self.array(key)
        for bound, sign, word in ((lo, 1.0, "below"), (hi, -1.0, "above")):
            if bound is None:
                continue
            b = np.broadcast_to(np.asarray(bound, float), x.shape)
            broken = sign * (x - b) < 0.0  # NaN on either side compares False
            if not broken.any():
                continue
            size = np.fmax(np.fmax(np.abs(x), np.abs(b)), np.abs(scale) if scale is not None else 0.0)
            small = broken & (np.abs(x - b) <= ULPS * np.spacing(size))
            x = np.where(small, b, x)
            _name_rows(a, np.nonzero(broken & ~small)[0], key, x, b, word, law)
        self.changed[key] = x

    def write_back(self):
        for key, x in self.changed.items():
            j = self.index[key]
            for row, v in zip(self.rows, x.tolist()):
                if row[j] is not None:
                    row[j] = v + 0.0


def _name_rows(a, bad, key, x, b, word, law, first=3):
    for i in bad[:first]:
        a.notes.append(Finding(f"rows.{i}.{key}", f"is {x[i]:.9g}, {word} {b[i]:.9g}, though {law}: it is not reliable"))
    if len(bad) > first:
        a.notes.append(Finding(key, f"breaks the same law in {len(bad) - first} more rows ({law}): they are not reliable"))


def _floor_array(model, reserve, lone, reverse):
    """``_floor`` over a sweep's rows (``lone``: whether a lone bidder can take part)."""
    if reverse:
        return np.where(lone, reserve, np.minimum(reserve, model.upper))
    return np.where(lone, reserve, np.maximum(reserve, model.lower))


def _trades_gain_array(model, reserve, own_value, reverse):
    """``_trades_gain`` over a sweep's rows."""
    if own_value is None:
        return np.zeros(reserve.shape, bool)
    if reverse:
        return np.minimum(reserve, model.upper) <= own_value
    return np.maximum(reserve, model.lower) >= own_value


def _equivalent_rows(a, table, mean_k, n, reserve):
    """Revenue equivalence across the rules of each (bidders, reserve): each row's figure
    against its group's median, as ``_equivalent`` does for one report."""
    m = table.array(mean_k)
    _, group = np.unique(np.stack((n, reserve)), axis=1, return_inverse=True)
    group = group.ravel()
    order = np.lexsort((m, group))  # NaN (null) sorts last within its group
    g_sorted, m_sorted = group[order], m[order]
    starts = np.searchsorted(g_sorted, np.arange(group.max() + 1))
    counts = np.bincount(group, weights=np.isfinite(m).astype(float)).astype(int)
    centre = m_sorted[np.minimum(starts + np.maximum(counts - 1, 0) // 2, len(m) - 1)][group]
    numeric = np.column_stack([np.abs(table.array(c)) for c in table.cols if c not in ("bidders", "rule")])
    size = np.fmax.reduceat(np.nanmax(numeric, axis=1)[order], starts)[group]
    biggest = np.fmax.reduceat(np.abs(m_sorted), starts)[group]
    tol = EQUIVALENCE_RTOL * biggest + ULPS * np.spacing(np.nan_to_num(size))
    bad = np.nonzero((counts[group] > 1) & (np.abs(m - centre) > tol))[0]
    _name_rows(a, bad, mean_k, m, centre, "away from the other rules'", "revenue equivalence makes them equal")
