"""An uncertain number of bidders: Poisson, binomial and table counts, and costly entry.

References, each derived here with mpmath from the published formulas (no table is copied):
- Krishna, Auction Theory, 2nd ed., 2009, ch. 3 (and Harstad, Kagel and Levin 1990): a bidder
  who knows the count's distribution but not the count faces k rivals with chance
  pi_k = (k+1) P(N = k+1) / E[N]; with G(v) = sum pi_k F(v)^k the first-price bid is
  b(v) = [r G(r) + int_r^v x dG(x)] / G(v), and revenue equivalence still holds.
- Myerson (1981): the optimal reserve solves v - (1 - F)/f = v0 whatever the count.
- Levin and Smith (1994): potential bidders enter with the chance q that leaves them
  indifferent, sum_k C(N-1, k) q^k (1-q)^(N-1-k) u(k+1) = c, u(n) one bidder's expected
  surplus among n; for uniform [0, 1] values u(n) = 1/(n (n+1)) (E[X1 - X2] = 1/(n+1),
  David and Nagaraja 2003, section 2.1, shared by n bidders); with entry mixed, revenue
  falls as potential bidders are added.
Uniform [0, 1] values throughout, so F(x) = x.
"""
from __future__ import annotations

import math

import mpmath as mp
import pytest

from service.core import models as M
from service.core import reports, reserve, topvalues
from service.core.bidders import Bidders, CostlyEntry

mp.mp.dps = 30
U = M.Uniform(0.0, 1.0)
UJSON = {"family": "uniform", "low": 0, "high": 1}


def _pmf(kind, a, b=None):
    """P(N = n) for n = 0..top, in mpmath."""
    if kind == "poisson":
        return {n: mp.e ** (-a) * mp.mpf(a) ** n / mp.factorial(n) for n in range(0, 80)}
    return {n: mp.binomial(a, n) * mp.mpf(b) ** n * (1 - mp.mpf(b)) ** (a - n) for n in range(0, a + 1)}


def _reference(pmf, r):
    """Expected revenue, the first-price revenue sd, the winner's value, and the bid function,
    from the formulas above in mpmath."""
    mean_n = mp.fsum(n * p for n, p in pmf.items())
    pis = {n - 1: n * p / mean_n for n, p in pmf.items() if n >= 1}

    def G(x):
        return mp.fsum(p * mp.mpf(x) ** k for k, p in pis.items())

    def dG(x):
        return mp.fsum(p * k * mp.mpf(x) ** (k - 1) for k, p in pis.items() if k >= 1)

    def H1(x):  # density of the highest value, E[N x^(N-1)]
        return mp.fsum(p * n * mp.mpf(x) ** (n - 1) for n, p in pmf.items() if n >= 1)

    def bid(v):
        return (r * G(r) + mp.quad(lambda x: x * dG(x), [r, v])) / G(v)

    # second-price revenue: each count's E[max(X2, r); X1 >= r] (a lone bidder pays r)
    def sp(n):
        if n == 0:
            return mp.mpf(0)
        if n == 1:
            return r * (1 - mp.mpf(r))
        atom = r * n * mp.mpf(r) ** (n - 1) * (1 - mp.mpf(r))
        return atom + mp.quad(lambda x: x * n * (n - 1) * x ** (n - 2) * (1 - x), [r, 1])

    revenue = mp.fsum(p * sp(n) for n, p in pmf.items())
    second = mp.quad(lambda x: bid(x) ** 2 * H1(x), [r, 1])
    fp_sd = mp.sqrt(second - revenue ** 2)
    return revenue, fp_sd, bid


CASES = [("poisson", 3.0, None, 0.0), ("poisson", 6.5, None, 0.4), ("binomial", 6, 0.35, 0.0), ("binomial", 9, 0.7, 0.25)]


def _count(kind, a, b):
    return Bidders.poisson(a) if kind == "poisson" else Bidders.binomial(a, b)


@pytest.mark.parametrize("kind,a,b,r", CASES)
def test_uniform_revenue_sd_and_bids_match_the_mixture_formulas(kind, a, b, r):
    want_rev, want_sd, bid = _reference(_pmf(kind, a, b), r)
    rep = reports.revenue_report(U, "forward", _count(kind, a, b), r if r else None, 0.0)
    by_rule = {x["rule"]: x for x in rep["results"]}
    for rule in ("first_price", "second_price", "ascending", "descending", "all_pay"):
        assert by_rule[rule]["expected_revenue"] == pytest.approx(float(want_rev), rel=1e-9, abs=1e-12), rule
    for rule in ("first_price", "descending"):
        assert by_rule[rule]["revenue_sd"] == pytest.approx(float(want_sd), rel=1e-7), rule
    bids = reports.bid_strategy(U, "forward", _count(kind, a, b), r if r else None, at=[0.3, 0.55, 0.8, 0.97])
    for v, got in zip([0.3, 0.55, 0.8, 0.97], bids["bids"]):
        if v >= r:
            assert got == pytest.approx(float(bid(v)), rel=1e-9), v


@pytest.mark.parametrize("kind,a,b,r", CASES[:2])
def test_first_price_quantiles_invert_the_highest_values_distribution(kind, a, b, r):
    # P(sale, price <= b(x)) = H(x) - H(r), H(x) = E[x^N]: the price is the mixed bid at the highest value.
    pmf = _pmf(kind, a, b)
    _, _, bid = _reference(pmf, r)

    def H(x):
        return mp.fsum(p * mp.mpf(x) ** n for n, p in pmf.items())

    rep = reports.revenue_report(U, "forward", _count(kind, a, b), r if r else None, 0.0, rules=["first_price"],
                                 quantiles=[0.5, 0.9])
    p_none = H(r)
    for p, got in zip([0.5, 0.9], rep["results"][0]["revenue_quantiles"]):
        x = mp.findroot(lambda x: H(x) - p, (r + 1e-9, 1 - 1e-12), solver="bisect") if p > p_none else None
        assert got["value"] == pytest.approx(float(bid(x)) if x is not None else 0.0, rel=1e-8)


def test_a_table_count_with_no_bidder_at_all():
    # P(N = 0) = 0.2, P(N = 3) = 0.8: a sale needs a bidder, and the revenue is 0.8 E[X2 of 3] = 0.8 / 2.
    rep = reports.revenue_report(U, "forward", Bidders.table([(0, 0.2), (3, 0.8)]), None, 0.0)
    for x in rep["results"]:
        assert x["expected_revenue"] == pytest.approx(0.4, rel=1e-12)
        assert x["probability_of_sale"] == pytest.approx(0.8, rel=1e-15)


def test_a_certain_count_as_a_table_gives_the_integer_s_figures():
    rep = reports.revenue_report(U, "forward", Bidders.table([(5, 1.0)]), 0.3, 0.0)
    fixed = reports.revenue_report(U, "forward", 5, 0.3, 0.0)
    for a, b in zip(rep["results"], fixed["results"]):
        assert a["expected_revenue"] == pytest.approx(b["expected_revenue"], rel=1e-12)


@pytest.mark.parametrize("count", [Bidders.poisson(2.5), Bidders.binomial(7, 0.4), Bidders.table([(1, 0.3), (4, 0.7)])])
def test_the_optimal_reserve_does_not_depend_on_the_count(count):
    # Myerson (1981): uniform [0, 1] values and v0 = 0 give r* = 1/2 for every count distribution.
    rep = reserve.reserve_report(U, "forward", count, 0.0)
    assert rep["optimal_reserve"] == pytest.approx(0.5, abs=1e-9)
    # and its revenue is each count's revenue at r = 1/2 mixed: (n-1)/(n+1) + 2 (1/2)^(n+1) / (n+1) (Krishna 2009, ch. 2, derived)
    want = sum(w * ((n - 1) / (n + 1) + 2 * 0.5 ** (n + 1) / (n + 1)) for n, w in zip(count.counts, count.weights) if n >= 1)
    assert rep["expected_revenue_at_optimum"] == pytest.approx(want, rel=1e-9)


def _entry_reference(N, c):
    """Levin and Smith (1994) for uniform values, no reserve: (q, expected revenue)."""
    def gain(q):
        return mp.fsum(mp.binomial(N - 1, k) * q ** k * (1 - q) ** (N - 1 - k) / ((k + 1) * (k + 2)) for k in range(N)) - c

    q = mp.mpf(1) if gain(mp.mpf(1)) >= 0 else mp.findroot(gain, (mp.mpf("1e-20"), mp.mpf(1) - mp.mpf("1e-20")), solver="bisect")
    revenue = mp.fsum(mp.binomial(N, n) * q ** n * (1 - q) ** (N - n) * mp.mpf(n - 1) / (n + 1) for n in range(1, N + 1))
    return q, revenue


@pytest.mark.parametrize("N,c", [(4, 0.03), (8, 0.03), (12, 0.03), (6, 0.1)])
def test_costly_entry_matches_levin_and_smith(N, c):
    q, want = _entry_reference(N, mp.mpf(c))
    rep = reports.revenue_report(U, "forward", CostlyEntry(N, c), None, 0.0)
    assert rep["entry_probability"] == pytest.approx(float(q), rel=1e-9)
    assert rep["expected_bidders"] == pytest.approx(N * float(q), rel=1e-9)
    for x in rep["results"]:
        assert x["expected_revenue"] == pytest.approx(float(want), rel=1e-8)


def test_with_mixed_entry_revenue_falls_as_potential_bidders_rise():
    # Levin and Smith (1994): once entry is mixed, more potential bidders lower expected revenue.
    revs = [reports.revenue_report(U, "forward", CostlyEntry(N, 0.03), None, 0.0, rules=["second_price"])["results"][0]
            ["expected_revenue"] for N in (6, 8, 12, 20)]
    assert all(a > b for a, b in zip(revs, revs[1:]))


def test_an_entry_cost_above_any_gain_means_nobody_enters():
    # A lone entrant keeps E[X] = 1/2 at most; at a cost of 0.6 nobody enters and nothing is sold.
    rep = reports.revenue_report(U, "forward", CostlyEntry(5, 0.6), None, 0.0)
    assert rep["entry_probability"] == 0.0
    for x in rep["results"]:
        assert x["expected_revenue"] == 0.0 and x["probability_of_sale"] == 0.0


def test_top_values_under_a_poisson_count():
    # Uniform values: E[X1 of n] = n / (n + 1), E[X2 of n] = (n - 1) / (n + 1) (David and Nagaraja 2003,
    # section 2.1), mixed over the counts where the rank exists; P(N >= r) from the Poisson pmf.
    pmf = _pmf("poisson", 4.0)
    rep = topvalues.top_values(U, Bidders.poisson(4.0))
    for item, r in zip(rep["results"], (1, 2)):
        exists = mp.fsum(p for n, p in pmf.items() if n >= r)
        mean = mp.fsum(p * mp.mpf(n - r + 1) / (n + 1) for n, p in pmf.items() if n >= r) / exists
        assert item["probability_exists"] == pytest.approx(float(exists), rel=1e-12)
        assert item["mean"] == pytest.approx(float(mean), rel=1e-10)
        # the median: sum_n P(n) I_x(n - r + 1, r) = P(N >= r) / 2
        med = mp.findroot(lambda x: mp.fsum(p * mp.betainc(n - r + 1, r, 0, x, regularized=True)
                                            for n, p in pmf.items() if n >= r) - exists / 2, (0.01, 0.999), solver="bisect")
        assert item["quantiles"][2]["value"] == pytest.approx(float(med), rel=1e-9)


def test_poisson_counts_are_cut_where_the_tail_is_below_1e_16():
    count = Bidders.poisson(8.0)
    assert count.dropped < 1e-16 and count.counts[0] == 0
    assert math.fsum(count.weights) == pytest.approx(1.0, abs=1e-15)
    rep = reports.revenue_report(U, "forward", count, None, 0.0, rules=["second_price"])
    assert rep["numerics"]["bidder_counts"] == {"counts_from": 0, "counts_to": count.counts[-1],
                                                "probability_set_aside": count.dropped}


BAD = [
    ({"distribution": "poisson", "mean": -2}, "bidders.mean"),
    ({"distribution": "poisson", "mean": 1e6}, "bidders.mean"),
    ({"distribution": "table", "probabilities": [{"bidders": 2, "p": 0.5}, {"bidders": 3, "p": 0.3}]}, "bidders.probabilities"),
    ({"distribution": "binomial", "potential": 5, "entry_probability": 1.5}, "bidders.entry_probability"),
    ({"distribution": "entry", "potential": 5, "entry_cost": -1}, "bidders.entry_cost"),
    ({"distribution": "geometric", "mean": 3}, "bidders.distribution"),
    ({"distribution": "poisson"}, "bidders.mean"),
    ({"distribution": {"poisson": 1}, "mean": 3}, "bidders.distribution"),  # found by the schema fuzzer: a 500 before
    ({"distribution": ["poisson"], "mean": 3}, "bidders.distribution"),
    ({"mean": 3}, "bidders.distribution"),
    ("6", "bidders"),
]


@pytest.mark.parametrize("bidders,field", BAD)
def test_bad_counts_are_named(client, bidders, field):
    r = client.post("/v1/revenue", json={"bidder_values": UJSON, "bidders": bidders})
    assert r.status_code == 422 and r.content_type == "application/problem+json"
    assert field in [e["field"] for e in r.get_json()["errors"]]


def test_every_door_takes_a_count_distribution(client):
    poisson = {"distribution": "poisson", "mean": 4}
    want = reports.revenue_report(U, "forward", Bidders.poisson(4.0), None, 0.0, rules=["first_price"])["results"][0]["expected_revenue"]
    r = client.post("/v1/revenue", json={"bidder_values": UJSON, "bidders": poisson, "rules": ["first_price"]})
    assert r.status_code == 200 and r.get_json()["results"][0]["expected_revenue"] == want
    q = client.get("/v1/quote?metric=expected_revenue&rule=first_price&family=uniform&low=0&high=1"
                   "&bidders_distribution=poisson&bidders_mean=4")
    assert q.status_code == 200 and float(q.get_data(as_text=True)) == want
    b = client.post("/v1/batch", json={"requests": [{"id": 1, "path": "/v1/revenue", "body": {"bidder_values": UJSON, "bidders": poisson,
                                                                                       "rules": ["first_price"]}}]})
    assert b.status_code == 200 and b.get_json()["responses"][0]["body"]["results"][0]["expected_revenue"] == want
    for path in ("/v1/bid-strategy", "/v1/reserve-price", "/v1/top-values", "/v1/top-values/joint-density"):
        r = client.post(path, json={"bidder_values": UJSON, "bidders": poisson})
        assert r.status_code == 200, (path, r.get_json())
        assert r.get_json()["bidders"] == {"distribution": "poisson", "mean": 4.0}
    bad = client.get("/v1/quote?metric=expected_revenue&family=uniform&low=0&high=1&bidders_distribution=poisson&bidders_mean=-1")
    assert bad.status_code == 422 and "bidders_mean" in bad.get_data(as_text=True)


def test_the_optimal_reserve_under_costly_entry():
    # Levin and Smith (1994), from memory: when entry is mixed the seller's best reserve is its own
    # value (the seller collects the entrants' surplus through their indifference); when every
    # potential bidder enters anyway, it is Myerson's (1981), (1 + v0) / 2 for uniform [0, 1] values.
    mixed = reserve.reserve_report(U, "forward", CostlyEntry(8, 0.03), 0.0)
    assert 0.0 < mixed["entry_probability"] < 1.0
    assert mixed["optimal_reserve"] == pytest.approx(0.0, abs=1e-6)
    full = reserve.reserve_report(U, "forward", CostlyEntry(6, 0.01), 0.3)
    assert full["entry_probability"] == 1.0
    assert full["optimal_reserve"] == pytest.approx(0.65, abs=1e-6)


def test_a_sweep_over_count_distributions_gives_the_revenue_reports_figures(client):
    poisson, entry = {"distribution": "poisson", "mean": 3}, {"distribution": "entry", "potential": 6, "entry_cost": 0.02}
    r = client.post("/v1/sweeps", json={"bidder_values": UJSON, "bidders": [3, poisson, entry], "reserves": [0.2, 0.5],
                                        "rules": ["first_price", "second_price"], "metrics": ["expected_revenue", "revenue_sd"]})
    assert r.status_code == 200
    rows = r.get_json()["rows"]
    assert len(rows) == 12 and rows[4][0] == {"distribution": "poisson", "mean": 3.0}
    for row in rows[4:]:
        count = Bidders.poisson(3.0) if row[0]["distribution"] == "poisson" else CostlyEntry(6, 0.02)
        rep = reports.revenue_report(U, "forward", count, row[1], 0.0, rules=[row[2]])
        assert row[3] == pytest.approx(rep["results"][0]["expected_revenue"], rel=1e-12)
        assert row[4] == pytest.approx(rep["results"][0]["revenue_sd"], rel=1e-12)
    csv = client.get("/v1/sweeps.csv?family=uniform&low=0&high=1&bidders_distribution=poisson&bidders_mean=2,4"
                     "&reserves=0.2&rules=second_price").get_data(as_text=True).splitlines()
    assert csv[1].startswith("poisson(mean=2.0),0.2,second_price,") and csv[2].startswith("poisson(mean=4.0),")
    want = reports.revenue_report(U, "forward", Bidders.poisson(4.0), 0.2, 0.0, rules=["second_price"])["results"][0]
    assert float(csv[2].split(",")[3]) == want["expected_revenue"]


def test_the_client_passes_a_count_distribution(app):
    # The client sends the body as given; the app's test client stands in for the network.
    from service.client import BidstatsClient

    class _Session:
        def __init__(self, flask_client):
            self.c = flask_client

        def request(self, method, url, headers=None, timeout=None, data=None, params=None):
            r = self.c.open(url.removeprefix("http://bidstats.test"), method=method, data=data, headers=headers,
                            query_string=params)

            class _Answer:
                status_code, reason, text = r.status_code, r.status, r.get_data(as_text=True)
            return _Answer()

        def close(self):
            pass

    bs = BidstatsClient("http://bidstats.test", session=_Session(app.test_client()))
    got = bs.revenue(bidder_values=UJSON, bidders={"distribution": "binomial", "potential": 6, "entry_probability": 0.5},
                     rules=["second_price"])
    count = Bidders.binomial(6, 0.5)
    want = sum(w * (n - 1) / (n + 1) for n, w in zip(count.counts, count.weights) if n >= 1)
    assert got["results"][0]["expected_revenue"] == pytest.approx(want, rel=1e-12)


@pytest.mark.parametrize("model", [M.LogNormal(median=62000.0, sigma=0.35), M.Gamma(30.0, 5200.0), M.BetaValues(2.0, 5.0),
                                   M.Pareto(6.0, 1.0), M.Weibull(2.5, 7.0)], ids=lambda m: type(m).__name__)
@pytest.mark.parametrize("count", [Bidders.poisson(3.5), Bidders.binomial(9, 0.4), Bidders.poisson(12.0),
                                   Bidders.table([(1, 0.5), (110, 0.5)])], ids=["poisson3.5", "binomial9", "poisson12", "table1-110"])
def test_one_pass_agrees_with_count_by_count(model, count):
    # Two routes of our own that share no integral: every rule's figures on one value's quadrature
    # weighted by the count's generating function, and every count's own auction mixed. Agreement
    # to 1e-8 (the second is exact per count, checked elsewhere against closed forms); common
    # practice, no source.
    from service.core import mixing

    rules = ["first_price", "second_price", "ascending", "descending", "all_pay"]
    for r in (None, float(model.ppf(0.3))):
        fast, _ = mixing.mixed_figures(mixing.MixedAuction(model, count, r, 0.0), rules, [0.5])
        assert mixing.one_pass(mixing.MixedAuction(model, count, r, 0.0), rules, []) is not None
        slow, _ = mixing.count_by_count(mixing.MixedAuction(model, count, r, 0.0), rules, [0.5])
        for rule in rules:
            for key in ("expected_revenue", "revenue_sd", "expected_winner_surplus", "expected_bidder_surplus", "efficiency"):
                assert fast[rule][key] == pytest.approx(slow[rule][key], rel=1e-8), (rule, key, r)


@pytest.mark.parametrize("path,body,field", [
    # found by the schema fuzzer, each a 500 before
    ("/v1/revenue", {"bidder_costs": {"family": "normal", "sd": 1e-300, "mean": 0.0},
                     "bidders": {"distribution": "entry", "entry_cost": 0.0, "potential": 1}}, "bidders.distribution"),
    ("/v1/top-values", {"bidder_costs": {"family": "normal", "mean": 0.0, "sd": 1.0},
                        "bidders": {"distribution": "entry", "entry_cost": 0.0, "potential": 3}}, "bidders.distribution"),
])
def test_costly_entry_without_a_floor_is_named(client, path, body, field):
    r = client.post(path, json=body)
    assert r.status_code == 422 and field in [e["field"] for e in r.get_json()["errors"]]


def test_a_binomial_count_at_an_extreme_entry_probability():
    # q * N below the tails' 5e-17: nobody for certain (scipy's binomial pmf overflows there); likewise everyone.
    assert Bidders.binomial(219, 2.2250738585072014e-308).counts == (0,)
    assert Bidders.binomial(219, 1.0 - 1e-19).counts == (219,)
    rep = reports.revenue_report(U, "forward", Bidders.binomial(219, 1e-300), None, 0.0, rules=["second_price"])
    assert rep["results"][0]["probability_of_sale"] == 0.0


@pytest.mark.parametrize("count", [Bidders.binomial(110, 0.5), Bidders.binomial(110, 0.95)], ids=["binomial110-0.5", "binomial110-0.95"])
def test_an_uncertain_count_of_many_bidders_is_mixed_count_by_count(count):
    # Where every count is large G(u) = sum pi_k u^k falls below e^-300 inside one value's nodes, and the
    # one-pass route lost every digit there (descending revenue off by up to 3e3 relative, found while
    # checking a schema fuzzer's case): such counts go count by count, the mixed bids from every count's
    # own bids; first price and descending then agree with second price to 1e-8 (revenue equivalence,
    # Myerson 1981), and the first-price sd with the simulation check (|z| <= 4).
    from service.core import mixing

    model = M.Uniform(0.0, 1.0)
    assert mixing.one_pass(mixing.MixedAuction(model, count, None, 0.0), ["second_price"], []) is None
    rep = reports.revenue_report(model, "forward", count, None, 0.0, rules=["first_price", "second_price", "descending"],
                                 monte_carlo={"draws": 50_000, "seed": 4})
    means = [x["expected_revenue"] for x in rep["results"]]
    assert max(means) - min(means) <= 1e-8 * max(means)
    for block in rep["monte_carlo"]["results"].values():
        for entry in block.values():
            assert entry["z"] is None or abs(entry["z"]) <= 4.0
