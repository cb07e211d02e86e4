"""Charts of the service's answers. Each function draws what one JSON route answered and
returns the figure with the points it plotted (``series``), so that a caller (and the tests)
can hold the picture against the numbers. Nothing here computes a figure of its own.

matplotlib draws off screen (the Agg and SVG canvases, no pyplot state), in DejaVu Sans (it
ships with matplotlib). The palette is this service's own: four hues far apart in lightness as
well as in hue, each with its own line style, so that a grey print or a reader who tells red
from green poorly still tells the lines apart.
"""
from __future__ import annotations

import io
import math
from dataclasses import dataclass, field

import matplotlib
import numpy as np
from matplotlib.colors import LinearSegmentedColormap
from matplotlib.figure import Figure
from matplotlib.ticker import FuncFormatter

# SVG text stays text (small, quick, searchable), named DejaVu Sans with any sans-serif after it
matplotlib.rcParams.update({"svg.hashsalt": "bidstats", "svg.fonttype": "none",
                            "font.family": ["DejaVu Sans", "sans-serif"]})

#: (colour, line style): ink blue, ochre, plum, slate; darkest first.
INKS = (("#1d3f6e", "-"), ("#c98a1b", "--"), ("#8a3d6b", "-."), ("#5f7f83", ":"))
BAND_ALPHA = 0.07
#: The joint density's shades: paper to ochre to plum to ink, darker as the density rises.
SHADES = LinearSegmentedColormap.from_list("bidstats", ["#fbf8f1", "#efd9a6", "#c98a1b", "#8a3d6b", "#1d3f6e"])
GRID = "#d9dde2"
TEXT = "#22262b"
MEDIA = {"svg": "image/svg+xml", "png": "image/png"}
#: Pixels per inch of the drawing: width and height are asked for in pixels.
DPI = 100


@dataclass
class Drawn:
    """A chart: its figure and the points it plotted."""

    figure: Figure
    series: dict = field(default_factory=dict)

    def render(self, fmt):
        """The figure as SVG or PNG bytes."""
        buf = io.BytesIO()
        self.figure.savefig(buf, format=fmt, dpi=DPI, metadata=_metadata(fmt))
        return buf.getvalue()


def _metadata(fmt):
    # no creation date, so that one request draws one file
    return {"Date": None} if fmt == "svg" else {"Software": "bidstats"}


def amount(x, currency=None):
    """A tick label: thousands separated by commas, decimals only where the scale needs them."""
    if not math.isfinite(x):
        return ""
    digits = 0 if abs(x) >= 100 or x == int(x) else (1 if abs(x) >= 10 else 2)
    text = f"{x:,.{digits}f}"
    return f"{text} {currency}" if currency else text


#: Margins in pixels (left, right, top, bottom): room for tick labels, the title, the axis label
#: and the footnote. Fixed margins draw in a fraction of the time a layout engine takes.
MARGINS = (78, 24, 34, 62)


def _canvas(width, height, title, footnote, right=0):
    fig = Figure(figsize=(width / DPI, height / DPI), dpi=DPI)
    fig.patch.set_facecolor("white")
    left, rgt, top, bottom = MARGINS
    ax = fig.add_axes((left / width, bottom / height, 1 - (left + rgt + right) / width, 1 - (top + bottom) / height))
    fig.text(6 / width, 1 - 7 / height, title, fontsize=min(11.0, width / 52), color=TEXT, fontweight="bold",
             ha="left", va="top")
    ax.grid(True, color=GRID, linewidth=0.7)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    ax.tick_params(colors=TEXT, labelsize=8.5)
    if footnote:
        fig.text(6 / width, 5 / height, footnote, fontsize=7, color="#555b62", ha="left", va="bottom", wrap=True)
    return fig, ax


def _money_axis(axis, currency):
    axis.set_major_formatter(FuncFormatter(lambda x, _: amount(x)))
    return f" ({currency})" if currency else ""


def _legend(ax, where="best"):
    if ax.get_legend_handles_labels()[0]:
        ax.legend(frameon=True, framealpha=0.85, edgecolor="none", fontsize=8, labelcolor=TEXT, loc=where)


def top_values(answer, direction, *, width, height, currency=None, footnote=""):
    """The densities of the highest and second-highest value (reverse: the lowest and second
    lowest cost), their means marked. ``answer``: /v1/top-values with curve points."""
    names = ("highest value", "second-highest value") if direction == "forward" else ("lowest cost", "second-lowest cost")
    title = f"Where the {names[0]} and the {names[1]} fall" if len(answer["results"]) > 1 else f"Where the {names[0]} falls"
    fig, ax = _canvas(width, height, title, footnote)
    series = {}
    for (ink, style), res, name in zip(INKS, answer["results"][:2], names):
        x, pdf = res["curve"]["x"], res["curve"]["pdf"]
        ax.plot(x, pdf, color=ink, linestyle=style, linewidth=1.8, label=f"{name}, mean {amount(res['mean'], currency)}")
        ax.axvline(res["mean"], color=ink, linestyle=style, linewidth=0.9, alpha=0.8)
        series[f"rank{res['rank']}"] = {"x": x, "pdf": pdf, "mean": res["mean"]}
    ax.set_xlabel(("value" if direction == "forward" else "cost") + _money_axis(ax.xaxis, currency), color=TEXT)
    ax.set_ylabel("density", color=TEXT)
    ax.set_ylim(bottom=0.0)
    _legend(ax)
    return Drawn(fig, series)


def top_values_cdf(answer, direction, *, width, height, currency=None, footnote=""):
    """The distribution functions of the highest and second-highest value across bidder groups
    (reverse: the lowest costs), from their quantiles, means marked, with each group's chance to
    hold the top rank. ``answer``: /v1/top-values for groups with a grid of quantiles."""
    names = ("highest value", "second-highest value") if direction == "forward" else ("lowest cost", "second-lowest cost")
    fig, ax = _canvas(width, height, f"Where the {names[0]} and the {names[1]} fall, across the groups", footnote)
    series = {}
    for (ink, style), res, name in zip(INKS, answer["results"][:2], names):
        xs, ps = [q["value"] for q in res["quantiles"]], [q["p"] for q in res["quantiles"]]
        held = ", ".join(f"{g['name']} {g['probability']:.0%}" for g in res.get("groups", []))
        ax.plot(xs, ps, color=ink, linestyle=style, linewidth=1.8,
                label=f"{name}, mean {amount(res['mean'], currency)}" + (f" ({held})" if held else ""))
        ax.axvline(res["mean"], color=ink, linestyle=style, linewidth=0.9, alpha=0.8)
        series[f"rank{res['rank']}"] = {"value": xs, "p": ps, "mean": res["mean"]}
    ax.set_xlabel(("value" if direction == "forward" else "cost") + _money_axis(ax.xaxis, currency), color=TEXT)
    ax.set_ylabel("probability at or below", color=TEXT)
    ax.set_ylim(0.0, 1.0)
    _legend(ax, "lower right" if direction == "forward" else "upper left")
    return Drawn(fig, series)


def joint_density(answer, *, width, height, currency=None, footnote=""):
    """Filled contours of the joint density of the top two values. ``answer``: the joint
    density on a grid (/v1/top-values/joint-density)."""
    fig, ax = _canvas(width, height, "The highest and second-highest value together", footnote, right=90)
    hi, lo, dens = answer["higher"], answer["lower"], answer["density"]
    # density[i][j] is at (higher[i], lower[j]): zero where lower > higher, left blank there
    grid = np.ma.masked_less_equal(np.asarray(dens, float).T, 0.0)
    shade = ax.contourf(hi, lo, grid, levels=12, cmap=SHADES)
    key = fig.add_axes((1 - 96 / width, MARGINS[3] / height, 14 / width, 1 - (MARGINS[2] + MARGINS[3]) / height))
    fig.colorbar(shade, cax=key, label="joint density").ax.tick_params(labelsize=8)
    unit = _money_axis(ax.xaxis, currency)
    _money_axis(ax.yaxis, currency)
    ax.set_xlabel("highest value" + unit, color=TEXT)
    ax.set_ylabel("second-highest value" + unit, color=TEXT)
    return Drawn(fig, {"higher": hi, "lower": lo, "density": dens})


def by_axis(points, axis, direction, *, optimum=None, width, height, currency=None, footnote=""):
    """Expected revenue (reverse: payment) against the reserve or the number of bidders, a line
    per rule with a band for the middle 90% of the revenue, the auctioneer's payoff where an own
    value was given, and the optimal reserve marked. ``points``: (x, /v1/revenue answer, payoffs
    by rule or None) at each x."""
    money = "revenue" if direction == "forward" else "payment"
    against = {"reserve": "the reserve" if direction == "forward" else "the maximum price",
               "bidders": "the number of bidders"}[axis]
    fig, ax = _canvas(width, height, f"Expected {money} against {against}", footnote)
    xs = [p[0] for p in points]
    series = {"x": xs, "rules": {}}
    rules = [r["rule"] for r in points[0][1]["results"]]
    for k, ((ink, style), rule) in enumerate(zip(INKS * 2, rules)):
        res = [p[1]["results"][k] for p in points]
        mean = [math.nan if r[f"expected_{money}"] is None else r[f"expected_{money}"] for r in res]
        q = [{e["p"]: e["value"] for e in r.get(f"{money}_quantiles") or []} for r in res]
        low, high = [e.get(0.05) for e in q], [e.get(0.95) for e in q]
        label = rule.replace("_", " ")
        ax.plot(xs, mean, color=ink, linestyle=style, linewidth=1.8, label=f"{label}: expected {money}")
        if all(v is not None for v in low + high):
            ax.fill_between(xs, low, high, color=ink, alpha=BAND_ALPHA, linewidth=0, label=f"{label}: middle 90%")
            for edge in (low, high):
                ax.plot(xs, edge, color=ink, linestyle=style, linewidth=0.6, alpha=0.7)
        entry = {"mean": mean, "p05": low, "p95": high}
        payoff = [p[2].get(rule) if p[2] is not None else None for p in points]
        if all(v is not None for v in payoff):
            ax.plot(xs, payoff, color=ink, linestyle=style, linewidth=1.0, marker="o", markersize=2.5,
                    label=f"{label}: auctioneer's payoff")
            entry["payoff"] = payoff
        series["rules"][rule] = entry
    if optimum is not None:
        ax.axvline(optimum, color=TEXT, linewidth=0.9, linestyle=(0, (1, 2)))
        ax.annotate(f"optimal {'reserve' if direction == 'forward' else 'maximum price'} {amount(optimum, currency)}",
                    (optimum, 1.0), xycoords=("data", "axes fraction"), fontsize=8, color=TEXT,
                    xytext=(3, -10), textcoords="offset points")
        series["optimum"] = optimum
    if axis == "reserve":
        ax.set_xlabel(against + _money_axis(ax.xaxis, currency), color=TEXT)
    else:
        ax.set_xlabel("bidders", color=TEXT)
        ax.xaxis.get_major_locator().set_params(integer=True)
    ax.set_ylabel(f"expected {money}" + _money_axis(ax.yaxis, currency), color=TEXT)
    _legend(ax)
    return Drawn(fig, series)


def bid_strategy(answers, direction, *, width, height, currency=None, footnote=""):
    """Bid against value (reverse: against cost) for each rule asked (and each group, for bidder
    groups), beside the value itself. ``answers``: /v1/bid-strategy answers, one per rule."""
    own = "value" if direction == "forward" else "cost"
    key = "values" if direction == "forward" else "costs"
    fig, ax = _canvas(width, height, f"Equilibrium bid against the bidder's {own}", footnote)
    lines = []  # (label, series key, x, bids)
    for ans in answers:
        rule = ans["rule"].replace("_", " ")
        if "groups" in ans:
            for g in ans["groups"]:
                label = g["name"] if len(answers) == 1 else f"{g['name']}, {rule}"
                lines.append((label, f"{ans['rule']}/{g['name']}", g[key], g["bids"]))
        else:
            lines.append((rule, ans["rule"], ans[key], ans["bids"]))
    ends = [min(min(x) for _, _, x, _ in lines), max(max(x) for _, _, x, _ in lines)]
    ax.plot(ends, ends, color="#9aa1a8", linewidth=0.9, label=f"bid = {own}")
    series = {}
    for (ink, style), (label, name, x, bids) in zip(INKS * 3, lines):
        ax.plot(x, [math.nan if b is None else b for b in bids], color=ink, linestyle=style, linewidth=1.8, label=label)
        series[name] = {key: x, "bids": bids}
    unit = _money_axis(ax.xaxis, currency)
    _money_axis(ax.yaxis, currency)
    ax.set_xlabel(own + unit, color=TEXT)
    ax.set_ylabel("bid" + unit, color=TEXT)
    _legend(ax)
    return Drawn(fig, series)


def fit(observed, models, direction, selected, *, of="prices", width, height, currency=None, footnote=""):
    """Past prices' (or bids') empirical distribution against each fitted model's distribution of
    them. ``models``: (name, AIC or None, quantiles [{p, value}] of what is observed)."""
    fig, ax = _canvas(width, height, f"Past {of} against what the fitted models imply", footnote)
    k = len(observed)
    ax.step(observed, [(i + 1) / k for i in range(k)], where="post", color=TEXT, linewidth=1.4, label=f"past {of.split(' (')[0]} ({k})")
    series = {"observed": observed, "of": of, "models": {}}
    for (ink, style), (family, aic, quantiles) in zip(INKS, models):
        xs, ps = [q["value"] for q in quantiles], [q["p"] for q in quantiles]
        mark = " (selected)" if family == selected else ""
        ax.plot(xs, ps, color=ink, linestyle=style, linewidth=1.8,
                label=f"{family}{mark}" + ("" if aic is None else f", AIC {aic:,.1f}"))
        series["models"][family] = {"value": xs, "p": ps, "aic": aic}
    what = "price" if of == "prices" else "bid"
    ax.set_xlabel((what if direction == "forward" else f"{what} (reverse)") + _money_axis(ax.xaxis, currency), color=TEXT)
    ax.set_ylabel(f"share of {'auctions' if what == 'price' else 'bids'} at or below", color=TEXT)
    ax.set_ylim(0.0, 1.0)
    _legend(ax, "lower right")
    return Drawn(fig, series)


def message(text, fmt, *, width=480, height=120):
    """A small picture that says ``text``: what an image caller gets for a refused request."""
    fig = Figure(figsize=(width / DPI, height / DPI), dpi=DPI)
    fig.patch.set_facecolor("#fff7e6")
    fig.text(0.03, 0.5, text, fontsize=9, color="#5a2a00", ha="left", va="center", wrap=True)
    return Drawn(fig, {"error": text}).render(fmt)
