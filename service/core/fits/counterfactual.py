"""What a fitted model says of an auction to come: the figures of /v1/revenue and
/v1/reserve-price under it, for the bootstrap to put intervals on."""
from __future__ import annotations

from .. import reports, reserve


def counterfactual_figures(model, direction, ask, rules=None):
    """{figure: value} under ``model`` (the caller's direction): each rule's expected revenue
    (payment) as ``expected_revenue.<rule>``, the probability of a sale, and the optimal
    reserve (maximum price), which needs the auctioneer's own value (a seller's defaults to
    0; a buyer's must be given). ``rules`` overrides the rules asked."""
    own = ask.get("own_value")
    rep = reports.revenue_report(model, direction, ask["bidders"], ask.get("reserve"), own, rules or ask["rules"], quantiles=(),
                                 risk_aversion=ask.get("risk_aversion", 0.0))
    out = {f"expected_revenue.{r['rule']}": r["expected_revenue"] for r in rep["results"]}
    out["probability_of_sale"] = rep["results"][0]["probability_of_sale"]
    if own is not None or direction == "forward":
        best = reserve.reserve_report(model, direction, ask["bidders"], 0.0 if own is None else own)
        out["optimal_reserve"] = best["optimal_reserve"]
    return out
