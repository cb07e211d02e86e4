"""The bidstats demo: two invented scenarios through the Python client.

    make demo                      # or: .venv/bin/python demo/run.py
    HOST=127.0.0.1 PORT=8001 make demo

If no service answers at HOST:PORT (default 127.0.0.1:8000), the demo starts
one in the background (the venv's gunicorn, ``service:create_app()`` on
127.0.0.1:PORT), waits for /healthz, and stops it at the end. It sends the
request bodies in fixtures/ and prints plain-text tables. The scenarios and
all their numbers are invented (see fixtures/README.md).
"""
from __future__ import annotations

import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from service.client import BidstatsClient, BidstatsError, sweep_records  # noqa: E402

FIXTURES = ROOT / "fixtures"
RULE_NAMES = {"first_price": "first-price sealed", "second_price": "second-price sealed",
              "ascending": "ascending (open)", "descending": "descending (open)", "all_pay": "all-pay"}

CAUTION = """\
Caution: these figures are estimates under stated assumptions: independent
private values (or costs) drawn from the value models given, risk-neutral
bidders (alike, or alike within each group), and equilibrium play. Real
bidders collude, learn and err, and the value models here are invented. The
auction and procurement rules of
your jurisdiction, and licensed professional advice, come first; use numbers
like these to inform a decision, not to make it."""


# -- the server -------------------------------------------------------------------

def _answers(base_url):
    try:
        BidstatsClient(base_url, timeout=2.0, retries=0).health()
        return True
    except BidstatsError:
        return False


class Server:
    """A gunicorn started for the demo, or nothing if one already answers."""

    def __init__(self, host, port):
        self.base_url = f"http://{host}:{port}"
        self.port = port
        self.proc = None
        self.log = None

    def __enter__(self):
        if _answers(self.base_url):
            print(f"Using the bidstats service already answering at {self.base_url}.\n")
            return self
        self.base_url = f"http://127.0.0.1:{self.port}"
        gunicorn = Path(sys.executable).parent / "gunicorn"
        self.log = tempfile.NamedTemporaryFile(prefix="bidstats-demo-", suffix=".log", delete=False)
        self.proc = subprocess.Popen(
            [str(gunicorn), "--bind", f"127.0.0.1:{self.port}", "--workers", os.environ.get("WORKERS", "2"),
             "service:create_app()"],
            cwd=ROOT, stdout=self.log, stderr=subprocess.STDOUT)
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline:
            if self.proc.poll() is not None:
                self._fail(f"gunicorn exited with status {self.proc.returncode}")
            if _answers(self.base_url):
                print(f"Started bidstats at {self.base_url} for the demo (pid {self.proc.pid}); "
                      "it stops at the end.\n")
                return self
            time.sleep(0.2)
        self._stop()
        self._fail("gunicorn did not answer /healthz within 60 seconds")

    def _fail(self, why):
        text = Path(self.log.name).read_text(errors="replace") if self.log else ""
        sys.exit(f"demo: {why}.\n--- gunicorn log ({self.log.name}) ---\n{text[-3000:]}")

    def _stop(self):
        if self.proc is not None and self.proc.poll() is None:
            self.proc.terminate()
            try:
                self.proc.wait(timeout=15)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait()

    def __exit__(self, *exc):
        self._stop()
        if self.log is not None:
            self.log.close()
            if exc[0] is None:
                os.unlink(self.log.name)


# -- plain-text tables ----------------------------------------------------------

def table(headers, rows, right=None):
    """Columns padded to width; numbers (all but the first column, by default) right-aligned."""
    right = set(range(1, len(headers))) if right is None else set(right)
    cells = [[str(h) for h in headers]] + [[str(c) for c in row] for row in rows]
    widths = [max(len(r[i]) for r in cells) for i in range(len(headers))]

    def line(r):
        return "  ".join(c.rjust(w) if i in right else c.ljust(w) for i, (c, w) in enumerate(zip(r, widths))).rstrip()
    out = [line(cells[0]), "  ".join("-" * w for w in widths)] + [line(r) for r in cells[1:]]
    return "\n".join("  " + s for s in out)


def money(x):
    return "n/a" if x is None else f"{x:,.0f}"


def pct(x):
    """A share as a percentage; a share just short of 1 is not shown as 100%."""
    if x is None:
        return "n/a"
    text = f"{100 * x:.1f}%"
    return ">99.9%" if text == "100.0%" and x < 1 else text


def heading(text):
    print(text)
    print("=" * len(text))


def section(text):
    print()
    print(text)


def load(scenario, name):
    return json.loads((FIXTURES / scenario / f"{name}.json").read_text())


def quantile(qs, p):
    return next((q["value"] for q in qs if abs(q["p"] - p) < 1e-12), None)


# -- sweeps: /v1/sweeps if the service has it, else a loop of /v1/revenue --------

def _expand_bidders(spec):
    if isinstance(spec, list):
        return spec
    return list(range(spec["from"], spec["to"] + 1, spec.get("step", 1)))


def _expand_reserves(spec):
    if isinstance(spec, list):
        return spec
    lo, hi, k = spec["from"], spec["to"], spec["steps"]
    return [lo + (hi - lo) * i / (k - 1) for i in range(k)] if k > 1 else [lo]


def sweep(bs, body):
    """(answer, how) with answer = {columns, rows}, the same shape whichever route made it."""
    try:
        return bs.sweeps(**body), "POST /v1/sweeps"
    except BidstatsError as err:
        if err.status not in (404, 405):
            raise
    case = {k: body[k] for k in ("bidder_values", "bidder_costs", "seller_value", "buyer_value") if k in body}
    rows = []
    for n in _expand_bidders(body["bidders"]):
        for r in _expand_reserves(body["reserves"]):
            out = bs.revenue(**case, bidders=n, reserve=r, rules=body["rules"], quantiles=[])
            for res in out["results"]:
                rows.append([n, r, res["rule"], *[res[m] for m in body["metrics"]]])
    return {"columns": ["bidders", "reserve", "rule", *body["metrics"]], "rows": rows}, \
        "a loop of POST /v1/revenue calls (this service has no /v1/sweeps)"


def sweep_table(records, payoff, label):
    """Reserves down, bidder counts across; the best reserve per column marked *."""
    counts = sorted({r["bidders"] for r in records})
    reserves = sorted({r["reserve"] for r in records})
    cell = {(r["bidders"], r["reserve"]): payoff(r) for r in records}
    best = {n: max(reserves, key=lambda x: cell[(n, x)]) for n in counts}
    rows = [[money(x)] + [money(cell[(n, x)]) + ("*" if best[n] == x else " ") for n in counts] for x in reserves]
    return table([label] + [f"n={n} " for n in counts], rows), best


# -- the scenarios -----------------------------------------------------------------

def harrowgate(bs):
    s = "harrowgate_forward"
    heading("Harrowgate Plant Resale: used excavators at auction (invented; EUR)")
    print("Bidder values: lognormal, median 62,000, log-sd 0.35. Unsold machines are worth 30,000 to the yard.")

    body = load(s, "top-values")
    tv = bs.top_values(**body)
    section(f"Expected top bids with {body['bidders']} bidders (values of the highest two)")
    names = {1: "highest", 2: "second-highest"}
    print(table(["rank", "mean", "sd", "5%", "median", "95%"],
                [[names.get(r["rank"], r["rank"]), money(r["mean"]), money(r["sd"]), money(quantile(r["quantiles"], 0.05)),
                  money(quantile(r["quantiles"], 0.5)), money(quantile(r["quantiles"], 0.95))] for r in tv["results"]]))
    print(f"  Expected gap between them: {money(tv['expected_gap'])}. In an open ascending auction the price "
          "is about the second-highest value.")

    body = load(s, "revenue")
    rev = bs.revenue(**body)
    section(f"Expected revenue per rule: {body['bidders']} bidders, reserve {money(body['reserve'])}")
    print(table(["rule", "expected revenue", "sd", "P(sale)", "bidders' surplus"],
                [[RULE_NAMES[r["rule"]], money(r["expected_revenue"]), money(r["revenue_sd"]),
                  pct(r["probability_of_sale"]), money(r["expected_bidder_surplus"])] for r in rev["results"]]))
    gap = rev.get("revenue_equivalence")
    print("  Same mean under every rule (revenue equivalence"
          + (f"; the five routes agree to within {gap:.1e} EUR" if gap is not None else "") + "); the risk differs.")

    body = load(s, "bid-strategy")
    bids = bs.bid_strategy(**body)
    section(f"First-price equilibrium bids: {body['bidders']} bidders, reserve {money(body['reserve'])}")
    print(table(["value", "bid", "shading"],
                [[money(v), money(b), pct((v - b) / v)] for v, b in zip(bids["values"], bids["bids"])], right=[0, 1, 2]))

    body = load(s, "reserve-price")
    opt = bs.reserve_price(**body)
    section(f"Optimal reserve: {body['bidders']} bidders, seller's own value {money(body['seller_value'])}")
    print(table(["", "value"], [
        ["optimal reserve (Myerson)", money(opt["optimal_reserve"])],
        ["expected revenue at it", money(opt["expected_revenue_at_optimum"])],
        ["expected revenue with no reserve", money(opt["expected_revenue_without_reserve"])],
        ["P(sale) at it", pct(opt["probability_of_sale_at_optimum"])],
        ["expected payoff incl. unsold machines", money(opt["expected_payoff_at_optimum"])],
    ]))
    print(f"  The reserve maximises the payoff: the price when the machine sells, {money(body['seller_value'])} "
          "when it does not.")

    body = load(s, "sweeps")
    ans, how = sweep(bs, body)
    seller = body.get("seller_value", 0.0)
    recs = [r for r in sweep_records(ans) if r["rule"] == body["rules"][0]]
    section(f"Reserve sweep, {RULE_NAMES[body['rules'][0]]}: expected seller payoff "
            f"(the price, or {money(seller)} if unsold)")
    text, best = sweep_table(recs, lambda r: r["expected_revenue"] + seller * (1 - r["probability_of_sale"]), "reserve EUR")
    print(text)
    print(f"  * best on this grid for each bidder count; computed by {how}.")
    print(f"  The exact optimum, {money(opt['optimal_reserve'])}, does not depend on the number of bidders.")

    body = load(s, "batch")
    out = bs.batch(body["requests"])
    items = {r["id"]: r for r in out["responses"]}
    section("One batch: the assumed model next to one fitted to the past sales' prices (6 bidders)")
    fitted = items["past-sales-fit"]["body"]
    assumed = {r["rank"]: r for r in items["fitted-lognormal"]["body"]["results"]}
    print(table(["value model", "family", "E[highest]", "E[second]"],
                [["assumed", "lognormal", money(assumed[1]["mean"]), money(assumed[2]["mean"])]]))
    print(f"  Fitted to the {fitted['auctions']} past prices: {describe(fitted['bidder_values'])} "
          f"({fitted['selected']['reason']}).")
    others = ", ".join(f"{r['id']} ({r['status']})" for r in out["responses"][2:])
    print(f"  The other batch items answered too: {others}.")

    fit_section(bs, s, "Past sales to a value model: ascending-auction prices, controlling for the hours on the clock")


def describe(model):
    """A value model in a few words."""
    params = ", ".join(f"{k} {money(v) if abs(v) >= 1000 else f'{v:.3g}'}" for k, v in model.items()
                       if k != "family" and isinstance(v, (int, float)))
    return f"{model['family']} ({params})" if params else model["family"]


def fit_section(bs, scenario, title):
    """POST /v1/fits with the scenario's fits.json: the candidates, the selected model and its counterfactual."""
    body = load(scenario, "fits")
    out = bs.fit(**body)
    section(title)
    if out["candidates"]:
        print(table(["family", "AIC", "fit p-value", "parameters (90% intervals)"],
                    [[c["model"]["family"], f"{c['aic']:.1f}", f"{c['fit']['p_value']:.2f}",
                      "; ".join(f"{k} {ci[0]:.4g}-{ci[1]:.4g}" for k, ci in c["parameters_ci"].items() if ci)]
                     for c in out["candidates"][:4]]))
    model = out.get("bidder_values") or out.get("bidder_costs")
    print(f"  Selected: {describe(model) if model['family'] not in ('empirical', 'quantile_table') else model['family']}; "
          f"{out['selected']['reason']}.")
    if out.get("homogenization"):
        for name, c in out["homogenization"]["coefficients"].items():
            print(f"  {name}: {c['estimate']:+.3f} (standard error {c['standard_error']:.3f}) on log price")
    cf = out.get("counterfactual")
    if cf:
        word = "payment" if "expected_payment" in cf else "revenue"
        rows = [[f"expected {word}, {RULE_NAMES[r['rule']]}", money(r["value"]), f"{money(r['ci'][0])} - {money(r['ci'][1])}"]
                for r in cf[f"expected_{word}"]]
        if "optimal_reserve" in cf:
            rows.append(["optimal " + ("maximum price" if word == "payment" else "reserve"), money(cf["optimal_reserve"]["value"]),
                         f"{money(cf['optimal_reserve']['ci'][0])} - {money(cf['optimal_reserve']['ci'][1])}"])
        print(table([f"with {cf['bidders']} bidders, under the fitted model", "estimate", "90% interval"], rows))
    for w in out["warnings"]:
        print(f"  warning: {w}")


def millbrook(bs):
    s = "millbrook_reverse"
    print()
    heading("Millbrook County Public Works: pothole-repair tenders (invented; USD)")
    print("Contractor costs: gamma, shape 30, scale 5,200 (mean 156,000). The work is worth 210,000 to the county.")

    body = load(s, "top-values")
    tv = bs.top_values(**body)
    n = body["bidders"]
    section(f"Expected lowest costs with {n} bidders")
    names = {1: "lowest", 2: "second-lowest"}  # bidder_costs: ranks count from the lowest
    print(table(["rank", "mean", "sd", "5%", "median", "95%"],
                [[names.get(r["rank"], r["rank"]), money(r["mean"]), money(r["sd"]), money(quantile(r["quantiles"], 0.05)),
                  money(quantile(r["quantiles"], 0.5)), money(quantile(r["quantiles"], 0.95))] for r in tv["results"]]))

    body = load(s, "revenue")
    rev = bs.revenue(**body)
    section(f"Expected payment per rule: {body['bidders']} bidders, maximum price {money(body['reserve'])}")
    print(table(["rule", "expected payment", "sd", "P(award)", "bidders' surplus"],
                [[RULE_NAMES[r["rule"]], money(r["expected_payment"]), money(r["payment_sd"]),
                  pct(r["probability_of_award"]), money(r["expected_bidder_surplus"])] for r in rev["results"]]))

    body = load(s, "bid-strategy")
    bids = bs.bid_strategy(**body)
    section(f"First-price equilibrium tenders: {body['bidders']} bidders, maximum price {money(body['reserve'])}")
    print(table(["cost", "tender", "mark-up"],
                [[money(c), money(b), pct((b - c) / c)] for c, b in zip(bids["costs"], bids["bids"])], right=[0, 1, 2]))

    body = load(s, "reserve-price")
    opt = bs.reserve_price(**body)
    section(f"Optimal maximum price: {body['bidders']} bidders, the work worth {money(body['buyer_value'])} to the county")
    print(table(["", "value"], [
        ["optimal maximum price (Myerson)", money(opt["optimal_reserve"])],
        ["expected payment at it", money(opt["expected_payment_at_optimum"])],
        ["expected payment with no maximum", money(opt["expected_payment_without_reserve"])],
        ["P(award) at it", pct(opt["probability_of_award_at_optimum"])],
        ["expected payoff to the county", money(opt["expected_payoff_at_optimum"])],
    ]))

    body = load(s, "sweeps")
    ans, how = sweep(bs, body)
    value = body["buyer_value"]
    recs = [r for r in sweep_records(ans) if r["rule"] == body["rules"][0]]
    section(f"Maximum-price sweep, {RULE_NAMES[body['rules'][0]]}: expected payoff to the county "
            f"({money(value)} x P(award) - payment)")
    text, best = sweep_table(recs, lambda r: value * r["probability_of_award"] - r["expected_payment"], "max price USD")
    print(text)
    print(f"  * best on this grid for each bidder count; computed by {how}.")
    print(f"  The exact optimum, {money(opt['optimal_reserve'])}, does not depend on the number of bidders.")

    body = load(s, "batch")
    out = bs.batch(body["requests"])
    section("One batch: three tenders")
    rows = []
    for item, req in zip(out["responses"], body["requests"]):
        b = item["body"]
        if req["path"] == "/v1/revenue":
            r = b["results"][0]
            rows.append([item["id"], b["bidders"], money(r["expected_payment"]), pct(r["probability_of_award"]), ""])
        else:
            rows.append([item["id"], b["bidders"], money(b["expected_payment_at_optimum"]),
                         pct(b["probability_of_award_at_optimum"]), money(b["optimal_reserve"])])
    print(table(["tender", "bidders", "expected payment", "P(award)", "optimal max price"], rows))

    fit_section(bs, s, "Past tenders to a cost model: every sealed bid of 24 first-price tenders")
    groups_section(bs, s)


def groups_section(bs, s):
    """The county's contractors in two groups: payment per rule and each group's tenders."""
    body = load(s, "groups-revenue")
    out = bs.group_revenue(body["cost_groups"], **{k: v for k, v in body.items() if k != "cost_groups"})
    names = [g["name"] for g in body["cost_groups"]]
    section("Local contractors (5% small-firm preference) and national firms: expected payment per rule, "
            f"maximum price {money(body['reserve'])}")
    print(table(["rule", "expected payment", "sd", "P(lowest cost wins)", *[f"P({n} win)" for n in names]],
                [[RULE_NAMES[r["rule"]], money(r["expected_payment"]), money(r["payment_sd"]),
                  pct(r["probability_lowest_cost_wins"]), *[pct(g["win_probability"]) for g in r["groups"]]]
                 for r in out["results"]]))
    cmp_ = out["first_vs_second"]
    if cmp_:
        more = "more" if cmp_["difference"] > 0 else "less"
        print(f"  first price pays {money(abs(cmp_['difference']))} {more} than second price on average "
              f"(residual of the first-price conditions {out['numerics']['foc_residual']:.1e}).")

    body = load(s, "groups-bid-strategy")
    bids = bs.group_bids(body["cost_groups"], **{k: v for k, v in body.items() if k != "cost_groups"})
    section("First-price tenders by group (a local tender b is ranked as 0.95 b)")
    costs = bids["groups"][0]["costs"]
    print(table(["cost", *[g["name"] for g in bids["groups"]]],
                [[money(c), *[money(g["bids"][i]) if g["bids"][i] is not None else "-" for g in bids["groups"]]]
                 for i, c in enumerate(costs)], right=[0, 1, 2]))


def main():
    host = os.environ.get("HOST", "127.0.0.1")
    port = int(os.environ.get("PORT", "8000"))
    with Server(host, port) as server:
        with BidstatsClient(server.base_url, timeout=30.0) as bs:
            harrowgate(bs)
            millbrook(bs)
    print()
    print(CAUTION)


if __name__ == "__main__":
    main()
