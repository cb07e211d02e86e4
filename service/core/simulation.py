"""A simulation check on demand: the exact figures re-estimated by drawing auctions.

An independent route: values come from the model's quantile function by inverse transform,
never from the quadratures behind the exact figures (where the quantile function is slow, from
a checked table of it, ``_quantiles``). The highest of n values has cdf F^n,
so with E ~ Exp(1) its -log F is E/n; given it, the second-highest is the highest of n - 1
values below it, -log F = E/n + E'/(n - 1) (the exponential spacings of the order
statistics; David and Nagaraja, Order Statistics, 2003, section 2.5). All-pay, where every
bidder pays, draws every value. A bidder count is drawn from its distribution first. The
bids are the computed equilibrium bids (the thing being checked together with each rule's
payment), read off a fine grid in log s by monotone cubic interpolation.

Each figure's estimate comes with its standard error: the sample sd over sqrt(D) for a mean,
sqrt(p (1 - p) / D) for a probability, and sqrt((m4 - sd^4) / (4 sd^2 D)) for an sd (the
delta method); z = (estimate - exact) / standard error. |z| above 4 happens by chance about
once in 16,000 figures: it is a reason to report a problem.
"""
from __future__ import annotations

import math
import time

import numpy as np
from scipy import interpolate

from . import budget
from . import rules as R

#: How the check draws, as reports name it.
METHOD = "inverse_transform_order_statistic_spacings"
#: Draws handled at once (each chunk ends with a budget check).
CHUNK = 100_000
#: Grid points on which the bids are computed for interpolation.
BID_GRID = 801
#: Values drawn in all for all-pay (every bidder's value): beyond it all-pay is not simulated.
MAX_ALL_PAY_VALUES = 20_000_000


def _counts(bidders, size, rng):
    """Each auction's number of bidders, drawn from the count's distribution."""
    if len(bidders.counts) == 1:
        return np.full(size, bidders.counts[0])
    return rng.choice(np.array(bidders.counts), size=size, p=np.array(bidders.weights) / math.fsum(bidders.weights))


def _values(model, s):
    """Values with -log F = s, from the model's quantile function (inverse transform)."""
    with np.errstate(over="ignore"):
        return model.value_at(np.exp(-s), -np.expm1(-s))


#: Points of a quantile table (``_quantiles``), and the seconds per value above which it is used.
TABLE_POINTS = 4097
SLOW_QUANTILE = 1.5e-7


def _quantiles(model, s):
    """Values with -log F = s for a whole chunk of draws: from the quantile function itself, or,
    where it is slow (the gamma's inverse incomplete gamma, about 0.75 us a value), from a
    monotone cubic table of it in log s over the chunk's range, kept only where it matches the
    quantile function at every midpoint of the table to 1e-10 of the values' range (else the
    quantile function itself, value by value)."""
    s = np.asarray(s, float)
    live = np.isfinite(s) & (s > 0.0)
    if np.count_nonzero(live) < 20 * TABLE_POINTS:
        return _values(model, s)
    lo, hi = float(np.min(s[live])), float(np.max(s[live]))
    grid = np.exp(np.linspace(math.log(lo), math.log(hi), TABLE_POINTS))
    t0 = time.perf_counter()
    at_grid = _values(model, grid)
    if (time.perf_counter() - t0) / TABLE_POINTS < SLOW_QUANTILE or not np.all(np.isfinite(at_grid)):
        return _values(model, s)
    table = interpolate.PchipInterpolator(np.log(grid), at_grid)
    mid = np.sqrt(grid[:-1] * grid[1:])
    spread = float(np.max(at_grid) - np.min(at_grid))
    if not np.max(np.abs(table(np.log(mid)) - _values(model, mid))) <= 1e-10 * spread:
        return _values(model, s)
    out = _values(model, s[~live]) if not live.all() else None
    result = np.empty(s.shape)
    result[live] = table(np.log(s[live]))
    if out is not None:
        result[~live] = out
    return result


class _BidTable:
    """The equilibrium bids b(s) at -log F = s, computed on a grid and read off by monotone
    cubic interpolation in log s; the floor's bid at and below the floor."""

    def __init__(self, bids_at_s, s_lo, s_hi, floor_bid):
        self.s_hi, self.floor_bid = s_hi, floor_bid
        lo, hi = math.log(max(s_lo, 1e-300)), math.log(max(s_hi, 1e-300))
        grid = np.exp(np.linspace(lo, hi, BID_GRID)) if hi > lo else np.array([s_hi])
        b = np.asarray(bids_at_s(grid), float)
        self.lo = grid[0]
        self.fn = interpolate.PchipInterpolator(np.log(grid), b, extrapolate=True) if len(grid) > 1 else (lambda x: b[0])

    def __call__(self, s):
        s = np.asarray(s, float)
        out = np.full(s.shape, self.floor_bid)
        live = s < self.s_hi
        out[live] = self.fn(np.log(np.maximum(s[live], self.lo)))
        return out


class _Tally:
    """Running sums of one figure's draws: its mean, sd and their standard errors at the end."""

    def __init__(self):
        self.n, self.s1, self.s2, self.s3, self.s4 = 0, 0.0, 0.0, 0.0, 0.0
        self.shift = None

    def add(self, x):
        x = np.asarray(x, float)
        if self.shift is None:
            self.shift = float(np.mean(x))  # sums of powers about a first guess keep their digits
        with np.errstate(invalid="ignore", over="ignore"):  # overflowing draws: the figure is null (_entry)
            d = x - self.shift
            self.n += d.size
            self.s1 += float(d.sum())
            d2 = d * d
            self.s2 += float(d2.sum())
            self.s3 += float((d2 * d).sum())
            self.s4 += float((d2 * d2).sum())

    def mean(self):
        m = self.s1 / self.n
        var = max(self.s2 / self.n - m * m, 0.0)
        return self.shift + m, math.sqrt(var / self.n)

    def sd(self):
        n, m = self.n, self.s1 / self.n
        var = max(self.s2 / n - m * m, 0.0)
        m4 = self.s4 / n - 4 * m * self.s3 / n + 6 * m * m * self.s2 / n - 3 * m ** 4
        sd = math.sqrt(var * n / max(n - 1, 1))
        se = math.sqrt(max(m4 - var * var, 0.0) / (4.0 * var * n)) if var > 0 else 0.0
        return sd, se


def _entry(estimate, se, exact):
    """One figure's check; null where the draws' sums left the double range (draws of a tail so
    heavy that a payment is infinite, or their difference undefined)."""
    if not (math.isfinite(estimate) and math.isfinite(se)):
        return {"estimate": None, "standard_error": None, "z": None}
    z = None if exact is None or not se > 0 else (estimate - exact) / se
    return {"estimate": estimate, "standard_error": se, "z": z if z is None or math.isfinite(z) else None}


def revenue_check(auc, rules, draws, seed, exact, sign):
    """{"rule": {figure: {estimate, standard_error, z}}} for each rule: expected revenue, its sd,
    the probability of a sale and the winner's expected surplus, from ``draws`` simulated
    auctions of the forward auction ``auc`` (a ``ForwardAuction`` or ``mixing.MixedAuction``);
    ``exact`` gives each rule's exact figures in the caller's sign (``sign`` -1 for a reverse
    auction, whose payments are the forward revenue's negatives)."""
    rng = np.random.default_rng(seed)
    count = auc.bidders
    model, floor, lone_price, s_r = auc.model, auc.floor, auc.lone_price, auc.s_r
    mixed = not count.certain
    bid_rules = [r for r in rules if not R.get(r).pricing.truthful]
    table, tallies = None, {r: {k: _Tally() for k in ("rev", "win", "sale")} for r in rules}
    for start in range(0, draws, CHUNK):
        budget.check()
        size = min(CHUNK, draws - start)
        n = _counts(count, size, rng)
        nf = n.astype(float)
        with np.errstate(divide="ignore", invalid="ignore"):
            s1 = np.where(n >= 1, rng.standard_exponential(size) / nf, np.inf)
            s2 = np.where(n >= 2, s1 + rng.standard_exponential(size) / (nf - 1.0), np.inf)
        both = _quantiles(model, np.concatenate((s1, s2)))
        x1, x2 = both[:size], both[size:]
        sale = (n >= 1) & (s1 <= s_r) & (x1 >= floor)
        # a lone bidder pays the reserve under every rule when it knows it is alone; under an
        # uncertain count it does not, and bids as anyone else does (the mixed bid)
        lone = n == 1
        lone_bids = lone if count.certain else np.zeros(size, bool)
        if bid_rules and table is None:  # the grid spans the first chunk's draws ten times over at each end
            live = s1[np.isfinite(s1)]
            lo = float(np.min(live)) / 10.0 if live.size else 1e-3
            hi = s_r if math.isfinite(s_r) else (float(np.max(live)) * 10.0 if live.size else 1.0)
            table = _BidTable(auc.bids_at_s if mixed else auc.bids.at_s, min(lo, hi / 2.0), hi, floor)
        b1 = table(s1) if table is not None else None  # the highest value's bid, shared by the bid-priced rules
        for rule in rules:
            pricing = R.get(rule).pricing
            if pricing is R.SECOND:
                price = np.where(lone, lone_price, np.maximum(np.where(np.isfinite(s2), x2, -np.inf), floor))
                paid, win_pay = np.where(sale, price, 0.0), price
            elif pricing is R.FIRST:
                price = np.where(lone_bids, lone_price, b1)
                paid, win_pay = np.where(sale, price, 0.0), price
            else:
                if float(np.sum(n)) * draws / size > MAX_ALL_PAY_VALUES:
                    continue  # not simulated: the note below says so
                paid, win_pay = _all_pay(auc, n, s1, sale, rng, table, b1)
            tallies[rule]["rev"].add(paid)
            tallies[rule]["sale"].add(sale.astype(float))
            tallies[rule]["win"].add(np.where(sale, x1 - win_pay, 0.0))
    return _summaries(rules, tallies, exact, sign)


def _summaries(rules, tallies, exact, sign):
    """({rule: {figure: {estimate, standard_error, z}}}, notes) from each rule's tallies."""
    out, notes = {}, []
    for rule in rules:
        t = tallies[rule]
        if t["rev"].n == 0:
            notes.append(f"{rule}: not simulated (every bidder's value would be drawn for all-pay: more than "
                         f"{MAX_ALL_PAY_VALUES:,} values)")
            continue
        ex = exact.get(rule, {})
        mean, se = t["rev"].mean()
        sd, sd_se = t["rev"].sd()
        p, _ = t["sale"].mean()
        win, win_se = t["win"].mean()
        out[rule] = {
            "expected_revenue": _entry(sign * mean, se, ex.get("expected_revenue")),
            "revenue_sd": _entry(sd, sd_se, ex.get("revenue_sd")),
            "probability_of_sale": _entry(p, math.sqrt(max(p * (1.0 - p), 0.0) / t["sale"].n), ex.get("probability_of_sale")),
            "expected_winner_surplus": _entry(win, win_se, ex.get("expected_winner_surplus")),
        }
    return out, notes


def _all_pay(auc, n, s1, sale, rng, table, b1):
    """(every bidder's all-pay bids summed, the winner's own bid) per auction: given the highest
    value's F = u1, the other n - 1 values are independent with F uniform on (0, u1), so each is
    drawn as -log F = s1 - log U."""
    total = np.zeros(n.shape)

    def pay(s, b=None):  # a(v) = G(F(v)) b(v) at and above the floor, 0 below (a lone bidder's b is the reserve)
        with np.errstate(invalid="ignore"):
            return np.where(s <= auc.s_r, auc.win_chance(s) * (table(s) if b is None else b), 0.0)

    own = np.where(sale, pay(s1, b1), 0.0)
    total += own
    most = int(np.max(n)) if n.size else 0
    for j in range(1, most):  # the other bidders: uniform in F below the highest's
        has = n > j
        s = s1 - np.log(rng.uniform(size=n.shape))
        total += np.where(has, pay(s), 0.0)
    return total, own


def top_values_check(model, bidders, ranks, draws, seed, exact):
    """{"rank_r": {"mean", "sd"}} for ranks 1 and 2 (given that they exist), from ``draws``
    simulated auctions; ``exact`` maps a rank to its exact (mean, sd)."""
    rng = np.random.default_rng(seed)
    tallies = {r: _Tally() for r in ranks if r in (1, 2)}
    for start in range(0, draws, CHUNK):
        budget.check()
        size = min(CHUNK, draws - start)
        n = _counts(bidders, size, rng).astype(float)
        with np.errstate(divide="ignore", invalid="ignore"):
            s1 = np.where(n >= 1, rng.standard_exponential(size) / n, np.inf)
            s2 = np.where(n >= 2, s1 + rng.standard_exponential(size) / (n - 1.0), np.inf)
        for r, t in tallies.items():
            s = s1 if r == 1 else s2
            here = n >= r
            if here.any():
                t.add(_values(model, s[here]))
    out = {}
    for r, t in tallies.items():
        if t.n == 0:
            continue
        mean, se = t.mean()
        sd, sd_se = t.sd()
        want_mean, want_sd = exact.get(r, (None, None))
        out[f"rank_{r}"] = {"mean": _entry(mean, se, want_mean), "sd": _entry(sd, sd_se, want_sd)}
    return out
