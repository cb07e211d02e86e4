"""bidstats benchmarks: speed and accuracy of the order-statistics core, the
cost of a whole in-process request, and HTTP throughput under load next to the
trivial endpoint (a real gunicorn driven by wrk on loopback, when wrk is installed). Run with `make bench` (or
`.venv/bin/python bench/run.py [section ...]`; `--list` names the sections).

This is a benchmark, not a test: it asserts nothing and only prints plain-text
tables. Every section is a function ``section_xxx(ctx)`` registered in SECTIONS;
``ctx`` is a dict in which sections leave measurements for later ones (the
scaling line reads the timings of the second-highest table, for instance). To
add a section, write a function and append it to SECTIONS.

Timings are medians over repeated batches (timeit, garbage collector off during
a batch). Reference calls (scipy) are capped: a call that runs past its cap is
stopped by a timer signal and reported as such, so the run never hangs.
"""
from __future__ import annotations

import contextlib
import datetime
import functools
import io
import json
import math
import os
import platform
import signal
import shutil
import statistics
import subprocess
import sys
import tarfile
import tempfile
import time
import timeit
import warnings
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

import mpmath as mp  # noqa: E402
import numpy as np  # noqa: E402
import scipy  # noqa: E402
import scipy.stats as st  # noqa: E402
from scipy import integrate  # noqa: E402
from scipy import special as sp  # noqa: E402

from service import create_app  # noqa: E402
from service.core import topvalues  # noqa: E402
from service.core.models import LogNormal  # noqa: E402
from service.core.orderstats import rank_summary  # noqa: E402

SIGMA = 0.5
BIDDER_COUNTS = [2, 10, 100, 1000, 10**4, 10**5, 10**6]
REFERENCE_CAP_S = 3.0  # the longest one scipy reference call may run
REFERENCE_DIGITS = 30


# --------------------------------------------------------------------------
# Timing helpers
# --------------------------------------------------------------------------
def median_time(fn, *, batch_s=0.02, repeats=15, max_total_s=1.0):
    """Median seconds per call of fn(): repeated timeit batches of ~batch_s each."""
    timer = timeit.Timer(fn)
    t1 = timer.timeit(1)  # also a warm-up call
    number = max(1, int(batch_s / max(t1, 1e-9)))
    repeats = max(3, min(repeats, int(max_total_s / max(t1 * number, 1e-9))))
    return statistics.median(t / number for t in timer.repeat(repeat=repeats, number=number))


def interleaved_medians(fns, *, batch_s=0.02, rounds=15):
    """Median seconds per call of each fn, timing their batches in turn.

    Alternating the batches exposes every fn to the same background load, so
    ratios between them stay meaningful on a busy machine.
    """
    timers = [timeit.Timer(fn) for fn in fns]
    numbers = [max(1, int(batch_s / max(t.timeit(1), 1e-9))) for t in timers]
    samples = [[] for _ in fns]
    for _ in range(rounds):
        for t, k, out in zip(timers, numbers, samples):
            out.append(t.timeit(k) / k)
    return [statistics.median(x) for x in samples]


class _Stopped(Exception):
    pass


def _on_alarm(signum, frame):
    raise _Stopped


def capped(fn, cap_s=REFERENCE_CAP_S):
    """Run fn() once under a time cap, then time it if it was quick enough.

    Returns (value, seconds per call, note); value and seconds are None when
    the call failed or was stopped, and note says why. Warnings raised by the
    first call are summarised in the note.
    """
    old = signal.signal(signal.SIGALRM, _on_alarm)
    try:
        signal.setitimer(signal.ITIMER_REAL, cap_s)
        t0 = time.perf_counter()
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            value = fn()
        t1 = time.perf_counter() - t0
        signal.setitimer(signal.ITIMER_REAL, 0)
        note = ""
        if caught:
            kinds = sorted({w.category.__name__ for w in caught})
            note = "warned: " + ", ".join(kinds)
        # Repeat for a stable median, within a budget proportional to the cap.
        signal.setitimer(signal.ITIMER_REAL, 4 * cap_s)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            seconds = median_time(fn, max_total_s=min(1.0, 2 * cap_s)) if t1 < cap_s / 4 else t1
        signal.setitimer(signal.ITIMER_REAL, 0)
        return value, seconds, note
    except _Stopped:
        return None, None, f"stopped after {cap_s:g} s"
    except Exception as e:  # a reference that fails is reported, not fatal
        signal.setitimer(signal.ITIMER_REAL, 0)
        return None, None, f"failed: {type(e).__name__}: {str(e)[:60]}"
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, old)


# --------------------------------------------------------------------------
# Formatting helpers
# --------------------------------------------------------------------------
def fmt_time(s):
    if s is None:
        return "-"
    if s < 1e-3:
        return f"{s * 1e6:.0f} us"
    if s < 1.0:
        return f"{s * 1e3:.2f} ms"
    return f"{s:.2f} s"


def fmt_err(e):
    return "-" if e is None else f"{e:.1e}"


def fmt_ratio(a, b):
    return "-" if a is None or b is None or b == 0 else f"{a / b:.1f}x"


def fmt_n(n):
    return str(n) if n <= 1000 else f"10^{round(math.log10(n))}"


def table(headers, rows):
    """Plain-text table: right-aligned columns, the first left-aligned."""
    cells = [list(map(str, headers))] + [[str(c) for c in r] for r in rows]
    widths = [max(len(r[i]) for r in cells) for i in range(len(headers))]

    def line(r):
        return "  ".join(c.ljust(w) if i == 0 else c.rjust(w) for i, (c, w) in enumerate(zip(r, widths)))

    out = [line(cells[0]), "  ".join("-" * w for w in widths)]
    out += [line(r) for r in cells[1:]]
    return "\n".join(out)


def heading(title):
    print()
    print(title)
    print("=" * len(title))


# --------------------------------------------------------------------------
# mpmath reference: E[second-highest of n] for the lognormal, 30 digits
# --------------------------------------------------------------------------
def _upper_normal_quantile(p, digits):
    """z with P(Z > z) = p (p <= 1/2), by Newton on log P(Z > z) in mpmath."""
    pf = float(p)
    if pf > 1e-300:
        z = mp.mpf(-float(sp.ndtri(pf)))
    else:  # first terms of the tail asymptotics, as a start below float range
        big = -mp.log(p)
        z = mp.sqrt(2 * big - mp.log(4 * mp.pi * big))
    logp = mp.log(p)
    tol = mp.mpf(10) ** (-digits)
    for _ in range(60):
        sf = mp.erfc(z / mp.sqrt(2)) / 2
        step = (mp.log(sf) - logp) * sf / mp.npdf(z)
        z += step
        if abs(step) < tol * (1 + abs(z)):
            break
    return z


@functools.lru_cache(maxsize=None)  # in memory only, for this run
def reference_second_highest(n, sigma=SIGMA, digits=REFERENCE_DIGITS):
    """E[X_(n-1:n)] = int_0^1 Q(u) n(n-1) u^(n-2) (1-u) du, U ~ Beta(n-1, 2).

    Substituting u = exp(-w/n) puts the mass near w ~ 1 whatever n is:
    the integral becomes int_0^inf Q(e^(-w/n)) (n-1) e^(-w(n-1)/n) (1 - e^(-w/n)) dw.
    Q(u) = exp(sigma z) for the median-1 lognormal, with z found from whichever of
    u or 1-u is small, so the upper tail (w -> 0) keeps every digit. tanh-sinh
    quadrature on a graded split of w; returns (value, mpmath's error estimate).
    """
    with mp.workdps(digits + 15):
        nn, s = mp.mpf(n), mp.mpf(sigma)

        def integrand(w):
            if w == 0:
                return mp.zero
            u, v = mp.exp(-w / nn), -mp.expm1(-w / nn)
            z = _upper_normal_quantile(v, digits + 10) if v <= 0.5 else -_upper_normal_quantile(u, digits + 10)
            return mp.exp(s * z) * (nn - 1) * mp.exp(-w * (nn - 1) / nn) * v

        split = [0, "1e-8", "1e-4", "0.01", "0.1", "0.5", 1, 2, 4, 8, 16, 32, 64, 128, 256]
        value, err = mp.quad(integrand, [mp.mpf(p) for p in split] + [mp.inf], error=True)
        return value, err


def rel_error(x, n):
    if x is None or not math.isfinite(x):
        return None
    ref, _ = reference_second_highest(n)
    with mp.workdps(REFERENCE_DIGITS):
        return float(abs(mp.mpf(x) - ref) / ref)


# --------------------------------------------------------------------------
# Sections
# --------------------------------------------------------------------------
@contextlib.contextmanager
def quiet_access_log():
    """The app's JSON access line goes to whatever sys.stderr is at the time: inside
    this block, /dev/null. The in-process requests of a section still build and write
    their line, as in service, without printing a thousand of them into the report."""
    with open(os.devnull, "w") as sink, contextlib.redirect_stderr(sink):
        yield


def _nproc():
    try:
        return subprocess.run(["nproc"], capture_output=True, text=True, check=True).stdout.strip()
    except (OSError, subprocess.CalledProcessError):
        return str(len(os.sched_getaffinity(0)))


def section_header(ctx):
    now = datetime.datetime.now().astimezone().strftime("%Y-%m-%d %H:%M:%S %Z")
    print(
        f"bidstats benchmark  {now}  nproc={_nproc()}  python={platform.python_version()}"
        f"  numpy={np.__version__}  scipy={scipy.__version__}  mpmath={mp.__version__}"
    )


def section_second_highest(ctx):
    heading(f"E[second-highest], lognormal sigma {SIGMA}")
    print(f"ours:   rank_summary(LogNormal(median=1, sigma={SIGMA}), n, 2), model built once")
    print("quad:   scipy.integrate.quad(x * n(n-1) F^(n-2) (1-F) f, 0, inf, limit=200), x-space,")
    print(f"        F, f from st.lognorm({SIGMA}) frozen once, default tolerances (no points: quad takes them only on finite ranges)")
    print(f"ostat:  st.order_statistic(X, r=n-1, n=n).mean(), X = st.make_distribution(st.lognorm)(s={SIGMA}) built once")
    print(f"rel.err against an mpmath quantile-space integral at {REFERENCE_DIGITS} digits; each reference call capped at {REFERENCE_CAP_S:g} s")
    print("ratio = reference time / our time")
    print()

    model = LogNormal(median=1.0, sigma=SIGMA)
    frozen = st.lognorm(SIGMA)
    LN = st.make_distribution(st.lognorm)(s=SIGMA)

    rows, notes, ours_time, ours_mean, ref_err = [], [], {}, {}, {}
    for n in BIDDER_COUNTS:
        ref, est = reference_second_highest(n)
        ref_err[n] = float(abs(est / ref))

        ours = rank_summary(model, n, 2)
        t_ours = median_time(lambda: rank_summary(model, n, 2))
        ours_time[n], ours_mean[n] = t_ours, ours.mean

        def textbook(x, n=n):
            F = frozen.cdf(x)
            return x * n * (n - 1) * F ** (n - 2) * (1 - F) * frozen.pdf(x)

        q_val, q_time, q_note = capped(lambda: integrate.quad(textbook, 0, np.inf, limit=200)[0])
        o_val, o_time, o_note = capped(lambda: st.order_statistic(LN, r=n - 1, n=n).mean())
        for name, note in (("quad", q_note), ("ostat", o_note)):
            if note:
                notes.append(f"n={fmt_n(n)} {name}: {note}")
        rows.append([
            fmt_n(n),
            fmt_time(t_ours), fmt_err(rel_error(ours.mean, n)),
            fmt_time(q_time) if q_time else q_note, fmt_err(rel_error(q_val, n)), fmt_ratio(q_time, t_ours),
            fmt_time(o_time) if o_time else o_note, fmt_err(rel_error(o_val, n)), fmt_ratio(o_time, t_ours),
        ])
    print(table(["n", "ours", "ours rel.err", "quad", "quad rel.err", "quad/ours",
                 "ostat", "ostat rel.err", "ostat/ours"], rows))
    for line in notes:
        print("note: " + line)
    ctx["second_highest_time"] = ours_time
    ctx["quad_ratio_min"] = min((float(r[5][:-1]) for r in rows if r[5].endswith("x")), default=None)
    ctx["ostat_ratio_min"] = min((float(r[8][:-1]) for r in rows if r[8].endswith("x")), default=None)
    ctx["ours_err_max"] = max(rel_error(ours_mean[n], n) for n in BIDDER_COUNTS)

    # Checks of the reference itself (reported, not asserted).
    print()
    with mp.workdps(REFERENCE_DIGITS + 10):
        s = mp.mpf(SIGMA)
        closed = 2 * mp.exp(s * s / 2) * mp.ncdf(-s / mp.sqrt(2))
        ref2, _ = reference_second_highest(2)
        closed_diff = float(abs(ref2 - closed) / closed)
    print(f"reference check, n=2: E[min of 2] = 2 exp(sigma^2/2) Phi(-sigma/sqrt 2) (derived from memory);"
          f" relative difference from the mpmath integral {closed_diff:.1e}")
    small = [n for n in BIDDER_COUNTS if n <= 100]
    worst = max(rel_error(ours_mean[n], n) for n in small)
    print(f"reference check, n <= 100: largest relative difference from our value {worst:.1e} (expected ~1e-12 or smaller)")
    print(f"reference check: largest mpmath quadrature error estimate (relative) {max(ref_err.values()):.1e}")


def section_scaling(ctx):
    """Our time at n = 10^6 against n = 10, timed in alternating batches."""
    model = LogNormal(median=1.0, sigma=SIGMA)
    t10, t6 = interleaved_medians([lambda: rank_summary(model, 10, 2), lambda: rank_summary(model, 10**6, 2)])
    print()
    ctx["scaling"] = t6 / t10
    print(f"cost in n: our time at n=10^6 {fmt_time(t6)} / at n=10 {fmt_time(t10)} = {t6 / t10:.2f}x"
          " (target: within 2x; the two timed in alternating batches)")
    table_times = ctx.get("second_highest_time")
    if table_times:
        print(f"           from the table above: {table_times[10**6] / table_times[10]:.2f}x")


def section_request(ctx):
    heading("whole in-process request")
    print("POST /v1/top-values through app.test_client() (load, compute, dump), body")
    print(f'{{"bidder_values": {{"family": "lognormal", "median": 1.0, "sigma": {SIGMA}}}, "bidders": n, "ranks": [2]}};')
    print("baseline: GET /healthz through the same client; core = topvalues.top_values() alone on a built model")
    print("(the endpoint also computes rank 1 for expected_gap, and the default quantiles);")
    print("the three timed in alternating batches")
    print()
    app = create_app()
    client = app.test_client()
    model = LogNormal(median=1.0, sigma=SIGMA)
    rows, notes = [], []
    for n in (10, 10**6):
        body = {"bidder_values": {"family": "lognormal", "median": 1.0, "sigma": SIGMA}, "bidders": n, "ranks": [2]}
        resp = client.post("/v1/top-values", json=body)
        if resp.status_code != 200:
            notes.append(f"n={fmt_n(n)}: status {resp.status_code}: {resp.get_data(as_text=True)[:120]}")
        t_post, t_health, t_core = interleaved_medians([
            lambda: client.post("/v1/top-values", json=body),
            lambda: client.get("/healthz"),
            lambda: topvalues.top_values(model, n, ranks=[2]),
        ])
        ctx["request_max"] = max(ctx.get("request_max", 0.0), t_post)
        ctx["request_health"] = t_health
        rows.append([fmt_n(n), fmt_time(t_post), fmt_time(t_health), fmt_ratio(t_post, t_health),
                     fmt_time(t_post - t_health), fmt_time(t_core),
                     "yes" if t_post <= 1e-3 else "no"])
    print(table(["n", "POST", "GET /healthz", "POST/GET", "POST - GET", "core", "POST <= 1 ms"], rows))
    for line in notes:
        print("note: " + line)
    print("target: the whole request within 1 ms")


# --------------------------------------------------------------------------
# Auction revenue: the five rules against a naive nested-quad first-price
# --------------------------------------------------------------------------
def naive_first_price(dist, n, r):
    """Nested scipy.integrate.quad, the textbook way: the bid
    b(v) = v - int_r^v F^(n-1) dx / F(v)^(n-1), then int_r^hi b(v) n F^(n-1) f dv."""
    lo, hi = dist.support()

    def bid(v):
        inner = integrate.quad(lambda x: dist.cdf(x) ** (n - 1), r, v)[0]
        return v - inner / dist.cdf(v) ** (n - 1)

    def outer(v):
        return bid(v) * n * dist.cdf(v) ** (n - 1) * dist.pdf(v)

    return integrate.quad(outer, r, hi, limit=200)[0]


def krishna_uniform(n, r):
    """Uniform [0, 1]: (n-1)/(n+1) + r^n - 2n r^(n+1)/(n+1) (Krishna, Auction Theory, 2nd ed., 2009, ch. 2)."""
    return (n - 1) / (n + 1) + r**n - 2 * n * r ** (n + 1) / (n + 1)


def section_revenue(ctx):
    from service.core import reports
    from service.core.models import Gamma, Uniform

    heading("Expected revenue, all five rules (POST /v1/revenue core compute)")
    print("ours:   reports.revenue_report(...) with all five rules, each rule by its own route, model built once")
    print("naive:  nested scipy.integrate.quad for the first-price bid function and revenue (one rule only)")
    print("rel.err: uniform against Krishna's closed form; other families: ours (first-price) against naive,")
    print("         and 'equiv' = revenue_equivalence / revenue (the five routes' largest disagreement)")
    print()
    cases = [
        ("uniform[0,1]", Uniform(0, 1), st.uniform(0, 1), 0.3),
        ("lognormal s=0.35", LogNormal(median=62000, sigma=0.35), st.lognorm(0.35, scale=62000), 45000.0),
        ("gamma k=30", Gamma(30, 5200), st.gamma(30, scale=5200), 140000.0),
    ]
    rows = []
    for name, model, dist, r in cases:
        for n in (2, 10, 100, 1000):
            rep = reports.revenue_report(model, "forward", n, r, 0.0)
            ours = rep["results"][0]["expected_revenue"]
            t_ours = median_time(lambda: reports.revenue_report(model, "forward", n, r, 0.0), repeats=7)
            nv, t_nv, note = capped(lambda: naive_first_price(dist, n, r))
            if name.startswith("uniform"):
                ref = krishna_uniform(n, r)
                err_ours, err_nv = abs(ours / ref - 1), (None if nv is None else abs(nv / ref - 1))
            else:
                err_ours, err_nv = None, (None if nv is None else abs(nv / ours - 1))
            ctx["revenue_max"] = max(ctx.get("revenue_max", 0.0), t_ours)
            if t_nv:
                ctx["revenue_naive_ratio_min"] = min(ctx.get("revenue_naive_ratio_min", math.inf), t_nv / t_ours)
            ctx["equiv_max"] = max(ctx.get("equiv_max", 0.0), rep["revenue_equivalence"] / abs(ours))
            rows.append([f"{name} n={n}", fmt_time(t_ours), fmt_err(err_ours),
                         fmt_err(rep["revenue_equivalence"] / abs(ours)),
                         fmt_time(t_nv) if t_nv else note, fmt_err(err_nv), fmt_ratio(t_nv, t_ours)])
    print(table(["case", "ours (5 rules)", "ours rel.err", "equiv", "naive (first-price)", "naive rel.err", "naive/ours"], rows))
    print("target: at most 5 ms of core compute for all five rules with a parametric family")


def section_sweeps(ctx):
    from service.core import reports, sweeps
    from service.core.models import Gamma

    heading("Sweeps: 100 bidder counts x 100 reserves x 2 rules (20,000 rows)")
    print("ours:   sweeps.sweep(...) core, one vectorised pass per bidder count; HTTP: POST /v1/sweeps in-process, JSON out")
    print("cells:  the same rows one at a time through reports.revenue_report (the single-scenario route),")
    print("        timed on a 200-row sample and scaled to 20,000; agreement = largest relative difference on that sample")
    print()
    app = create_app()
    client = app.test_client()
    rows = []
    for name, model, body_model, lo, hi in (
        ("lognormal s=0.35", LogNormal(median=62000, sigma=0.35), {"family": "lognormal", "median": 62000, "sigma": 0.35}, 20000.0, 90000.0),
        ("gamma k=30", Gamma(30, 5200), {"family": "gamma", "shape": 30, "scale": 5200}, 100000.0, 200000.0),
    ):
        bidders, reserves = list(range(2, 102)), np.linspace(lo, hi, 100)
        rules, metrics = ["first_price", "second_price"], ["expected_revenue", "revenue_sd", "probability_of_sale"]
        t_core = median_time(lambda: sweeps.sweep(model, "forward", bidders, reserves, rules, metrics), repeats=3, max_total_s=10.0)
        body = {"bidder_values": body_model, "bidders": {"from": 2, "to": 101}, "reserves": {"from": lo, "to": hi, "steps": 100},
                "rules": rules, "metrics": metrics}
        t_http = median_time(lambda: client.post("/v1/sweeps", json=body), repeats=3, max_total_s=10.0)
        swept = sweeps.sweep(model, "forward", bidders, reserves, rules, metrics)
        sample = swept["rows"][::100]
        t0 = time.perf_counter()
        worst = 0.0
        for n, r, rule, rev, sd, ps in sample:
            ref = reports.revenue_report(model, "forward", n, r, 0.0, [rule], [0.5])["results"][0]
            for got, want in ((rev, ref["expected_revenue"]), (sd, ref["revenue_sd"]), (ps, ref["probability_of_sale"])):
                if want:
                    worst = max(worst, abs(got - want) / abs(want))
        t_cells = (time.perf_counter() - t0) / len(sample) * len(swept["rows"])
        ctx["sweep_max"] = max(ctx.get("sweep_max", 0.0), t_http)
        ctx["sweep_cells_ratio_min"] = min(ctx.get("sweep_cells_ratio_min", math.inf), t_cells / t_core)
        rows.append([name, fmt_time(t_core), fmt_time(t_http), fmt_time(t_cells), fmt_ratio(t_cells, t_core), fmt_err(worst)])
    print(table(["model", "ours (core)", "ours (HTTP)", "cell by cell", "cells/ours", "agreement"], rows))
    print("target: well under 1 s for the 20,000 rows")


# --------------------------------------------------------------------------
# Expensive requests: each against the previous core, run in a subprocess
# --------------------------------------------------------------------------
# The core before the work on expensive requests (git revision; BENCH_BASELINE
# overrides, "none" skips the comparison), and how long it may run per request.
BASELINE = os.environ.get("BENCH_BASELINE", "5cd6ddc")
BASELINE_CAP_S = 20.0
# Runs one request in a fresh interpreter on the service package found first on
# PYTHONPATH, after the same request on a lognormal model (not timed); with tables off,
# mixtures and kernel densities use their exact sums only.
_SUBPROCESS_SCRIPT = """
import contextlib, json, os, sys, time
path, body, tables = json.loads(sys.stdin.read())
if not tables:
    from service.core import models
    models._Tabulated.tabulate = False
from service import create_app
client = create_app().test_client()
with open(os.devnull, "w") as sink, contextlib.redirect_stderr(sink):
    # A light request first, so that the modules it loads on first use are not timed.
    client.post(path, json={**body, next(k for k in body if k.startswith("bidder_")):
                            {"family": "lognormal", "median": 1.0, "sigma": 0.5}})
    t = time.perf_counter()
    r = client.post(path, json=body)
print(json.dumps({"seconds": time.perf_counter() - t, "status": r.status_code, "body": r.get_json()}))
"""
ROOT = Path(__file__).resolve().parents[1]


def _stress_specs():
    """(mixture_spec, nested_spec): the expensive-model tests' invented stress mixtures
    (tests/test_expensive_models.py), one definition for both."""
    sys.path.insert(0, str(ROOT / "tests"))
    from test_expensive_models import mixture_spec, nested_spec

    return mixture_spec, nested_spec


def _normal_pair(mean_low, mean_high, sd=5.0):
    return {"family": "mixture", "components": [{"weight": 0.5, "model": {"family": "normal", "mean": m, "sd": sd}}
                                               for m in (mean_low, mean_high)]}


def _kernel_values(n):
    sample = np.round(np.random.default_rng(7).lognormal(math.log(62000.0), 0.35, n), 2).tolist()  # invented
    return {"family": "empirical", "sample": sample, "smoothing": "kernel"}


def expensive_cases():
    """(label, path, body, also with tables off): the requests that ran into the time budget before."""
    mixture_spec, nested_spec = _stress_specs()
    nested = nested_spec(50, 50)
    return [
        ("irregular reserve: normals at 100 and 140, 7 bidders", "/v1/reserve-price",
         {"bidder_values": _normal_pair(100.0, 140.0), "bidders": 7}, False),
        ("irregular reserve: normals at 100 and 183.6, seller 105.7", "/v1/reserve-price",
         {"bidder_values": _normal_pair(100.0, 183.6), "bidders": 7, "seller_value": 105.7}, False),
        ("kernel model of 1,000 values, 10 bidders, revenue", "/v1/revenue", {"bidder_values": _kernel_values(1000), "bidders": 10}, False),
        ("kernel model of 10,000 values, 10 bidders, revenue", "/v1/revenue", {"bidder_values": _kernel_values(10000), "bidders": 10}, True),
        ("kernel model of 1,000 values, 10 bidders, top values", "/v1/top-values", {"bidder_values": _kernel_values(1000), "bidders": 10}, False),
        ("kernel model of 10,000 values, 10 bidders, top values", "/v1/top-values", {"bidder_values": _kernel_values(10000), "bidders": 10}, True),
        ("50-component mixture, 6 bidders, revenue", "/v1/revenue", {"bidder_values": mixture_spec(50), "bidders": 6}, True),
        ("50-component mixture, 10 bidders, revenue", "/v1/revenue", {"bidder_values": mixture_spec(50), "bidders": 10}, False),
        ("50 x 50 nested mixture, 6 bidders, revenue", "/v1/revenue", {"bidder_values": nested, "bidders": 6}, True),
        ("50 x 50 nested mixture, sweep of 10 counts x 11 reserves", "/v1/sweeps",
         {"bidder_values": nested, "bidders": {"from": 2, "to": 11}, "reserves": {"from": 30000, "to": 80000, "steps": 11}}, False),
        ("50 x 50 nested mixture, bids at 2,001 points", "/v1/bid-strategy",
         {"bidder_values": nested, "bidders": 6, "points": 2001}, False),
    ]


def _figures(path, body):
    """The numbers of an answer, for the agreement of two cores."""
    if path == "/v1/reserve-price":
        return [body["expected_payoff_at_optimum"]]
    if path == "/v1/revenue":
        return [r["expected_revenue"] for r in body["results"]]
    if path == "/v1/top-values":
        return [r[k] for r in body["results"] for k in ("mean", "sd") if isinstance(r.get(k), float)]
    if path == "/v1/bid-strategy":
        return [b for b in body["bids"] if b is not None]
    return [c for row in body["rows"] for c in row[3:] if isinstance(c, float)]


def _baseline_tree(tmp):
    """The previous core's service package, from git, in tmp; None where git or the
    revision is not at hand (a container image, a shallow clone)."""
    if BASELINE == "none":
        return None
    try:
        tar = subprocess.run(["git", "-C", str(ROOT), "archive", "--format=tar", BASELINE, "service"],
                             capture_output=True, check=True).stdout
    except (OSError, subprocess.CalledProcessError):
        return None
    with tarfile.open(fileobj=io.BytesIO(tar)) as archive:
        archive.extractall(tmp)
    return tmp


def _run_apart(tree, path, body, tables=True):
    """(seconds, answer) of the request on the core in ``tree``, in a fresh subprocess,
    or (None, note) past the cap."""
    env = {**os.environ, "PYTHONPATH": str(tree), "PYTHONDONTWRITEBYTECODE": "1",
           "BIDSTATS_MAX_SECONDS": str(int(BASELINE_CAP_S * 10))}
    try:
        done = subprocess.run([sys.executable, "-c", _SUBPROCESS_SCRIPT], input=json.dumps([path, body, tables]), text=True,
                              capture_output=True, env=env, cwd=str(tree), timeout=BASELINE_CAP_S + 10.0)
        out = json.loads(done.stdout.strip().splitlines()[-1])
    except subprocess.TimeoutExpired:
        return None, f"stopped after {BASELINE_CAP_S:g} s"
    except (ValueError, IndexError):
        return None, "failed: " + (done.stderr.strip().splitlines() or ["no output"])[-1][:40]
    if out["seconds"] > BASELINE_CAP_S:
        return None, f"over {BASELINE_CAP_S:g} s ({out['seconds']:.0f} s)"
    return out["seconds"], out["body"] if out["status"] == 200 else None


def _agreement(path, ours, answer):
    if answer is None:
        return "-"
    got, want = _figures(path, ours), _figures(path, answer)
    if len(got) != len(want):
        return "differ"
    return fmt_err(max(abs(g - w) / max(abs(w), 1e-300) for g, w in zip(got, want)))


def _versus(seconds, note, ours):
    """The time column and the ratio column of a reference run."""
    if seconds is not None:
        return fmt_time(seconds), fmt_ratio(seconds, ours)
    stopped = note.startswith(("stopped", "over"))
    return note, (f"> {BASELINE_CAP_S / ours:.0f}x" if stopped else "-")


def section_expensive(ctx):
    heading("Expensive requests: irregular reserve, kernel models, large and nested mixtures")
    print("ours:       the request in-process through app.test_client(), median of 3 (each builds its model anew)")
    print(f"previous:   the same request on the core at git revision {BASELINE} (before this work), in a fresh")
    print(f"            subprocess, once, stopped after {BASELINE_CAP_S:g} s")
    print("tables off: the same request on this core with the log F / log S tables off (exact sums only),")
    print("            likewise, for the kernel and mixture requests marked; agreement = largest relative")
    print("            difference of the answers' numbers from ours")
    print()
    client = create_app().test_client()
    rows, ours_all = [], {}
    with tempfile.TemporaryDirectory() as tmp:
        tree = _baseline_tree(tmp)
        for label, path, body, tables_off in expensive_cases():
            resp = client.post(path, json=body)
            ours = statistics.median(timeit.repeat(lambda: client.post(path, json=body), number=1, repeat=3))
            ours_all[label] = ours
            mine = resp.get_json() if resp.status_code == 200 else None
            before, answer = _run_apart(tree, path, body) if tree else (None, "not run")
            row = [label, str(resp.status_code), fmt_time(ours), *_versus(before, answer, ours),
                   _agreement(path, mine, answer) if before and mine else "-"]
            if before:
                ctx["expensive_ratio_min"] = min(ctx.get("expensive_ratio_min", math.inf), before / ours)
            if tables_off:
                plain, answer = _run_apart(ROOT, path, body, tables=False)
                row += [*_versus(plain, answer, ours), _agreement(path, mine, answer) if plain and mine else "-"]
                ctx["tables_ratio_min"] = min(ctx.get("tables_ratio_min", math.inf), (plain or BASELINE_CAP_S) / ours)
            else:
                row += ["", "", ""]
            rows.append(row)
    print(table(["request", "status", "ours", "previous", "previous/ours", "agreement",
                 "tables off", "off/ours", "agreement"], rows))
    if tree is None:
        print(f"note: the previous core (git revision {BASELINE}) is not at hand, so it was not run")
    ctx["expensive_max"] = max(ours_all.values())
    for kind in ("revenue", "top values"):
        small, large = (ours_all[f"kernel model of {n} values, 10 bidders, {kind}"] for n in ("1,000", "10,000"))
        ctx[f"kernel_scaling_{kind}"] = large / small
        print(f"kernel model, {kind}: our time at 10,000 values / at 1,000 = {large / small:.2f}x "
              "(a cost linear in the sample would be 10x)")


def section_http(ctx):
    """Requests per second under wrk, each shape next to GET /healthz of the same gunicorn,
    by the load test's own measurement (loadtest/harness.py)."""
    heading("HTTP throughput under load: POST /v1/revenue next to GET /healthz")
    root = Path(__file__).resolve().parents[1]
    if shutil.which("wrk") is None:
        print("wrk is not installed (`make loadtest` installs it with apt-get): section skipped")
        return
    sys.path.insert(0, str(root / "loadtest"))
    import harness

    with tempfile.TemporaryDirectory() as tmp:
        g = harness.Gunicorn(log_path=Path(tmp) / "gunicorn.log", workers=2)
        try:
            g.start()
            results, lines = harness.measure_throughput(g.url, lambda url, **kw: harness.Wrk(Path(tmp), url, **kw))
        finally:
            g.stop()
    print("\n".join(lines))
    base = results["healthz"].rps
    ctx["http_ratios"] = {name: r.rps / base for name, r in results.items() if name in harness.THROUGHPUT_TARGETS}
    ctx["http_targets"] = harness.THROUGHPUT_TARGETS
    ctx["http_errors"] = sum(r.non2xx + r.socket_errors for r in results.values())


# --------------------------------------------------------------------------
# Estimation from past auctions (/v1/fits)
# --------------------------------------------------------------------------
def _price_records(dist, counts, rng):
    out = []
    for n in counts:
        v = np.sort(dist.rvs(size=int(n), random_state=rng))
        out.append({"bidders": int(n), "price": float(v[-2])})
    return out


def _naive_family_fits(prices):
    """What a user without the inversion does: scipy.stats' own fit of each family to the prices as if they were values."""
    for dist in (st.uniform, st.norm, st.lognorm, st.expon, st.gamma, st.weibull_min, st.beta, st.pareto, st.powerlaw):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            dist.fit(prices)


def _naive_bootstrap(auctions, reps, rng):
    """The bootstrap refitting each resample from scratch (Nelder-Mead from the family's start)."""
    from service.core.fits import mle, records
    from service.core.fits.likelihood import price_log_likelihood
    for _ in range(reps):
        sample = [auctions[i] for i in rng.integers(0, len(auctions), len(auctions))]
        rec = records.records("second_price", "forward", sample)
        mle.fit_family("lognormal", rec.observed, lambda m: price_log_likelihood(m, rec), 1.0)


def _naive_gpv(bids_by_n):
    """Pseudo-values with scipy's gaussian_kde evaluated at every bid (no reflection at the ends)."""
    for n, b in bids_by_n.items():
        g = st.gaussian_kde(b)(b)
        G = np.searchsorted(np.sort(b), b, side="right") / len(b)
        _ = b + G / ((n - 1) * g)


def _naive_bid_loglik(dist, bids_by_n):
    """The first-price bids' log-likelihood the direct way: per bid, brentq on a bid function
    b(v) = v - int F^(n-1) / F^(n-1)(v) whose integral is scipy.integrate.quad, then
    log F(v) - log(n - 1) - log(v - b)."""
    from scipy import integrate, optimize

    total = 0.0
    for n, bids in bids_by_n.items():
        def bid(v, n=n):
            return v - integrate.quad(lambda t: dist.cdf(t) ** (n - 1), 0.0, v)[0] / dist.cdf(v) ** (n - 1)
        for b in bids:
            v = optimize.brentq(lambda x: bid(x) - b, b * (1.0 + 1e-12), dist.isf(1e-12))
            total += dist.logcdf(v) - math.log(n - 1.0) - math.log(v - b)
    return total


def _bid_ml_rows(rng):
    """First-price maximum likelihood: one evaluation of the bids' likelihood against the direct
    way (``_naive_bid_loglik``), and a whole lognormal fit of 1,000 bids."""
    from service.core import models as M
    from service.core.auction import ForwardAuction
    from service.core.fits.likelihood import bid_log_likelihood
    from service.core.fits.records import records
    from service.core.fits.report import fit_report

    model = M.PARAMETRIC["lognormal"](median=62000.0, sigma=0.35)
    auctions = []
    for n in rng.integers(3, 7, 250):
        u = rng.random(int(n))
        auctions.append({"bidders": int(n), "bids": ForwardAuction(model, int(n)).bids.at_s(-np.log(u)).tolist()})
    few = auctions[:6]
    rec = records("first_price", "forward", few)
    t_eval = median_time(lambda: bid_log_likelihood(model, rec), repeats=5, max_total_s=2)
    by_n = {n: b for (n, _), (b, _) in rec.by_group.items()}
    _, t_naive, _ = capped(lambda: _naive_bid_loglik(st.lognorm(0.35, scale=62000.0), by_n))
    t_fit = median_time(lambda: fit_report("first_price", "forward", auctions, families=["lognormal"], nonparametric=False,
                                           confidence={"replications": 0}), repeats=3, max_total_s=10)
    bids = sum(len(a["bids"]) for a in auctions)
    return [[f"first-price bids' log-likelihood, {len(rec.observed)} bids, one evaluation", fmt_time(t_eval), fmt_time(t_naive),
             "-" if t_naive is None else f"{t_naive / t_eval:.0f}x", "none set"],
            [f"first-price lognormal fit by maximum likelihood, {bids:,} bids", fmt_time(t_fit), "-", "-", "none set"]]


def section_fits(ctx):
    from service.core.fits.report import fit_report

    heading("Estimation from past auctions (POST /v1/fits core compute)")
    print("ours:   service.core.fits.report.fit_report; naive: scipy.stats fit per family on the prices as if values,")
    print("        gaussian_kde pseudo-values, a bootstrap that refits every resample from scratch, and the bids'")
    print("        likelihood with brentq on a quad bid function per bid")
    rng = np.random.default_rng(7)
    prices = _price_records(st.lognorm(0.35, scale=62000), rng.integers(2, 9, 1000), rng)
    t_fit = median_time(lambda: fit_report("second_price", "forward", prices, confidence={"replications": 0}), repeats=3, max_total_s=10)
    raw = np.array([a["price"] for a in prices])
    t_naive_fit = median_time(lambda: _naive_family_fits(raw), repeats=3, max_total_s=10)
    bids, by_n = [], {}
    for n in rng.integers(2, 7, 1250):
        v = rng.random(int(n)) * 100.0
        b = [float((n - 1) * x / n) for x in v]
        bids.append({"bidders": int(n), "bids": b})
        by_n.setdefault(int(n), []).extend(b)
    count = sum(len(a["bids"]) for a in bids)
    t_gpv = median_time(lambda: fit_report("first_price", "forward", bids, confidence={"replications": 0}), repeats=5, max_total_s=5)
    t_naive_gpv = median_time(lambda: _naive_gpv({n: np.array(b) for n, b in by_n.items()}), repeats=3, max_total_s=10)
    small = prices[:500]
    t0 = time.perf_counter()
    fit_report("second_price", "forward", small, families=["lognormal"], confidence={"replications": 200})
    t_boot = time.perf_counter() - t0
    t0 = time.perf_counter()
    _naive_bootstrap(small, 200, np.random.default_rng(1))
    t_naive_boot = time.perf_counter() - t0
    rows = [["parametric fit, 1,000 prices, 9 families", fmt_time(t_fit), fmt_time(t_naive_fit), f"{t_naive_fit / t_fit:.1f}x", "<= 1 s"],
            [f"first-price pseudo-values, {count:,} bids", fmt_time(t_gpv), fmt_time(t_naive_gpv), f"{t_naive_gpv / t_gpv:.1f}x", "<= 0.3 s"],
            ["200 bootstrap replications, 500 auctions (+ 99 fit-check refits)", fmt_time(t_boot), fmt_time(t_naive_boot),
             f"{t_naive_boot / t_boot:.1f}x", "<= 10 s"]] + _bid_ml_rows(rng)
    print(table(["case", "ours", "naive", "naive/ours", "target"], rows))
    print("The naive parametric fit is timed for reference only: it fits the wrong distribution (prices are the")
    print("second-highest value, not a value). Ours fits the order statistic, with a fit check for each family.")
    ctx["fits"] = {"fit": t_fit, "gpv": t_gpv, "boot": t_boot, "gpv_bids": count}


def _group_summary_rows(get, row):
    """The bidder-groups section's lines of the summary (none when it did not run)."""
    if get("groups_missing") is None:
        return []
    out = []
    if get("groups_service_max") is not None:
        out.append(row("first price, bidder groups: the service's slowest answered case", fmt_time(get("groups_service_max")),
                       "<= 50 ms", get("groups_service_max") <= 0.05))
    if get("groups_ratio_min") is not None:
        out.append(row("first price, bidder groups: shooting time / service (least)", f"{get('groups_ratio_min'):.1f}x",
                       ">= 20x", get("groups_ratio_min") >= 20))
    missing, total = get("groups_missing")
    out.append(row("first price, bidder groups: cases the service did not answer", f"{missing} of {total}", "(reported)", None))
    return out


def section_summary(ctx):
    """Every headline figure of this run in one table, against its target."""
    heading("Summary of this run")

    def row(what, value, target, ok):
        return [what, value, target, "-" if ok is None else ("met" if ok else "MISSED")]

    def get(key):
        return ctx.get(key)

    rows = []
    if get("quad_ratio_min") is not None:
        rows.append(row("E[second-highest]: quad time / ours (worst n)", f"{get('quad_ratio_min'):.1f}x", ">= 50x", get("quad_ratio_min") >= 50))
        rows.append(row("E[second-highest]: order_statistic time / ours (worst n)", f"{get('ostat_ratio_min'):.1f}x", "(reported)", None))
        rows.append(row("E[second-highest]: our largest relative error", f"{get('ours_err_max'):.1e}", "<= 1e-10", get("ours_err_max") <= 1e-10))
    if get("scaling") is not None:
        rows.append(row("our time at n = 10^6 / at n = 10", f"{get('scaling'):.2f}x", "<= 2x", get("scaling") <= 2))
    if get("request_max") is not None:
        rows.append(row("whole in-process POST /v1/top-values (worst n)", fmt_time(get("request_max")), "<= 1 ms", get("request_max") <= 1e-3))
    if get("revenue_max") is not None:
        rows.append(row("/v1/revenue core, five rules (worst case)", fmt_time(get("revenue_max")), "<= 5 ms", get("revenue_max") <= 5e-3))
        rows.append(row("naive nested quad / ours (worst finished case)", f"{get('revenue_naive_ratio_min'):.1f}x", "(reported)", None))
        rows.append(row("revenue equivalence across routes (relative)", f"{get('equiv_max'):.1e}", "<= 1e-8", get("equiv_max") <= 1e-8))
    if get("sweep_max") is not None:
        rows.append(row("sweep of 20,000 rows through HTTP (worst model)", fmt_time(get("sweep_max")), "< 1 s", get("sweep_max") < 1.0))
        rows.append(row("cell-by-cell time / sweep time (worst model)", f"{get('sweep_cells_ratio_min'):.1f}x", "(reported)", None))
    if get("expensive_max") is not None:
        rows.append(row("expensive requests: our slowest, in-process", fmt_time(get("expensive_max")), "< 4 s", get("expensive_max") < 4.0))
        if get("expensive_ratio_min") is not None:
            rows.append(row("expensive requests: previous core / ours (least, finished)", f"{get('expensive_ratio_min'):.1f}x", "(reported)", None))
        if get("tables_ratio_min") is not None:
            rows.append(row("expensive requests: tables off / on (least)", f"{get('tables_ratio_min'):.1f}x", "> 1x", get("tables_ratio_min") > 1.0))
        for kind in ("revenue", "top values"):
            ratio = get(f"kernel_scaling_{kind}")
            rows.append(row(f"kernel model, {kind}: time at 10,000 values / at 1,000", f"{ratio:.2f}x", "< 10x", ratio < 10))
    if get("fits") is not None:
        f = get("fits")
        rows.append(row("fits: parametric fit of 1,000 prices, 9 families", fmt_time(f["fit"]), "<= 1 s", f["fit"] <= 1.0))
        rows.append(row(f"fits: first-price pseudo-values of {f['gpv_bids']:,} bids", fmt_time(f["gpv"]), "<= 0.3 s", f["gpv"] <= 0.3))
        rows.append(row("fits: 200 bootstrap replications of 500 auctions", fmt_time(f["boot"]), "<= 10 s", f["boot"] <= 10.0))
    if get("simulation_max") is not None:
        rows.append(row("simulation check, 10^6 draws, two rules (worst model)", fmt_time(get("simulation_max")), "<= 1 s",
                        get("simulation_max") <= 1.0))
    if get("counts_ratio") is not None:
        rows.append(row("Poisson count (mean 8) / fixed count of 8, five rules (worst model)", f"{get('counts_ratio'):.1f}x", "<= 4x",
                        get("counts_ratio") <= 4.0))
    rows += _group_summary_rows(get, row)
    if get("charts_max") is not None:
        rows.append(row("charts: the slowest GET at 720 x 450", fmt_time(get("charts_max")), "<= 150 ms", get("charts_max") <= 0.15))
    if get("http_ratios") is not None:
        for name, ratio in get("http_ratios").items():
            target = get("http_targets")[name]
            rows.append(row(f"HTTP {name} revenue req/s / GET /healthz req/s", f"{ratio:.2f}", f">= {target:.2f}", ratio >= target))
        rows.append(row("HTTP answers under load that were errors", f"{get('http_errors')}", "0", get("http_errors") == 0))
    print(table(["figure", "this run", "target", ""], rows))


def naive_mixed_first_price(dist, count, r):
    """The mixture the textbook way, nested scipy.integrate.quad: G(v) = sum_k pi_k F^k, the bid
    b(v) = v - int_r^v G dx / G(v), then int_r^hi b(v) H'(F(v)) f(v) dv, H'(u) = E[N u^(N-1)]."""
    lo, hi = dist.support()
    pis = count.rival_weights

    def G(x):
        return sum(p * dist.cdf(x) ** k for k, p in pis.items())

    def bid(v):
        return v - integrate.quad(G, r, v)[0] / G(v)

    def outer(v):
        u = dist.cdf(v)
        return bid(v) * sum(w * n * u ** (n - 1) for n, w in zip(count.counts, count.weights) if n >= 1) * dist.pdf(v)

    return integrate.quad(outer, r, hi, limit=200)[0]


def section_counts(ctx):
    from service.core import reports
    from service.core.bidders import Bidders
    from service.core.models import Gamma, Uniform

    heading("An uncertain number of bidders: Poisson (mean 8) against a fixed 8 (POST /v1/revenue core compute)")
    print("fixed:  reports.revenue_report(model, 'forward', 8, r), all five rules")
    print("poisson: the same with Bidders.poisson(8.0) (counts 0 to 41 kept, tails below 5e-17), all five rules")
    print("naive:  nested scipy.integrate.quad for the mixed first-price bid and revenue (one rule only)")
    print("rel.err: first-price revenue, ours against naive; ratio = poisson time / fixed time")
    print()
    cases = [("uniform[0,1]", Uniform(0, 1), st.uniform(0, 1), 0.3),
             ("lognormal s=0.35", LogNormal(median=62000, sigma=0.35), st.lognorm(0.35, scale=62000), 45000.0),
             ("gamma k=30", Gamma(30, 5200), st.gamma(30, scale=5200), 140000.0)]
    count = Bidders.poisson(8.0)
    rows, worst = [], 0.0
    for name, model, dist, r in cases:
        t_fixed, t_mixed = interleaved_medians([lambda: reports.revenue_report(model, "forward", 8, r, 0.0),
                                                lambda: reports.revenue_report(model, "forward", count, r, 0.0)], rounds=7)
        ours = reports.revenue_report(model, "forward", count, r, 0.0)["results"][0]["expected_revenue"]
        nv, t_nv, note = capped(lambda: naive_mixed_first_price(dist, count, r))
        worst = max(worst, t_mixed / t_fixed)
        rows.append([name, fmt_time(t_fixed), fmt_time(t_mixed), f"{t_mixed / t_fixed:.1f}x",
                     fmt_time(t_nv) if t_nv else note, fmt_err(None if nv is None else abs(nv / ours - 1)), fmt_ratio(t_nv, t_mixed)])
    print(table(["case", "fixed 8", "poisson 8", "poisson/fixed", "naive (first-price)", "rel.err", "naive/poisson"], rows))
    print("target: a Poisson count (mean 8) at most 4 times a fixed count of 8")
    ctx["counts_ratio"] = worst


def naive_second_price_simulation(model, n, draws, seed):
    """The simulation most people write: every value by the quantile function, sorted per auction,
    the second-highest paid (second price only)."""
    rng = np.random.default_rng(seed)
    out = 0.0
    for start in range(0, draws, 100_000):
        size = min(100_000, draws - start)
        x = np.sort(model.ppf(rng.uniform(size=(size, n))), axis=1)
        out += float(x[:, -2].sum())
    return out / draws


def section_simulation(ctx):
    from service.core import reports
    from service.core.models import Gamma, Uniform

    heading("Simulation check: 10^6 draws (POST /v1/revenue with monte_carlo), 8 bidders")
    print("ours:   the check alone (the report with monte_carlo less the report without), two rules (first and second price)")
    print("        and all five; values by inverse transform, the top two through order-statistic spacings")
    print("naive:  every value by ppf, sorted per auction, the second-highest averaged (second price only)")
    print("target: 10^6 draws within 1 s (here: two rules)")
    print()
    rows, worst = [], 0.0
    for name, model in [("uniform[0,1]", Uniform(0, 1)), ("lognormal s=0.35", LogNormal(median=62000, sigma=0.35)),
                        ("gamma k=30", Gamma(30, 5200))]:
        base = median_time(lambda: reports.revenue_report(model, "forward", 8, None, 0.0, rules=["first_price", "second_price"]),
                           repeats=5)
        t0 = time.perf_counter()
        rep = reports.revenue_report(model, "forward", 8, None, 0.0, rules=["first_price", "second_price"],
                                     monte_carlo={"draws": 1_000_000, "seed": 1})
        t_two = time.perf_counter() - t0 - base
        t0 = time.perf_counter()
        reports.revenue_report(model, "forward", 8, None, 0.0, monte_carlo={"draws": 1_000_000, "seed": 1})
        t_all = time.perf_counter() - t0
        t0 = time.perf_counter()
        naive = naive_second_price_simulation(model, 8, 1_000_000, 1)
        t_naive = time.perf_counter() - t0
        zs = [abs(e["z"]) for block in rep["monte_carlo"]["results"].values() for e in block.values() if e["z"] is not None]
        exact = rep["results"][1]["expected_revenue"]
        worst = max(worst, t_two)
        rows.append([name, fmt_time(t_two), fmt_time(t_all), f"{max(zs):.2f}", fmt_time(t_naive), fmt_err(abs(naive / exact - 1)),
                     fmt_ratio(t_naive, t_two)])
    print(table(["case", "ours, 2 rules", "ours, 5 rules (with report)", "largest |z|", "naive (second price)",
                 "naive rel.err", "naive/ours"], rows))
    ctx["simulation_max"] = worst


def section_risk_aversion(ctx):
    from service.core import reports
    from service.core.models import Uniform

    heading("Risk-averse bidders (CRRA 0.4): five-rule report against risk-neutral, and the closed form")
    print("ours:   reports.revenue_report(..., risk_aversion=0.4), four rules (all-pay is not offered under risk aversion)")
    print("ref:    uniform values: first-price revenue n (n-1) / ((n+1)(n-1+alpha)), alpha = 0.6 (Krishna 2009, ch. 4)")
    print()
    rows = []
    model = Uniform(0, 1)
    for n in (2, 8, 100):
        t_rn, t_ra = interleaved_medians([lambda: reports.revenue_report(model, "forward", n, None, 0.0),
                                          lambda: reports.revenue_report(model, "forward", n, None, 0.0, risk_aversion=0.4)],
                                         rounds=7)
        got = reports.revenue_report(model, "forward", n, None, 0.0, risk_aversion=0.4)["results"][0]["expected_revenue"]
        ref = n * (n - 1) / ((n + 1) * (n - 1 + 0.6))
        rows.append([f"uniform n={n}", fmt_time(t_rn), fmt_time(t_ra), f"{t_ra / t_rn:.2f}x", fmt_err(abs(got / ref - 1))])
    print(table(["case", "risk-neutral (5 rules)", "CRRA 0.4 (4 rules)", "ratio", "first-price rel.err"], rows))


# --------------------------------------------------------------------------
# Bidder groups under first price: backward shooting as the reference
# --------------------------------------------------------------------------
GROUPS_TARGET = 1e-7  # relative accuracy of the revenue the shooting is run to
GROUPS_SHOOT_CAP_S = 8.0  # the longest one shooting run may take
GROUPS_RTOL = 1e-10  # solve_ivp tolerance of each shot


def gls_two_uniform_revenue(w1, w2, digits=REFERENCE_DIGITS):
    """First-price revenue of two bidders, values uniform on [0, w1] and [0, w2], w1 < w2, in mpmath.

    Inverse bids phi_1(b) = 2b / (1 + k b^2), phi_2(b) = 2b / (1 - k b^2), k = 1/w1^2 - 1/w2^2, top bid
    w1 w2 / (w1 + w2) (Griesmer, Levitan and Shubik, "Toward a study of bidding processes, part IV: games
    with unknown costs", 1967; Krishna, Auction Theory, 2nd ed., 2009, ch. 4.3). The winning bid is below
    b with chance H(b) = phi_1(b) phi_2(b) / (w1 w2), so the revenue is top - int_0^top H(b) db.
    """
    with mp.workdps(digits):
        w1, w2 = mp.mpf(w1), mp.mpf(w2)
        k = 1 / w1**2 - 1 / w2**2
        top = w1 * w2 / (w1 + w2)
        return top - mp.quad(lambda b: (2 * b / (1 + k * b * b)) * (2 * b / (1 - k * b * b)) / (w1 * w2), [0, top])


def shoot_first_price(counts, tops, exponents, *, entry=False, target=GROUPS_TARGET, rtol=GROUPS_RTOL):
    """First-price revenue of groups of bidders by backward shooting with bisection on the top bid.

    Group i has n_i bidders with values on [0, w_i], F_i(v) = (v / w_i)^a_i (a_i = 1: uniform), N = sum n_i.
    The inverse bids solve, from phi_i(top) = w_i down to phi_i(0) = 0,
        phi_i'(b) = (F_i / f_i)(phi_i) [ (1/(N - 1)) sum_k n_k / (phi_k - b) - 1 / (phi_i - b) ]
    (Marshall, Meurer, Richard and Stromquist, "Numerical analysis of asymmetric first price auctions",
    1994; Krishna, Auction Theory, 2nd ed., 2009, ch. 4.3), with F_i / f_i = phi_i / a_i. The top bid is
    unknown: a guess is integrated downwards (solve_ivp, LSODA), and the trajectory tells which way it
    missed (Fibich and Gavish, "Numerical simulations of asymmetric first-price auctions", 2011, on the
    backward-shooting method and its instability):
      too high: a markdown phi_i - b reaches 0 above the floor (here: below 1e-3 b), an inverse bid leaves
                its values' top, the integrator gives up as a markdown collapses, or some phi_i' < 0 at the
                top (the group would bid less at higher values; possible from three bidders on);
      too low:  the floor is reached with the inverse bids still away from 0 (here: a markdown above 1e3 b).
    The revenue is top - int_0^top H(b) db, H = prod_k F_k(phi_k)^n_k the chance that the winning bid is
    below b, integrated along the last too-high shot down to where it failed, b_e; below b_e the integral
    lies in [0, b_e H(b_e)] and half of that is taken. Bisection stops when two successive too-high
    shots agree on the revenue to ``target`` and that tail is below it.

    ``entry``: let a group stop bidding below the top bid, as the equilibrium must where the common top
    is impossible. Above its entry bid a group takes no part (F_i = 1 in H, and it leaves the sums, N
    becoming the active count); the first-order conditions of the active groups then give the rate
    sum_k n_k phi_k' / (F_k / f_k)(phi_k) = S(b) = (1/(N_A - 1)) sum_{k active} n_k / (phi_k - b), so a
    group with top value w_i gains by bidding b as long as (w_i - b) S(b) > 1: it enters, downwards, where
    (w_i - b) S(b) = 1, and at the top only the groups with 1 / (w_i - top) <= S(top) bid (derived here
    from the same first-order conditions, Krishna 2009, ch. 4.3).

    Returns a dict: revenue (None when no revenue was found), top_bid, estimate (relative), shots, why
    (a failure or a shortfall, else ""), entries ({group index: the bid where it starts bidding}).
    """
    n, w, a = (np.asarray(v, float) for v in (counts, tops, exponents))
    G = len(n)
    order = np.argsort(-w, kind="stable")

    def active_at(top):
        if not entry:
            return list(range(G))
        act = [int(order[0])]
        for i in order[1:]:
            na = n[act].sum()
            if na < 2 or (w[i] > top and 1.0 / (w[i] - top) <= (n[act] / (w[act] - top)).sum() / (na - 1.0)):
                act.append(int(i))
            else:
                break
        return sorted(act)

    def H(y):
        return float(np.prod(np.clip(y[:G] / w, 0.0, 1.0) ** (a * n)))

    def system(act):
        idx = np.array(act)
        na, nsum = n[idx], n[idx].sum()

        def rate(b, y):
            return (na / (y[idx] - b)).sum() / (nsum - 1.0)

        def rhs(b, y):
            d = y[idx] - b
            dy = np.zeros(G + 1)
            dy[idx] = y[idx] / a[idx] * ((na / d).sum() / (nsum - 1.0) - 1.0 / d)
            dy[G] = -H(y)
            return dy

        return idx, rate, rhs

    def shot(top):
        """('low' | 'high', b where it stopped, state there, entries, group whose phi' < 0 at the top)."""
        act, b, y, entries = active_at(top), top, np.append(w, 0.0), {}
        idx, rate, rhs = system(act)
        falls = [i for i in act if rhs(top, y)[i] < 0.0]
        if falls:
            return "high", top, None, entries, falls[0]
        while True:
            idx, rate, rhs = system(act)
            waiting = [i for i in range(G) if i not in act]

            def markdown(t, yy, idx=idx):
                return float(np.min(yy[idx] - t)) - 1e-3 * t

            def over(t, yy, idx=idx):
                return float(np.min(w[idx] - yy[idx])) + 1e-12 * float(w.max())

            def stays(t, yy, idx=idx):
                return float(np.max(yy[idx] - t)) - 1e3 * t

            events = [markdown, over, stays]
            for i in waiting:
                events.append(lambda t, yy, i=i, rate=rate: (w[i] - t) * rate(t, yy) - 1.0)
            for ev in events:
                ev.terminal = True
            sol = integrate.solve_ivp(rhs, (b, 1e-12 * top), y, method="LSODA", rtol=rtol, atol=1e-15, events=events)
            b, y = float(sol.t[-1]), sol.y[:, -1].copy()
            if sol.status == 0 or len(sol.t_events[2]):
                return "low", b, y, entries, None
            joined = [i for j, i in enumerate(waiting) if len(sol.t_events[3 + j])]
            if sol.status == 1 and joined and not (len(sol.t_events[0]) or len(sol.t_events[1])):
                act = sorted(act + joined)
                entries.update({i: b for i in joined})
                continue
            return "high", b, y, entries, None

    lo = 0.0
    hi = float(np.sort(np.repeat(w, n.astype(int)))[-2]) if entry else float(w.min())
    best, prev, shots, falls, est = None, None, 0, None, math.inf
    while shots < 200:
        top = 0.5 * (lo + hi)
        if not lo < top < hi:
            break
        kind, b_end, y_end, entries, fell = shot(top)
        shots += 1
        if kind == "low":
            lo = top
            continue
        hi = top
        if y_end is None:
            falls = fell
            continue
        tail = b_end * H(y_end)
        revenue = top - y_end[G] - 0.5 * tail
        if prev is not None:
            est = max(abs(revenue - prev), tail) / abs(revenue)
        prev = revenue
        best = {"revenue": revenue, "top_bid": top, "estimate": est, "entries": entries}
        if est <= target:
            return {**best, "shots": shots, "why": ""}
    if best is None:
        if falls is not None:
            anywhere = hi <= 1e-9 * float(w.max())
            where = "at every top bid" if anywhere else f"above a top bid of {hi:.4g}"
            why = f"no common top bid: {where} group {falls + 1} would bid less at higher values"
            why += "" if anywhere else "; below it, no trajectory reaches the floor"
        else:
            why = "no trajectory reached the floor"
        return {"revenue": None, "top_bid": None, "estimate": None, "entries": {}, "shots": shots, "why": why}
    return {**best, "shots": shots, "why": f"stalled at an estimated {best['estimate']:.0e}"}


def _service_first_price(groups, cap_s):
    """(report or None, seconds of the one call, note): the call under the service's own request budget."""
    from service.core import budget, groups as core_groups
    from service.core.errors import ParameterError

    t0 = time.perf_counter()
    try:
        with budget.within(cap_s):
            rep = core_groups.group_report(groups, "forward", rules=["first_price"])
        return rep, time.perf_counter() - t0, ""
    except budget.BudgetSpent:
        return None, None, f"not converged in its {cap_s:g} s budget"
    except ParameterError as e:
        if e.field == "bidder_groups":
            return None, None, f"not converged ({time.perf_counter() - t0:.1f} s)"
        return None, None, f"refused ({e.field})"


# (case, [(count, top of the values, exponent a: F = (v / top)^a, 1 = uniform)])
GROUP_CASES = [
    ("2 groups, tops 1, 2", [(1, 1.0, 1.0), (1, 2.0, 1.0)]),
    ("2 groups, tops 1, 1.3", [(1, 1.0, 1.0), (1, 1.3, 1.0)]),
    ("3 groups, tops 1, 1.1, 1.25", [(1, 1.0, 1.0), (1, 1.1, 1.0), (1, 1.25, 1.0)]),
    ("3 groups, tops 1, 1.5, 2", [(1, 1.0, 1.0), (1, 1.5, 1.0), (1, 2.0, 1.0)]),
    ("4 groups, counts 2,1,1,1, tops 1, 1.2, 1.6, 2", [(2, 1.0, 1.0), (1, 1.2, 1.0), (1, 1.6, 1.0), (1, 2.0, 1.0)]),
    ("2 groups, 1 at top 1, 2 at top 2", [(1, 1.0, 1.0), (2, 2.0, 1.0)]),
    ("uniform top 1, power a=2 top 1.5", [(1, 1.0, 1.0), (1, 1.5, 2.0)]),
]


def section_groups(ctx):
    from service.core.groups import Group, group_report
    from service.core.models import Power, Uniform
    from service.settings import CAPS

    budget_s = CAPS.seconds
    heading("First price with bidder groups that differ: the service against backward shooting")
    print("service:  groups.group_report(groups, 'forward', rules=['first_price']), median; each case first called once")
    print(f"          under the service's own request budget (BIDSTATS_MAX_SECONDS, {budget_s:g} s here)")
    print("shooting: bisection on the common top bid, each guess integrated down to the floor (solve_ivp LSODA,")
    print(f"          rtol {GROUPS_RTOL:g}); too high when a markdown phi - b reaches 0 above the floor or an inverse bid falls")
    print("          at the top, too low when the inverse bids stay above 0 at the floor; run until two successive")
    print(f"          revenues agree to {GROUPS_TARGET:g} (relative), stopped after {GROUPS_SHOOT_CAP_S:g} s")
    print("rel.err:  two uniform bidders against the closed form (Griesmer, Levitan and Shubik 1967) in mpmath, 30 digits;")
    print("          elsewhere the shooting's disagreement with the service")
    print()
    cases = GROUP_CASES
    rows, notes, answered, ratios, missing = [], [], [], [], 0
    for name, spec in cases:
        counts, tops, expos = zip(*spec)
        groups = [Group(f"group {i + 1}", c, Uniform(0.0, t) if e == 1.0 else Power(exponent=e, high=t))
                  for i, (c, t, e) in enumerate(spec)]
        rep, _, svc_note = _service_first_price(groups, budget_s)
        svc, t_svc, foc = None, None, None
        if rep is not None:
            svc, foc = rep["results"][0]["expected_revenue"], rep["numerics"]["foc_residual"]
            t_svc = median_time(lambda: group_report(groups, "forward", rules=["first_price"]), repeats=7)
            answered.append(t_svc)
        else:
            missing += 1
        closed = None
        if len(spec) == 2 and counts == (1, 1) and expos == (1.0, 1.0):
            closed = gls_two_uniform_revenue(min(tops), max(tops))
        res, t_sh, sh_note = capped(lambda: shoot_first_price(counts, tops, expos), cap_s=GROUPS_SHOOT_CAP_S)
        sh = None if res is None else res["revenue"]
        if res is not None and sh is None:
            sh_note = "no common top bid" if res["why"].startswith("no common") else "failed"
            notes.append(f"{name}: shooting found {res['why']}")
        elif res is not None and res["why"]:
            sh_note = res["why"]
        ref = closed if closed is not None else svc
        err_svc = None if closed is None or svc is None else float(abs(svc / closed - 1))
        err_sh = None if ref is None or sh is None else float(abs(sh / ref - 1))
        if sh is not None and t_svc is not None and not res["why"]:
            ratios.append(t_sh / t_svc)
        shoot_cell = fmt_time(t_sh) if sh is not None else (sh_note or "failed")
        if sh is not None and sh_note:
            shoot_cell += f" ({sh_note})"
        rows.append([name, fmt_time(t_svc) if rep is not None else svc_note, fmt_err(err_svc),
                     fmt_err(foc), shoot_cell, fmt_err(err_sh), fmt_ratio(t_sh if sh is not None else None, t_svc)])
        if res is not None and sh is None and res["why"].startswith("no common"):
            notes.append(_stopping_note(counts, tops, expos, svc, t_svc, svc_note))
    print(table(["case", "service", "service rel.err", "foc residual", "shooting", "shooting rel.err", "shooting/service"], rows))
    for line in notes:
        print(line)
    print("target: within 50 ms, at least 20x faster than shooting run to the same accuracy")
    ctx["groups_service_max"] = max(answered) if answered else None
    ctx["groups_ratio_min"] = min(ratios) if ratios else None
    ctx["groups_missing"] = (missing, len(cases))


def _stopping_note(counts, tops, expos, svc, t_svc, svc_note):
    """Where plain shooting finds no common top bid: the extended shooting (weaker groups stopping
    below the top bid) against the service, as a note line."""
    late, t_late, late_note = capped(lambda: shoot_first_price(counts, tops, expos, entry=True), cap_s=GROUPS_SHOOT_CAP_S)
    if late is None or late["revenue"] is None:
        return f"    with weaker groups stopping below the top bid: {late_note or late['why']}"
    starts = ", ".join(f"group {i + 1} bids at most {b:.4f}" for i, b in sorted(late["entries"].items()))
    versus = "service: " + (fmt_err(abs(late["revenue"] / svc - 1)) + " apart, " + fmt_ratio(t_late, t_svc)
                            + " faster" if svc is not None else svc_note)
    return (f"    with weaker groups stopping below the top bid: revenue {late['revenue']:.8f}, top bid "
            f"{late['top_bid']:.6f}, {starts}; {fmt_time(t_late)}, {late['shots']} shots; {versus}")


CHART_CASES = [
    ("top-values", "family=lognormal&median=62000&sigma=0.35&bidders=8&currency=EUR"),
    ("joint-density", "family=lognormal&median=62000&sigma=0.35&bidders=8&currency=EUR"),
    ("revenue-by-reserve", "family=lognormal&median=62000&sigma=0.35&bidders=8&seller_value=30000&currency=EUR"),
    ("revenue-by-bidders", "family=lognormal&median=62000&sigma=0.35&bidders=8&reserve=40000&currency=EUR"),
    ("bid-strategy", "family=lognormal&median=62000&sigma=0.35&bidders=8&rules=first_price,second_price&currency=EUR"),
]


def section_charts(ctx):
    from service import create_app

    heading("Charts: the whole GET request, 720 x 450 pixels, against the same chart's points as JSON")
    print("GET /v1/charts/<chart>.svg and .png through app.test_client(); reference: the same GET with")
    print("Accept: application/json (the same handlers, everything but the drawing); median, batches alternated")
    print()
    client = create_app().test_client()
    rows, worst = [], 0.0
    for chart, query in CHART_CASES:
        svg, png = f"/v1/charts/{chart}.svg?{query}", f"/v1/charts/{chart}.png?{query}"
        statuses = {client.get(u).status_code for u in (svg, png)}
        t_svg, t_png, t_json = interleaved_medians([
            lambda: client.get(svg), lambda: client.get(png),
            lambda: client.get(svg, headers={"Accept": "application/json"}),
        ], rounds=7)
        worst = max(worst, t_svg, t_png)
        rows.append([chart, fmt_time(t_svg), fmt_time(t_png), fmt_time(t_json), fmt_ratio(max(t_svg, t_png), t_json),
                     ",".join(map(str, sorted(statuses))), "yes" if max(t_svg, t_png) <= 0.15 else "no"])
    print(table(["chart", "SVG", "PNG", "points (JSON)", "image/JSON", "status", "<= 150 ms"], rows))
    print("target: a chart within 150 ms at the default size")
    ctx["charts_max"] = worst


# Sections that send requests to the app in-process.
IN_PROCESS = {"section_request", "section_sweeps", "section_expensive", "section_charts"}

SECTIONS = [section_header, section_second_highest, section_scaling, section_request, section_revenue, section_sweeps,
            section_expensive, section_fits, section_counts, section_simulation, section_risk_aversion,
            section_groups, section_charts, section_http, section_summary]


def main(argv):
    names = {f.__name__.removeprefix("section_"): f for f in SECTIONS}
    if "--list" in argv:
        print("\n".join(names))
        return
    chosen = [names[a] for a in argv if a in names] if argv else SECTIONS
    unknown = [a for a in argv if a not in names]
    if unknown:
        raise SystemExit(f"unknown section(s): {', '.join(unknown)}; one of: {', '.join(names)}")
    if section_header not in chosen:
        chosen.insert(0, section_header)
    t0 = time.perf_counter()
    ctx = {}
    for section in chosen:
        with quiet_access_log() if section.__name__ in IN_PROCESS else contextlib.nullcontext():
            section(ctx)
        sys.stdout.flush()
    print()
    print(f"total run time {time.perf_counter() - t0:.1f} s")


if __name__ == "__main__":
    main(sys.argv[1:])
