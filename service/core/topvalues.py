"""The top-values reports: moments, quantiles and curves of the highest ranks,
and the joint density of two ranks. Plain dicts of finite floats (or None)."""
from __future__ import annotations

import functools
import math

import numpy as np
from scipy import special

from . import audit, budget
from . import orderstats as os_
from .errors import ParameterError
from .models import Reflected

#: Points of the joint density evaluated at once.
_CHUNK = 512


def finite(x):
    """A JSON-safe float: None for NaN or an infinity."""
    if x is None:
        return None
    x = float(x)
    return x + 0.0 if math.isfinite(x) else None  # + 0.0 turns -0.0 into 0.0


def finite_list(xs):
    return [finite(x) for x in np.asarray(xs, float).tolist()]


def _numerics(summaries, gap_error=0.0):
    methods = sorted({s.method for s in summaries if s.method != "none"}) or ["none"]
    errors = [s.abs_error for s in summaries] + [gap_error]
    return {"method": "+".join(methods), "abs_error": finite(None if None in errors else max(errors))}


def top_values(model, bidders, ranks=None, quantiles=(0.05, 0.25, 0.5, 0.75, 0.95), curve_points=0, monte_carlo=None):
    """Mean, sd, quantiles (and optionally the pdf/cdf curve) of each rank; ``bidders`` a count
    or :class:`bidders.Bidders`; with ``monte_carlo`` ({draws, seed}), ranks 1 and 2 checked by
    simulation (:mod:`simulation`)."""
    from . import mixing  # mixing builds on the auction modules, which import this one

    count = mixing.resolve(bidders, model)
    out = _top_values(model, count, ranks, quantiles, curve_points)
    if monte_carlo:
        from . import simulation

        exact = {item["rank"]: (item["mean"], item["sd"]) for item in out["results"]}
        out["monte_carlo"] = {"draws": monte_carlo["draws"], "seed": monte_carlo["seed"], "method": simulation.METHOD,
                              "results": simulation.top_values_check(model, count, list(exact), monte_carlo["draws"],
                                                                     monte_carlo["seed"], exact)}
    return out


def _top_values(model, count, ranks, quantiles, curve_points):
    """The top-values report for a count (``Bidders``)."""
    if not count.certain:
        return _mixed_top_values(model, count, ranks, quantiles, curve_points)
    bidders = count.n
    if ranks is None:
        ranks = [1] if count.lone else [1, 2]
    for i, r in enumerate(ranks):
        if r > bidders:
            raise ParameterError(f"ranks.{i}", f"rank {r} exceeds the number of bidders ({bidders})")
    if curve_points and model.discrete:
        raise ParameterError("curve_points", "a step (smoothing: none) empirical model has no density; use smoothing: kernel")
    summaries = [os_.rank_summary(model, bidders, r, with_gap=True) for r in ranks]
    results, warnings = [], []
    for s in summaries:
        warnings += s.warnings
        qs = os_.rank_quantiles(model, bidders, s.rank, quantiles)
        item = {
            "rank": s.rank,
            "mean": finite(s.mean),
            "sd": finite(s.sd),
            "quantiles": [{"p": float(p), "value": finite(q)} for p, q in zip(quantiles, qs)],
        }
        if not np.all(np.isfinite(qs)):
            warnings.append(f"rank {s.rank}: quantiles beyond double range (about 1e308) are null")
        if curve_points:
            x, pdf, cdf = os_.rank_curve(model, bidders, s.rank, curve_points)
            item["curve"] = {"x": finite_list(x), "pdf": finite_list(pdf), "cdf": finite_list(cdf)}
        results.append(item)
    out = {"bidders": bidders, "results": results}
    gap_error = 0.0
    if bidders >= 2:
        gap, gap_error = os_.expected_gap(model, bidders, summaries)
        if gap is None and not any("mean does not exist" in w for w in warnings):
            warnings.append("expected_gap is null: the mean of the highest or second-highest does not exist")
        out["expected_gap"] = finite(gap)
    out["numerics"] = _numerics(summaries, gap_error)
    out["warnings"] = warnings
    out["ranks_counted_from"] = "highest"
    return audit.top_values(out, model)


def _mixed_top_values(model, count, ranks, quantiles, curve_points):
    """The top-values report under an uncertain count: each rank's chance to exist
    (``probability_exists``, P(N >= rank)) and its figures given that it does."""
    from . import mixing

    if ranks is None:
        ranks = [1, 2]
    for i, r in enumerate(ranks):
        if r > count.counts[-1]:
            raise ParameterError(f"ranks.{i}", f"rank {r} exceeds the largest number of bidders ({count.counts[-1]})")
    if curve_points:
        raise ParameterError("curve_points", "curves are drawn for a certain number of bidders; give an integer bidders")
    results, warnings, summaries = [], [], []
    for r in ranks:
        exists, mean, sd, qs, parts = mixing.top_value_figures(model, count, r, quantiles)
        summaries += parts
        for x in parts:
            warnings += [w for w in x.warnings if w not in warnings]
        results.append({"rank": r, "probability_exists": finite(exists), "mean": finite(mean), "sd": finite(sd),
                        "quantiles": [{"p": float(p), "value": finite(q)} for p, q in zip(quantiles, np.asarray(qs, float))]})
    gap, gap_error = mixing.mixed_gap(model, count)
    numerics = _numerics(summaries, gap_error)
    numerics["method"] += "+count_mixture"
    numerics["bidder_counts"] = count.numerics()
    out = {"bidders": count.to_params(), "expected_bidders": finite(count.mean), "results": results,
           "expected_gap": finite(gap), "numerics": numerics, "warnings": warnings, "ranks_counted_from": "highest"}
    if count.entry is not None:
        out["entry_probability"] = finite(count.entry["entry_probability"])
    return audit.top_values(out, model, ordered=False)


def lowest_costs(model, bidders, ranks=None, quantiles=(0.05, 0.25, 0.5, 0.75, 0.95), curve_points=0, monte_carlo=None):
    """The same report for costs, rank k counted from the lowest: the k-th lowest of n costs C
    is the k-th highest of the values X = -C (``models.Reflected``), so each figure is the
    values' report mapped back: means and quantiles negated (cost quantile p is minus the
    value quantile 1 - p), the curve mirrored, the sds and the expected gap unchanged."""
    out = top_values(Reflected(model), bidders, ranks, [1.0 - p for p in quantiles], curve_points, monte_carlo)
    for check in (out.get("monte_carlo") or {}).get("results", {}).values():
        mean = check["mean"]
        mean["estimate"] = -mean["estimate"]
        mean["z"] = None if mean["z"] is None else -mean["z"]
    for item in out["results"]:
        item["mean"] = finite(None if item["mean"] is None else -item["mean"])
        item["quantiles"] = [{"p": float(p), "value": finite(None if q["value"] is None else -q["value"])}
                             for p, q in zip(quantiles, item["quantiles"])]
        if "curve" in item:
            c = item["curve"]
            item["curve"] = {"x": [finite(None if x is None else -x) for x in c["x"][::-1]], "pdf": c["pdf"][::-1],
                             "cdf": [finite(None if y is None else 1.0 - y) for y in c["cdf"][::-1]]}
    out["ranks_counted_from"] = "lowest"
    return out


def _triangle_mass(log_dens, axis):
    """Integral of a density on y <= x from its grid values: the trapezoid rule
    on the cells below the diagonal, and on each diagonal cell the three-vertex
    rule for its lower triangle (the square-cell rule would overstate it by half).
    Taken from the log density times the cell area, which stays finite where the
    density itself passes 1e308 on a grid a few 1e-300 wide."""
    h = axis[1] - axis[0] if len(axis) > 1 else 0.0
    if not h > 0.0:
        return 0.0
    with np.errstate(over="ignore"):  # a density singular at the grid's edge: the rule's mass is inf
        dens = np.exp(log_dens + 2.0 * math.log(h))  # per unit cell area
    c = dens[1:, :-1] + dens[1:, 1:] + dens[:-1, :-1] + dens[:-1, 1:]  # cell corner sums
    below = np.tril(np.ones_like(c, dtype=bool), -1)
    square = 0.25 * float(np.sum(c[below]))
    i = np.arange(len(axis) - 1)
    tri = float(np.sum(dens[i, i] + dens[i + 1, i] + dens[i + 1, i + 1])) / 6.0
    return square + tri


def _overflow_note(dens, warnings):
    if not np.all(np.isfinite(dens)):
        warnings.append("the density passes double range (about 1e308) at some points; it is null there")


def _density_at_points(log_density, points):
    """{"points", "warnings"}: the density at (higher, lower) points, a bounded working set at a
    time, with a budget check per chunk."""
    hx = np.array([p[0] for p in points], float)
    ly = np.array([p[1] for p in points], float)
    d = np.empty(len(hx))
    for start in range(0, len(hx), _CHUNK):
        budget.check()
        part = slice(start, start + _CHUNK)
        with np.errstate(over="ignore"):
            d[part] = np.exp(log_density(hx[part], ly[part]))
    warnings = []
    _overflow_note(d, warnings)
    return {"points": [{"higher": float(a), "lower": float(b), "density": finite(c)} for a, b, c in zip(hx, ly, d)],
            "warnings": warnings}


def _mixed_joint_logdensity(model, live, exists, i, j, x, y):
    """The joint log density of ranks i and j given that both exist: each count's (``live``:
    (n, P(n)) for n >= j, ``exists`` their total), mixed."""
    parts = [math.log(w / exists) + os_.joint_logdensity(model, n, i, j, x, y) for n, w in live]
    return special.logsumexp(np.stack(np.broadcast_arrays(*parts)), axis=0) if len(parts) > 1 else parts[0]


def joint_density(model, bidders, ranks=(1, 2), grid_points=61, points=None):
    """Joint density of two ranks on a grid (with its mass) or at given points."""
    from . import mixing

    count = mixing.resolve(bidders, model)
    bidders = count.to_params()
    i, j = ranks
    if not i < j:
        raise ParameterError("ranks.1", "the second rank must be lower (a larger number) than the first")
    if j > count.counts[-1]:
        raise ParameterError("ranks.1", f"rank {j} exceeds the number of bidders ({count.counts[-1]})")
    live = [(n, w) for n, w in zip(count.counts, count.weights) if n >= j]
    exists = sum(w for _, w in live)
    log_density = functools.partial(_mixed_joint_logdensity, model, live, exists, i, j)
    if model.discrete:
        raise ParameterError("smoothing", "a step (smoothing: none) empirical model has no density; use smoothing: kernel")
    head = {"bidders": bidders, **({} if count.certain else {"probability_exists": finite(exists)}), "ranks": [i, j]}
    if points is not None:
        return audit.joint_density({**head, **_density_at_points(log_density, points)})
    lo = max(float(os_.rank_quantiles(model, live[0][0], j, [5e-4])[0]), model.lower)
    hi = min(float(os_.rank_quantiles(model, live[-1][0], i, [1 - 5e-4])[0]), model.upper)
    if not (math.isfinite(lo) and math.isfinite(hi)):
        raise ParameterError("bidder_values", "the ranks' quantiles pass double range (about 1e308): no grid can hold "
                                              "their density; ask for the density at points instead")
    axis = np.linspace(lo, hi, grid_points)
    budget.check()
    log_dens = log_density(axis[:, None], axis[None, :])
    with np.errstate(over="ignore"):
        dens = np.exp(log_dens)
    mass = _triangle_mass(log_dens, axis)
    warnings = []
    _overflow_note(dens, warnings)
    if not math.isfinite(mass):
        warnings.append("the grid's mass is null: the density is too sharp at a grid point for the rule to weigh it")
    elif abs(mass - 1.0) > 0.05:
        warnings.append(f"the grid holds {mass:.3f} of the probability; the density may be too sharp for {grid_points} grid points")
    return audit.joint_density({
        **head,
        "higher": finite_list(axis),
        "lower": finite_list(axis),
        "density": [finite_list(row) for row in dens],
        "mass": finite(mass),
        "warnings": warnings,
    })
