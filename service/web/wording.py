"""What the answers say, in the caller's direction.

The core computes in one vocabulary, that of a forward auction (revenue, a sale, values),
with figures in the caller's sign. Here a reverse answer's keys are named for a
procurement (payment, award, costs), and the notes and assumptions are written: the
warnings the core names by a code (``notes.Note``) and the audit's findings, whose figure
paths (``notes.Finding``) are named as the caller reads them.
"""
from __future__ import annotations

from ..core import rules as core_rules

#: The core's keys as a reverse auction's caller reads them; a forward caller reads the core's own.
_REVERSE_NAMES = {
    "expected_revenue": "expected_payment",
    "revenue_sd": "payment_sd",
    "revenue_quantiles": "payment_quantiles",
    "probability_of_sale": "probability_of_award",
    "expected_revenue_at_optimum": "expected_payment_at_optimum",
    "expected_revenue_without_reserve": "expected_payment_without_reserve",
    "probability_of_sale_at_optimum": "probability_of_award_at_optimum",
    "values": "costs",
    "bidder_values": "bidder_costs",
    "probability_highest_value_wins": "probability_lowest_cost_wins",
    "expected_value_lost": "expected_cost_excess",
    "top_evaluated_bid": "lowest_evaluated_bid",
}
NAMES = {"forward": {}, "reverse": _REVERSE_NAMES}
#: The caller's names back to the core's, per direction (a sweep's metrics).
CORE_NAMES = {direction: {v: k for k, v in names.items()} for direction, names in NAMES.items()}

_COMMON_ASSUMPTIONS = [
    "symmetric, risk-neutral bidders",
    "symmetric equilibrium play (truthful bidding where it is dominant)",
    "a single indivisible item or contract, no entry costs, no collusion",
]
#: The assumptions under which the figures hold, in the caller's direction.
ASSUMPTIONS = {
    "forward": ["independent private values drawn from the stated value model", *_COMMON_ASSUMPTIONS],
    "reverse": ["independent private costs drawn from the stated cost model", *_COMMON_ASSUMPTIONS],
}

#: The assumption about the count that replaces "no entry costs" when the count is uncertain.
_COUNT_ASSUMPTIONS = {
    "poisson": "a number of bidders drawn independently of their {w}s; bidders know its distribution, not the count",
    "binomial": "a number of bidders drawn independently of their {w}s; bidders know its distribution, not the count",
    "table": "a number of bidders drawn independently of their {w}s; bidders know its distribution, not the count",
    "entry": "costly entry (Levin and Smith 1994): each potential bidder, knowing only the {w} model and the rules, "
             "enters with the chance that leaves it indifferent; entrants do not learn how many entered",
}


def assumptions(direction, bidders, risk=None):
    """The assumptions for this direction, count and risk attitude: an uncertain count says how
    it arises; risk-averse bidders replace risk-neutral ones."""
    out = list(ASSUMPTIONS[direction])
    if risk:
        out[1] = (f"symmetric bidders with constant relative risk aversion {risk['crra']:g} (utility of a gain x is "
                  f"x^{1.0 - risk['crra']:g}); surpluses are in money, not utility")
    if isinstance(bidders, dict):
        w = "value" if direction == "forward" else "cost"
        out[-1] = "a single indivisible item or contract, no collusion"
        out.append(_COUNT_ASSUMPTIONS[bidders["distribution"]].format(w=w))
    return out


#: What a model recovered from past auctions assumes of them, in the caller's direction.
FIT_ASSUMPTIONS = {
    d: [f"independent private {w}s, drawn in every auction from one {w} model (items alike, or scaled to one)",
        "symmetric, risk-neutral bidders; first-price bids from the symmetric equilibrium",
        f"the number of bidders unrelated to their {w}s; a price is the second-{'highest' if d == 'forward' else 'lowest'} "
        f"{w} (or the {'reserve' if d == 'forward' else 'maximum price'})"]
    for d, w in (("forward", "value"), ("reverse", "cost"))
}

#: The words of each ``Note`` code, per direction.
NOTES = {
    "no_sale": {
        "forward": "the reserve is at or above the top of the value model's support: no bidder can beat it, so nothing is sold",
        "reverse": "the maximum price is at or below the bottom of the cost model's support: no bidder can meet it, so "
                   "nothing is awarded",
    },
    "outside_support": {
        "forward": "bids are null at values outside the model's support",
        "reverse": "bids are null at costs outside the model's support",
    },
    "not_taking_part": {
        "forward": "bids are null where the bidder does not take part (value below the reserve)",
        "reverse": "bids are null where the bidder does not take part (cost above the maximum price)",
    },
    "fit_beyond_prices": {
        "forward": "values below the lowest price and above the highest are not identified by the prices: the "
                   "nonparametric model puts that mass within a short distance beyond them",
        "reverse": "costs below the lowest price and above the highest are not identified by the prices: the "
                   "nonparametric model puts that mass within a short distance beyond them",
    },
    "fit_beyond_reserve": {
        "forward": "values below the reserve are not identified by the bids: only their share F(r) is (from how many "
                   "could bid and how many did), and the nonparametric model puts it within a short distance below "
                   "the reserve; a counterfactual with a lower reserve rests on that",
        "reverse": "costs above the maximum price are not identified by the bids: only their share is (from how many "
                   "could bid and how many did), and the nonparametric model puts it within a short distance above "
                   "the maximum price; a counterfactual with a higher maximum price rests on that",
    },
    "fit_bids_not_regular": {
        "forward": "the highest bid a model allows moves with its parameters, so the bids' likelihood is not regular "
                   "(Donald and Paarsch 1993): a fit may sit where that top meets the highest bid, and there the "
                   "bootstrap's intervals can run narrow",
        "reverse": "the lowest bid a model allows moves with its parameters, so the bids' likelihood is not regular "
                   "(Donald and Paarsch 1993): a fit may sit where that bottom meets the lowest bid, and there the "
                   "bootstrap's intervals can run narrow",
    },
    "fit_not_increasing": {
        d: "{count} pseudo-" + w + "s fall where their bids rise: the bids may not come from one symmetric private-" + w
           + " equilibrium, or the sample is thin there" for d, w in (("forward", "value"), ("reverse", "cost"))
    },
    "fit_counts_disagree": {
        d: "the " + w + "s recovered from auctions with different numbers of bidders disagree (p = {p:.3g}): private "
           + w + "s drawn independently of the number of bidders may not hold, and every model here rests on them"
        for d, w in (("forward", "value"), ("reverse", "cost"))
    },
}

_MYERSON = {
    "forward": "Myerson (1981): the reserve where the virtual value equals the auctioneer's own value; it does not depend "
               "on the number of bidders",
    "reverse": "Myerson (1981): the reserve where the virtual cost c + F(c)/f(c) equals the buyer's value; it does not "
               "depend on the number of bidders",
}


#: What the optimum means, by direction and by how ``optimal_reserve`` found it.
_RESERVE_NOTES = {
    "forward": {
        "root": _MYERSON["forward"],
        "none_binds": _MYERSON["forward"] + "; here every value's virtual value already exceeds it, so no reserve binds",
        "kept": _MYERSON["forward"] + "; here no value's virtual value reaches it, so the item is best kept",
        "irregular": "the virtual value is not increasing over the support (an irregular model), so every local maximum "
                     "of the expected payoff over reserves was found, and the highest taken",
        "entry": "with costly entry the reserve also sets who enters (Levin and Smith 1994): the entry probability "
                 "re-solved at each reserve, the seller's expected payoff maximised numerically over the reserve",
    },
    "reverse": {
        "root": _MYERSON["reverse"],
        "none_binds": _MYERSON["reverse"] + "; here every cost's virtual cost is already below it, so no maximum price binds",
        "kept": _MYERSON["reverse"] + "; here no cost's virtual cost is below it, so the contract is best not awarded",
        "irregular": "the virtual cost c + F(c)/f(c) is not increasing over the support (an irregular model), so every "
                     "local maximum of the expected payoff over maximum prices was found, and the highest taken",
        "entry": "with costly entry the maximum price also sets who enters (Levin and Smith 1994): the entry probability "
                 "re-solved at each maximum price, the buyer's expected payoff maximised numerically over it",
    },
}


def name(key, direction):
    """The caller's name for one of the core's keys."""
    return NAMES[direction].get(key, key)


def warning(text, direction):
    """A warning in the caller's words: a Note's per direction, a Finding's path under the caller's names."""
    if hasattr(text, "code"):
        return NOTES[text.code][direction].format(**text.fields)
    if hasattr(text, "path"):
        return ".".join(name(part, direction) for part in text.path.split(".")) + " " + text.text
    return str(text)


def _named(value, direction):
    """A report's dicts, at any depth, under the caller's names; warnings in the caller's words."""
    if isinstance(value, dict):
        return {name(k, direction): (_warnings(v, direction) if k == "warnings" else _named(v, direction))
                for k, v in value.items()}
    if isinstance(value, list):
        return [_named(v, direction) for v in value]
    return value


def _warnings(items, direction):
    return [warning(w, direction) for w in items]


def _with(report, direction, before, extra):
    """The named report with ``extra`` keys placed before the key ``before``."""
    out = {}
    for key, value in _named(report, direction).items():
        if key == before:
            out.update(extra)
        out[key] = value
    return out


def revenue(report):
    """/v1/revenue's answer: the core's report named for its direction, with the assumptions."""
    d = report["direction"]
    return _with(report, d, "bidders", {"assumptions": assumptions(d, report["bidders"], report.get("risk_aversion"))})


def bids(report):
    """/v1/bid-strategy's answer, with what the rule's bids mean and the assumptions."""
    d = report["direction"]
    note = core_rules.get(report["rule"]).note[d]
    if isinstance(report["bidders"], dict) and not core_rules.get(report["rule"]).pricing.truthful:
        note += "; with an uncertain number of bidders, G(v) = E over the rival count of F(v)^k (Krishna 2009, ch. 3)"
    if report.get("risk_aversion") and not core_rules.get(report["rule"]).pricing.truthful:
        note += "; under constant relative risk aversion rho, b' = (n-1)/(1-rho) (f/F)(v-b) (Krishna 2009, ch. 4)"
    return _with(report, d, "warnings", {"note": note, "assumptions": assumptions(d, report["bidders"], report.get("risk_aversion"))})


def reserve(report):
    """/v1/reserve-price's answer, with what the optimum means (by how it was found) and the assumptions."""
    d = report["direction"]
    note = _RESERVE_NOTES[d][report["outcome"]]
    if report.get("optimal_reserve_by_rule"):
        note += ("; under risk aversion each rule has its own optimum (optimal_reserve_by_rule): Myerson's for the rules "
                 "where bidding one's " + ("value" if d == "forward" else "cost") + " stays dominant, a numerical search "
                 "for the bid-priced ones; the figures above are those of second price")
    out = _with(report, d, "warnings", {"note": note, "assumptions": assumptions(d, report["bidders"], report.get("risk_aversion"))})
    del out["outcome"]
    return out


def sweep(table):
    """/v1/sweeps' table: its metric columns under the caller's names."""
    d = table["direction"]
    return {**table, "columns": [name(c, d) for c in table["columns"]], "warnings": _warnings(table["warnings"], d)}


def fits(report):
    """/v1/fits' answer: the recovered models named for the direction, with the assumptions; the
    covariates' names, the caller's own, are kept as given."""
    d = report["direction"]
    out = _with({k: v for k, v in report.items() if k != "homogenization"}, d, "warnings", {"assumptions": FIT_ASSUMPTIONS[d]})
    if "homogenization" in report:
        out["homogenization"] = report["homogenization"]
    return out


#: What figures for bidder groups assume, in the caller's direction.
GROUP_ASSUMPTIONS = {
    d: [f"independent private {w}s; each group's {w}s drawn from its own model, which every bidder knows",
        "risk-neutral bidders in equilibrium: truthful bidding where it is dominant (second price, ascending), the "
        "asymmetric first-price equilibrium otherwise (alike within a group)",
        f"a preference ranks a bid b as {'(1 + preference) b' if d == 'forward' else '(1 - preference) b'}; the "
        f"{'reserve' if d == 'forward' else 'maximum price'} is compared with that evaluated bid",
        "a single indivisible item or contract, no entry costs, no collusion"]
    for d, w in (("forward", "value"), ("reverse", "cost"))
}


def _group_finite(value):
    """Floats made JSON-safe at any depth (None for a NaN or an infinity)."""
    from ..core.topvalues import finite

    if isinstance(value, dict):
        return {k: _group_finite(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_group_finite(v) for v in value]
    return finite(value) if isinstance(value, float) else value


def group_revenue(report, key):
    """/v1/revenue's answer for bidder groups, named for its direction, with the assumptions."""
    d = report["direction"]
    out = {"direction": d, "assumptions": GROUP_ASSUMPTIONS[d], **_named(_group_finite(report), d)}
    out["direction"] = d
    return out


def group_bids(report, key):
    """/v1/bid-strategy's answer for bidder groups, with what the rule's bids mean."""
    d = report["direction"]
    out = _named(_group_finite(report), d)
    rule = core_rules.get(report["rule"])
    note = rule.note[d] if rule.pricing.truthful else (
        "each group's equilibrium " + ("bid" if d == "forward" else "ask") + ", from the first-order conditions of the "
        "asymmetric first-price auction solved as a boundary-value problem (Krishna 2009, ch. 4; Fibich and Gavish "
        "2011); numerics.foc_residual is the largest residual of those conditions")
    return {**out, "note": note, "assumptions": GROUP_ASSUMPTIONS[d]}


def group_top_values(report):
    """/v1/top-values' answer for bidder groups (ranks 1 and 2 across the groups)."""
    d = report["direction"]
    return {**_named(_group_finite(report), d), "assumptions": GROUP_ASSUMPTIONS[d][:1]}
