"""The audit every report passes through (service/core/audit.py): inconsistent reports
get a warning naming the figure, breaks within rounding are set onto the bound, and
consistent reports pass untouched. The laws are the textbook ones named beside each."""
from __future__ import annotations

import copy

import pytest

from service.core import audit
from service.core import models as M
from service.web import wording

U01 = M.Uniform(0.0, 1.0)


def top_report(**changes):
    """A consistent top-values report for 3 uniform values on [0, 1]: rank r of n is
    Beta(n - r + 1, r), mean (n - r + 1)/(n + 1) (David and Nagaraja 2003, section 2.1)."""
    rep = {
        "bidders": 3,
        "results": [
            {"rank": 1, "mean": 0.75, "sd": 0.19, "quantiles": [{"p": 0.25, "value": 0.63}, {"p": 0.75, "value": 0.91}]},
            {"rank": 2, "mean": 0.5, "sd": 0.22, "quantiles": [{"p": 0.25, "value": 0.33}, {"p": 0.75, "value": 0.67}]},
        ],
        "expected_gap": 0.25,
        "warnings": [],
    }
    for path, value in changes.items():
        *keys, last = path.split(".")
        node = rep
        for k in keys:
            node = node[int(k)] if k.isdigit() else node[k]
        node[int(last) if last.isdigit() else last] = value
    return rep


def notes(report):
    return [w for w in report["warnings"] if "not reliable" in w]


def test_a_consistent_report_passes_untouched():
    rep = top_report()
    before = copy.deepcopy(rep)
    assert audit.top_values(rep, U01) == before


@pytest.mark.parametrize("change,named", [
    ({"results.1.mean": 0.8}, "results.1.mean"),  # rank 2 above rank 1
    ({"results.0.sd": -0.1}, "results.0.sd"),  # a negative sd
    ({"results.0.quantiles.1.value": 0.5}, "results.0.quantiles.1"),  # quantiles falling with p
    ({"results.1.quantiles.1.value": 0.95}, "results.1.quantiles.1.value"),  # rank 2's quantile above rank 1's
    ({"results.0.mean": 1.5}, "results.0.mean"),  # a mean outside the support [0, 1]
    ({"expected_gap": -0.01}, "expected_gap"),
])
def test_top_value_breaks_are_named(change, named):
    rep = audit.top_values(top_report(**change), U01)
    assert any(w.startswith(named + " ") for w in notes(rep)), rep["warnings"]


def test_a_break_within_rounding_is_set_onto_the_bound():
    # rank 2's mean one unit in the last place above rank 1's: equal to the precision stated.
    rep = audit.top_values(top_report(**{"results.0.mean": 0.5, "results.1.mean": 0.5000000000000001}), U01)
    assert rep["results"][1]["mean"] == 0.5 and not notes(rep)
    # A surplus is a difference of figures of the revenue's size: -1e-17 beside a revenue of 0.5
    # is rounding, and is set to 0; -1e-17 as a revenue with nothing to round against is not.
    rep = audited(audit.revenue, revenue_report(expected_bidder_surplus=-1e-17), U01, None, 0.0)
    assert rep["results"][0]["expected_bidder_surplus"] == 0.0 and not notes(rep)
    rep = audited(audit.revenue, revenue_report(mean=-1e-17), U01, None, 0.0)
    assert notes(rep)


def test_curve_breaks_are_named():
    rep = top_report()
    rep["results"][0]["curve"] = {"x": [0.0, 0.5, 1.0], "pdf": [0.0, -2.0, 1.0], "cdf": [0.0, 0.7, 0.6]}
    rep = audit.top_values(rep, U01)
    assert any(w.startswith("results.0.curve.pdf.1 ") for w in notes(rep))
    assert any(w.startswith("results.0.curve.cdf.2 ") for w in notes(rep))


def test_joint_density_breaks_are_named():
    rep = audit.joint_density({"density": [[1.0, -3.0]], "mass": -0.5, "warnings": []})
    assert any(w.startswith("density.0.1 ") for w in notes(rep)) and any(w.startswith("mass ") for w in notes(rep))
    rep = audit.joint_density({"points": [{"higher": 1.0, "lower": 0.5, "density": -1.0}], "warnings": []})
    assert any(w.startswith("points.0 ") for w in notes(rep))


def _renamed(value, names):
    if isinstance(value, dict):
        return {names.get(k, k): _renamed(v, names) for k, v in value.items()}
    if isinstance(value, list):
        return [_renamed(v, names) for v in value]
    return value


def audited(check, report, *args):
    """An auction report's audit as its caller reads it: the report, written under the caller's
    names, is checked under the core's (revenue, sale, values) and its figures and findings named
    back for its direction by the web layer (service/web/wording.py); in place, as the audit works."""
    d = report["direction"]
    core = _renamed(report, wording.CORE_NAMES[d])
    if "columns" in core:
        core["columns"] = [wording.CORE_NAMES[d].get(c, c) for c in core["columns"]]
    out = check(core, *args)
    named = _renamed({k: v for k, v in out.items() if k != "warnings"}, wording.NAMES[d])
    if "columns" in named:
        named["columns"] = [wording.name(c, d) for c in named["columns"]]
    named["warnings"] = [wording.warning(w, d) for w in out["warnings"]]
    report.clear()
    report.update(named)
    return report


def revenue_report(direction="forward", reserve=None, bidders=3, **figures):
    mean_k, sd_k, q_k, p_k = (("expected_revenue", "revenue_sd", "revenue_quantiles", "probability_of_sale") if direction == "forward"
                              else ("expected_payment", "payment_sd", "payment_quantiles", "probability_of_award"))
    # Uniform [0, 1], 3 bidders, no reserve: revenue 1/2 under every rule (Krishna 2009, ch. 2);
    # E[highest] = 3/4, so the bidders keep 1/4. Reverse: costs, payment 1/2, E[lowest] = 1/4.
    res = {"rule": "second_price", mean_k: 0.5, sd_k: 0.22, q_k: [{"p": 0.25, "value": 0.33}, {"p": 0.75, "value": 0.67}],
           p_k: 1.0, "expected_winner_surplus": 0.25, "expected_bidder_surplus": 0.25, "efficiency": 1.0}
    res.update({(mean_k if k == "mean" else k): v for k, v in figures.items()})
    return {"direction": direction, "bidders": bidders, "reserve": reserve, "results": [res], "warnings": []}


@pytest.mark.parametrize("direction,figures,named", [
    ("forward", {"probability_of_sale": 1.2}, "results.0.probability_of_sale"),
    ("forward", {"efficiency": -0.1}, "results.0.efficiency"),
    ("forward", {"revenue_sd": -1.0}, "results.0.revenue_sd"),
    ("forward", {"expected_bidder_surplus": -0.1}, "results.0.expected_bidder_surplus"),  # revenue above E[highest]
    ("forward", {"mean": -2e-213}, "results.0.expected_revenue"),  # negative revenue, no value negative
    ("reverse", {"mean": -2.35e-213}, "results.0.expected_payment"),  # the sign slip once seen in a sweep
    ("reverse", {"probability_of_award": -0.5}, "results.0.probability_of_award"),
])
def test_revenue_breaks_are_named(direction, figures, named):
    rep = audited(audit.revenue, revenue_report(direction, **figures), U01, None, 0.0)
    assert any(w.startswith(named + " ") for w in notes(rep)), rep["warnings"]


def test_revenue_floor_and_ceiling():
    # A winner-pays price is at least the reserve (forward) and at most the maximum price (reverse).
    rep = audited(audit.revenue, revenue_report("forward", reserve=0.6, mean=0.3, probability_of_sale=0.784), U01, 0.6, 0.0)
    assert any("at least the floor" in w for w in notes(rep))
    rep = audited(audit.revenue, revenue_report("reverse", reserve=0.4, mean=0.5, probability_of_award=0.784), U01, 0.4, 0.0)
    assert any("at most the maximum price" in w for w in notes(rep))
    # A lone bidder pays a reserve below the support: no break.
    rep = audited(audit.revenue, revenue_report("forward", reserve=-5.0, bidders=1, mean=-5.0), U01, -5.0, 0.0)
    assert not notes(rep)


def test_consistent_revenue_reports_pass_untouched():
    for direction in ("forward", "reverse"):
        rep = revenue_report(direction)
        before = copy.deepcopy(rep)
        assert audited(audit.revenue, rep, U01, None, 0.0) == before


def bid_report(direction, at, bids, rule="first_price", bidders=3):
    key = "values" if direction == "forward" else "costs"
    return {"direction": direction, "rule": rule, "bidders": bidders, key: at, "bids": bids, "warnings": []}


def test_bid_breaks_are_named():
    # Forward: a bid above the value and one falling as the value rises (b(v) = 2v/3 for three
    # uniform bidders rises and stays below v; Krishna 2009, ch. 2).
    rep = audited(audit.bids, bid_report("forward", [0.3, 0.6, 0.9], [0.2, 0.7, 0.5]), U01, None)
    assert any(w.startswith("bids.1 ") and "between the floor and the value" in w for w in notes(rep))
    assert any(w.startswith("bids.2 ") and "rises" in w for w in notes(rep))
    # Reverse: an ask below the cost.
    rep = audited(audit.bids, bid_report("reverse", [0.3, 0.6], [0.2, 0.8]), U01, None)
    assert any(w.startswith("bids.0 ") for w in notes(rep))
    # A consistent answer passes untouched.
    rep = bid_report("forward", [0.3, 0.6, 0.9], [0.2, 0.4, 0.6])
    assert audited(audit.bids, rep, U01, None)["bids"] == [0.2, 0.4, 0.6] and not notes(rep)


def test_reserve_price_breaks_are_named():
    rep = {"direction": "forward", "optimal_reserve": 1.5, "expected_revenue_at_optimum": 0.53, "expected_revenue_without_reserve": 0.5,
           "probability_of_sale_at_optimum": 1.1, "expected_payoff_at_optimum": 0.4, "warnings": []}
    rep = audited(audit.reserve_price, rep, U01, 0.0)
    assert {w.split(" ")[0] for w in notes(rep)} == {"optimal_reserve", "probability_of_sale_at_optimum", "expected_payoff_at_optimum"}


def test_sweep_breaks_are_named():
    table = {"direction": "reverse", "columns": ["bidders", "reserve", "rule", "expected_payment", "probability_of_award", "efficiency"],
             "rows": [[2, 0.5, "first_price", -2.35e-213, 0.75, 1.0], [2, 0.5, "second_price", 0.4, 1.5, 1.0000000000000002]],
             "warnings": []}
    table = audited(audit.sweep, table, U01)
    assert any(w.startswith("rows.0.expected_payment ") for w in notes(table))
    assert any(w.startswith("rows.1.probability_of_award ") for w in notes(table))
    assert table["rows"][1][5] == 1.0  # efficiency one unit in the last place above 1: set onto it


def test_rules_that_break_revenue_equivalence_are_named():
    # Under the stated assumptions every rule's expected revenue is the same (Myerson 1981;
    # Riley and Samuelson 1981): a rule 1e-6 away from the others is named, one 1e-14 away is not.
    rep = revenue_report()
    first = rep["results"][0]
    rep["results"] = [dict(first, rule=r, expected_revenue=x) for r, x in
                      (("first_price", 0.5), ("second_price", 0.5 + 1e-14), ("all_pay", 0.5 + 5e-7))]
    rep = audited(audit.revenue, rep, U01, None, 0.0)
    assert [w.split(" ")[0] for w in notes(rep)] == ["results.2.expected_revenue"]
    table = {"direction": "forward", "columns": ["bidders", "reserve", "rule", "expected_revenue"],
             "rows": [[3, 0.0, "first_price", 0.5], [3, 0.0, "second_price", 0.5], [3, 0.0, "all_pay", 0.49]], "warnings": []}
    assert [w.split(" ")[0] for w in notes(audited(audit.sweep, table, U01, 0.0))] == ["rows.2.expected_revenue"]


def test_efficiency_may_be_negative_only_where_a_trade_can_lose():
    # A reserve below the seller's own value lets the item go to a bidder who values it less:
    # realised gains, and so efficiency, can then be negative; with the reserve at or above it, not.
    rep = audited(audit.revenue, revenue_report(reserve=0.2, efficiency=-0.3, mean=0.5), U01, 0.2, 0.5)
    assert not [w for w in notes(rep) if "efficiency" in w]
    rep = audited(audit.revenue, revenue_report(reserve=0.6, efficiency=-0.3, mean=0.5, probability_of_sale=0.784), U01, 0.6, 0.5)
    assert [w for w in notes(rep) if "efficiency" in w]
