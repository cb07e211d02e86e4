"""Regressions for hostile inputs: each request that once failed (a 500, an overflow, a
wrong number without a warning) with the answer it now gets, checked against a
reference outside the project named beside each check."""
from __future__ import annotations

import math

import mpmath as mp
import numpy as np
import pytest

import api_reports as A
from service.core import rules as core_rules
from service.core import models as M
from service.core import orderstats as O

mp.mp.dps = 30
RULES = list(core_rules.names())
U01 = {"family": "uniform", "low": 0, "high": 1}
BID_RULES = ["first_price", "descending", "all_pay"]


def post(client, path, body):
    resp = client.post(path, json=body)
    assert resp.status_code < 500, resp.get_data(as_text=True)
    return resp.status_code, resp.get_json()


def unreliable(payload):
    return [w for w in payload.get("warnings", []) if "not reliable" in w]


def krishna(n, r):
    """Uniform [0, 1] values, n >= 2 bidders, reserve r clamped to [0, 1]: expected revenue
    (n-1)/(n+1) + r^n - 2n r^(n+1)/(n+1), the same under every rule (Krishna, Auction
    Theory, 2nd ed., 2009, ch. 2)."""
    r = min(max(r, 0.0), 1.0)
    return (n - 1) / (n + 1) + r**n - 2 * n * r ** (n + 1) / (n + 1)


# ---- reserves at and beyond the ends of the support ------------------------------------

@pytest.mark.parametrize("reserve", [1.0, 2.0])
@pytest.mark.parametrize("rule", BID_RULES)
def test_bids_with_the_reserve_at_or_above_the_top(client, rule, reserve):
    # Once a 500 (IndexError in the bid tail). Nobody's value beats the reserve: no sale,
    # and a bid exists only at a value equal to the reserve, where b(r) = r (Krishna 2009,
    # ch. 2: b(v) = (n-1)v/n + r^n/(n v^(n-1)) at v = r = 1 is 1; a(v) = F^(n-1) b = 1 too).
    status, out = post(client, "/v1/bid-strategy", {"bidder_values": U01, "bidders": 2, "reserve": reserve, "rule": rule, "points": 11})
    assert status == 200
    assert all(b is None for b in out["bids"][:-1])
    assert out["bids"][-1] == (1.0 if reserve == 1.0 else None)
    assert any("nothing is sold" in w for w in out["warnings"])


@pytest.mark.parametrize("reserve", [0.0, -1.0])
@pytest.mark.parametrize("rule", BID_RULES)
def test_asks_with_the_maximum_price_at_or_below_the_bottom(client, rule, reserve):
    # The mirror: costs on [0, 1] and a maximum price no cost falls under: nothing is awarded.
    status, out = post(client, "/v1/bid-strategy", {"bidder_costs": U01, "bidders": 3, "reserve": reserve, "rule": rule, "points": 11})
    assert status == 200
    assert all(b is None for b in out["bids"][1:])
    assert any("nothing is awarded" in w for w in out["warnings"])


@pytest.mark.parametrize("n", [2, 5])
@pytest.mark.parametrize("reserve", [-1.0, 0.0, 1.0, 2.0])
def test_revenue_with_the_reserve_at_the_ends(client, n, reserve):
    # Krishna (2009), ch. 2 (above): a reserve at or below 0 does not bind, one at or above 1 sells nothing.
    status, out = post(client, "/v1/revenue", {"bidder_values": U01, "bidders": n, "reserve": reserve})
    assert status == 200 and not unreliable(out)
    for res in out["results"]:
        assert res["expected_revenue"] == pytest.approx(krishna(n, reserve), rel=1e-9, abs=1e-15), res["rule"]
        assert res["probability_of_sale"] == (0.0 if reserve >= 1.0 else 1.0)


@pytest.mark.parametrize("direction", ["forward", "reverse"])
def test_sweep_with_reserves_at_and_beyond_the_ends(client, direction):
    # The same laws over a grid, both directions (the reverse payment mirrors Krishna's formula:
    # costs C on [0, 1] are values 1 - C, so the payment is P(award) - krishna(n, 1 - R)).
    key = "bidder_values" if direction == "forward" else "bidder_costs"
    body = {key: U01, "bidders": [2, 3, 7], "reserves": [-1.0, 0.0, 1.0, 2.0], "rules": RULES,
            "metrics": ["expected_revenue" if direction == "forward" else "expected_payment"]}
    status, out = post(client, "/v1/sweeps", body)
    assert status == 200 and not unreliable(out)
    for n, r, rule, x in out["rows"]:
        if direction == "forward":
            want = krishna(n, r)
        else:
            rc = min(max(r, 0.0), 1.0)
            want = 1.0 - (1.0 - rc) ** n - krishna(n, 1.0 - rc) if rc > 0 else 0.0
        assert x == pytest.approx(want, rel=1e-9, abs=1e-14), (n, r, rule)


# ---- a lone bidder faces the reserve itself ------------------------------------------

@pytest.mark.parametrize("rule", RULES)
def test_lone_bidder_pays_a_reserve_below_the_support(client, rule):
    # One bidder, values uniform on [10, 20], reserve 5: with no rival, the bid E[max(Y, r) | Y < v]
    # has no Y and is r itself, and the second price is the reserve (Krishna 2009, ch. 2, n = 1):
    # it buys for sure and pays 5 (once the support's edge, 10).
    body = {"bidder_values": {"family": "uniform", "low": 10, "high": 20}, "bidders": 1, "reserve": 5, "rules": [rule]}
    status, out = post(client, "/v1/revenue", body)
    assert status == 200
    res = out["results"][0]
    assert res["expected_revenue"] == 5.0 and res["probability_of_sale"] == 1.0 and res["revenue_sd"] == 0.0
    assert res["expected_bidder_surplus"] == pytest.approx(15.0 - 5.0, rel=1e-12)  # E[value] = 15
    status, bids = post(client, "/v1/bid-strategy", {"bidder_values": body["bidder_values"], "bidders": 1, "reserve": 5,
                                                     "rule": rule, "at": [10.0, 15.0, 20.0]})
    assert status == 200
    assert bids["bids"] == ([10.0, 15.0, 20.0] if rule in ("second_price", "ascending") else [5.0, 5.0, 5.0])


@pytest.mark.parametrize("rule", RULES)
def test_lone_bidder_is_paid_a_maximum_price_above_the_support(client, rule):
    # The mirror: costs uniform on [10, 20], maximum price 25: the lone bidder is paid 25.
    body = {"bidder_costs": {"family": "uniform", "low": 10, "high": 20}, "bidders": 1, "reserve": 25, "rules": [rule]}
    status, out = post(client, "/v1/revenue", body)
    assert status == 200
    assert out["results"][0]["expected_payment"] == 25.0 and out["results"][0]["probability_of_award"] == 1.0


@pytest.mark.parametrize("direction,reserve,want", [("forward", 5.0, 5.0), ("forward", 12.0, 12.0 * 0.8),
                                                      ("reverse", 25.0, 25.0), ("reverse", 12.0, 12.0 * 0.2)])
def test_lone_bidder_in_a_sweep(direction, reserve, want):
    # The same in /v1/sweeps: the price is the reserve, paid with chance P(V >= r) (forward) or P(C <= R).
    model = M.Uniform(10.0, 20.0)
    table = A.sweep(model, direction, [1], [reserve], RULES, [A.metrics(direction)[0]], own_value=None if direction == "forward" else 30.0)
    for row in table["rows"]:
        assert row[3] == pytest.approx(want, rel=1e-14), row


# ---- parameters that overflowed, divided by zero or ran long ---------------------------

@pytest.mark.parametrize("path,body,field", [
    # Once a ZeroDivisionError in rank_summary: refused as outside the declared range (tests/test_reliable_ranges.py).
    ("/v1/top-values", {"bidder_values": {"family": "gamma", "shape": 1e-200, "scale": 1}, "bidders": 5}, "bidder_values.shape"),
    # Once 0.5 for the highest of 5 against 0.96875: refused.
    ("/v1/top-values", {"bidder_values": {"family": "beta", "alpha": 1e-310, "beta": 1e-310}, "bidders": 5}, "bidder_values.alpha"),
    # Once the second-highest mean above the highest: a subnormal sd, refused.
    ("/v1/top-values", {"bidder_values": {"family": "normal", "mean": 1e150, "sd": 1e-320}, "bidders": 5}, "bidder_values.sd"),
    # Once 42 s inside the incomplete beta's inverse (48 s in sweeps): refused before any work.
    ("/v1/top-values", {"bidder_values": {"family": "beta", "alpha": 1e-100, "beta": 1e10}, "bidders": 5, "curve_points": 2001},
     "bidder_values.alpha"),
    ("/v1/sweeps", {"bidder_values": {"family": "beta", "alpha": 1e-100, "beta": 1e10}, "bidders": [2, 5], "reserves": [0.0]},
     "bidder_values.alpha"),
    # Each parameter within 1e150, but values the quadratures reach pass 1e308.
    ("/v1/revenue", {"bidder_values": {"family": "lognormal", "median": 1e150, "sigma": 20}, "bidders": 3}, "bidder_values.sigma"),
])
def test_unreliable_parameters_are_refused_by_name(client, path, body, field):
    status, out = post(client, path, body)
    assert status == 422
    named = [e for e in out["errors"] if e["field"] == field]
    assert named and "reliable" in named[0]["message"]


def mp_gamma_max_mean(k, n):
    """E[max of n iid gamma(k, 1)] = int_0^inf 1 - (1 - S(x))^n dx, S the regularised upper
    incomplete gamma (mpmath quad at 30 digits)."""
    k = mp.mpf(k)
    cuts = [mp.mpf(0)] + [mp.mpf(10) ** -e for e in (20, 15, 10, 6, 3, 2, 1)] + [mp.mpf(x) for x in (0.5, 1, 2, 5, 10, 20, 40, 80)]
    return mp.quad(lambda x: 1 - (1 - mp.gammainc(k, x, mp.inf, regularized=True)) ** n, cuts + [mp.inf])


class GammaBelowItsRange(M.Gamma):
    """A gamma with its declared reliable range lifted, to reach the rank rule itself below it."""

    parameters = {name: M.Param(bound="positive") for name in M.Gamma.parameters}


@pytest.mark.parametrize("shape", ["1e-5", "2e-5", "5e-5"])
def test_tiny_gamma_shape_top_mean(client, shape):
    # Once 0.0354 against 1.0e-4 (shape 2e-5): the rank rule was normalised by the weight it
    # kept, which the scan had trimmed to where the values are not negligible. The rule is
    # right now (against mpmath); the service refuses such shapes, where a reverse auction's
    # payment among many bidders is still lost (tests/test_reliable_ranges.py).
    model = GammaBelowItsRange(float(shape), 1.0)
    assert O.rank_summary(model, 5, 1).mean == pytest.approx(float(mp_gamma_max_mean(shape, 5)), rel=1e-12)
    status, out = post(client, "/v1/top-values", {"bidder_values": {"family": "gamma", "shape": float(shape), "scale": 1}, "bidders": 5})
    assert status == 422 and out["errors"][0]["field"] == "bidder_values.shape"


def test_normal_ranks_stay_in_order_when_the_sd_is_far_below_the_mean(client):
    # E[rank r] = mean + sd E[Z_r]; with mean 1e150 and sd 1e-300 every rank rounds to 1e150
    # exactly (IEEE 754 rounding of 1e150 + 1e-300 z, z within 40: derived here).
    for n in (2, 5, 10, 100):
        status, out = post(client, "/v1/top-values", {"bidder_values": {"family": "normal", "mean": 1e150, "sd": 1e-300},
                                                      "bidders": n, "ranks": [1, 2]})
        assert status == 200 and not unreliable(out)
        assert [r["mean"] for r in out["results"]] == [1e150, 1e150]
        # the gap itself is sd E[Z_1 - Z_2], integrated as one quantity (David and Nagaraja 2003,
        # section 2.1: E[X_1 - X_2] = int n F^(n-1) (1 - F) dx), here by mpmath
        gap = mp.quad(lambda x: n * mp.ncdf(x) ** (n - 1) * mp.ncdf(-x), [-mp.inf, -3, 0, 3, 6, mp.inf])
        assert out["expected_gap"] == pytest.approx(1e-300 * float(gap), rel=1e-9)


def mp_normal_revenue_reserve_zero(n):
    """Second-price revenue with reserve 0 and standard normal values: the atom at the reserve pays 0,
    so it is E[X2; X2 > 0] = int_0^inf P(X2 > x) dx (mpmath quad, 30 digits)."""
    return mp.quad(lambda x: 1 - mp.ncdf(x) ** n - n * mp.ncdf(x) ** (n - 1) * mp.ncdf(-x), [0, 2, 5, 10, mp.inf])


def mp_lognormal_rank_moment(median, sigma, n, r, p=1):
    """E[X_r^p], X = median e^(sigma z): the rank-r density of z weighted by e^(p (mu + sigma z)) (mpmath)."""
    mu, s = mp.log(mp.mpf(median)), mp.mpf(sigma)
    m = n - r + 1
    c = mp.factorial(n) / (mp.factorial(m - 1) * mp.factorial(r - 1))
    return mp.quad(lambda z: mp.exp(p * (mu + s * z)) * c * mp.ncdf(z) ** (m - 1) * mp.ncdf(-z) ** (r - 1) * mp.npdf(z),
                   [-mp.inf, -10, -5, 0, 5, 10, 15, 20, 30, mp.inf])


def test_subnormal_reserve_in_every_route(client):
    # Once an overflow in the ascending route (b / a from a floor of 1e-315). A reserve of 1e-315
    # on standard normal values is the reserve 0 to double precision.
    want = float(mp_normal_revenue_reserve_zero(3))
    for reserve in (1e-315, 5e-324, -1e-315):
        status, out = post(client, "/v1/revenue", {"bidder_values": {"family": "normal", "mean": 0, "sd": 1}, "bidders": 3, "reserve": reserve})
        assert status == 200 and not unreliable(out)
        for res in out["results"]:
            assert res["expected_revenue"] == pytest.approx(want, rel=1e-9), (reserve, res["rule"])
    # On a lognormal F(1e-315) is 0 in double precision: the reserve does not bind, and the revenue
    # is E[second-highest of 3].
    want = float(mp_lognormal_rank_moment(1, 1, 3, 2))
    status, out = post(client, "/v1/revenue", {"bidder_values": {"family": "lognormal", "median": 1, "sigma": 1}, "bidders": 3, "reserve": 1e-315})
    assert status == 200
    for res in out["results"]:
        assert res["expected_revenue"] == pytest.approx(want, rel=1e-9), res["rule"]


def test_revenue_whose_square_passes_double_range(client):
    # Once an OverflowError at mean**2: median 1e150, sigma 9, so E[X2 of 3] is about 1e158 and its
    # square about 1e316. The sd comes from a scaled sum; both against mpmath (30 digits).
    status, out = post(client, "/v1/revenue", {"bidder_values": {"family": "lognormal", "median": 1e150, "sigma": 9},
                                               "bidders": 3, "rules": ["second_price", "first_price", "ascending"]})
    assert status == 200 and not unreliable(out)
    m1 = mp_lognormal_rank_moment("1e150", 9, 3, 2)
    m2 = mp_lognormal_rank_moment("1e150", 9, 3, 2, p=2)
    by_rule = {r["rule"]: r for r in out["results"]}
    for rule in by_rule:
        assert by_rule[rule]["expected_revenue"] == pytest.approx(float(m1), rel=1e-9), rule
    assert by_rule["second_price"]["revenue_sd"] == pytest.approx(float(mp.sqrt(m2 - m1 * m1)), rel=1e-8)
    assert by_rule["first_price"]["revenue_sd"] is not None


# ---- sign slips in reverse sweeps ----------------------------------------------------

def reverse_uniform_two_bidders(p):
    """Costs uniform on [0, 1], two bidders, maximum price p: the payment is
    p P(C1 < p < C2) + E[C2; C2 < p] = 2p^2(1 - p) + 2p^3/3 = 2p^2 - 4p^3/3 (C2 has density 2x;
    David and Nagaraja 2003, section 2.1; derived here)."""
    return 2 * p * p - 4 * p**3 / 3


@pytest.mark.parametrize("rule", ["first_price", "second_price", "all_pay"])
def test_reverse_sweep_payments_near_the_bottom_of_costs(rule):
    # Once -2.35e-213: the first-price cells came from b_0 plus the reserve's lift, two terms
    # of size 0.5 P(award) whose tiny difference is the payment.
    prices = [1e-5, 1e-10, 1e-20, 1e-60, 1e-100]
    table = A.sweep(M.Uniform(0.0, 1.0), "reverse", [2], prices, [rule], ["expected_payment", "probability_of_award"],
                    own_value=None)
    assert not unreliable(table)
    for _, p, _, pay, award in table["rows"]:
        assert pay > 0.0
        assert pay == pytest.approx(reverse_uniform_two_bidders(p), rel=1e-9), p
        assert award == pytest.approx(2 * p - p * p, rel=1e-12)  # P(min of two uniforms < p)


@pytest.mark.parametrize("model", [M.Uniform(0.0, 1.0), M.Exponential(1.0), M.Gamma(2.0, 1.0), M.Triangular(0.0, 0.0, 1.0),
                                   M.Power(3.0, 1.0), M.LogNormal(median=1.0, sigma=1.0)], ids=lambda m: m.family)
def test_no_negative_payment_when_no_cost_is_negative(model):
    # Costs >= 0, so every payment is >= 0 (the winner is paid at least its cost), at maximum
    # prices from just above the bottom of the costs to well inside them.
    prices = [model.lower + d for d in (1e-300, 1e-200, 1e-100, 1e-40, 1e-12, 1e-6)] + [float(model.ppf(0.5))]
    table = A.sweep(model, "reverse", [2, 3, 10], prices, RULES, ["expected_payment", "expected_bidder_surplus"], own_value=None)
    assert not unreliable(table)
    for row in table["rows"]:
        assert row[3] >= 0.0, row
        assert row[4] is None or row[4] >= 0.0, row


def test_far_reserve_prices_at_the_reserve_with_a_warning():
    # A reserve each value beats with chance below 1e-250 (exponential values, reserve 650:
    # e^-650 = 5e-283): the price is the reserve under every rule, P(sale) = 1 - (1 - e^-650)^3
    # (closed form); the winner's value is beyond the quadratures' reach, so the surpluses are null.
    rep = A.revenue_report(M.Exponential(1.0), "forward", 3, 650.0, 0.0)
    p = float(-mp.expm1(3 * mp.log1p(-mp.exp(-650))))
    for res in rep["results"]:
        assert res["probability_of_sale"] == pytest.approx(p, rel=1e-12)
        assert res["expected_revenue"] == pytest.approx(650.0 * p, rel=1e-12)
        assert res["expected_bidder_surplus"] is None
    assert any("beyond reach" in w for w in rep["warnings"])


def test_bid_strategy_grid_is_audited_in_order():
    # Bids rise with the value and stay below it (Krishna 2009, ch. 2) for a model with a subnormal-free
    # but wide range: the audit raises nothing on an ordinary answer.
    out = A.bid_strategy(M.LogNormal(median=1.0, sigma=3.0), "forward", 4, None, "first_price", points=101)
    bids = [b for b in out["bids"] if b is not None]
    assert np.all(np.diff(bids) >= 0.0)
    assert not unreliable(out)
    assert all(b <= v for b, v in zip(out["bids"], out["values"]) if b is not None)
    assert math.isfinite(bids[-1])


@pytest.mark.parametrize("n", [2, 6])
def test_a_narrow_triangular_scales_as_the_unit_one(client, n):
    # Prices are values, and values scale with the support: with costs triangular on [0, w],
    # every payment and sd is w times that of the unit triangular (a change of units; the unit
    # case is checked against mpmath in tests/test_auctions_reference.py). Once the squares of
    # a width of 2e-167 underflowed: award chances of 1 at a maximum price of 0 and sds of 0.
    w = 1.9622020415018433e-167
    figures = {}
    for width in (1.0, w):
        body = {"bidder_costs": {"family": "triangular", "low": 0, "mode": 0, "high": width}, "bidders": n,
                "rules": ["first_price", "second_price", "all_pay"]}
        status, out = post(client, "/v1/revenue", body)
        assert status == 200 and not unreliable(out)
        figures[width] = [(r["expected_payment"], r["payment_sd"]) for r in out["results"]]
        table = A.sweep(M.Triangular(0.0, 0.0, width), "reverse", [n], [0.0, width], ["first_price", "second_price", "all_pay"],
                        ["expected_payment", "payment_sd", "probability_of_award"])
        assert [row[5] for row in table["rows"]] == [0.0] * 3 + [1.0] * 3
        assert [x for row in table["rows"][3:] for x in row[3:5]] == pytest.approx([x for f in figures[width] for x in f], rel=1e-9)
    assert [x for f in figures[w] for x in f] == pytest.approx([w * x for f in figures[1.0] for x in f], rel=1e-12)


def test_reserve_for_values_far_above_the_sellers_own_lies_at_the_virtual_values_root(client):
    # Myerson (1981): psi(r) = r - S(r)/f(r) = v0, and psi(r) <= r puts r at or above v0. For
    # power values F = ((x - a)/w)^k, psi(a + w y) = a + w y - w (1 - y^k) / (k y^(k-1)); the
    # root below is solved by mpmath at 50 digits. Once the reserve came back as the bottom of
    # the support (-1e150): every probe of the search lay above the root.
    a, w, k = -1e150, 2e150, 1e10
    status, out = post(client, "/v1/reserve-price", {"bidder_values": {"family": "power", "exponent": k, "low": a, "high": a + w},
                                                     "bidders": 6})
    assert status == 200 and out["regular"] is True
    with mp.workdps(50):  # in d = 1 - y, as logs of the two sides over w; the root lies near d = log(k / 2) / k
        d = mp.findroot(lambda d: mp.log(1 - (1 - d) ** k) - mp.log(k) - (k - 1) * mp.log1p(-d) - mp.log(a / w + 1 - d),
                        (mp.mpf("1e-9"), mp.mpf("1e-8")), solver="illinois")
        want = float(a + w * (1 - d))
    assert out["optimal_reserve"] == pytest.approx(want, rel=1e-12)


def test_a_reserve_among_values_that_rounding_cannot_tell_apart_is_refused(client):
    # sd 1e-300 about -1e150: every quantile rounds to -1e150, so no reserve can be placed among them
    status, out = post(client, "/v1/reserve-price", {"bidder_values": {"family": "normal", "mean": -1e150, "sd": 1e-300}, "bidders": 6})
    assert status == 422 and out["errors"][0]["field"] == "bidder_values"


@pytest.mark.parametrize("shape,scale,r", [(30.0, 5200.0, None), (30.0, 5200.0, 140000.0), (200.0, 3.0, 590.0)])
def test_a_lone_bidder_keeps_its_value_above_the_reserve_in_a_thin_lower_tail(shape, scale, r):
    # One bidder pays the reserve (or the bottom of the support, 0): its surplus is E[(X - r)^+] =
    # k theta S_{k+1}(r) - r S_k(r) for gamma values (integrating x f_k(x) = k theta f_{k+1}(x), a
    # textbook identity), scipy.stats for S. A gamma of large shape has Q(u) ~ u^(1/k) at the bottom,
    # where the quadrature for the values stopped short of the surplus' S/f integrand (found by the
    # simulation check: 145,419 instead of 156,000). The sweep's lone-bidder row agrees.
    from scipy import stats as st

    from service.core import sweeps
    model = M.Gamma(shape, scale)
    cut = 0.0 if r is None else r
    want = shape * scale * st.gamma(shape + 1, scale=scale).sf(cut) - cut * st.gamma(shape, scale=scale).sf(cut)
    got = A.revenue_report(model, "forward", 1, r, 0.0, rules=["second_price"])["results"][0]["expected_winner_surplus"]
    assert got == pytest.approx(want, rel=1e-10)
    row = sweeps.sweep(model, "forward", [1], [cut], ["second_price"], ["expected_winner_surplus"])["rows"][0]
    assert row[3] == pytest.approx(want, rel=1e-10)
