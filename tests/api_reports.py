"""The core's reports as a caller of the API reads them: each report passed through the web
layer's wording, which names its keys for the direction (payment, award, costs) and adds
the assumptions and notes. The reference tests check figures under those names."""
from __future__ import annotations

from service.core import reports, reserve, sweeps
from service.web import wording


def revenue_report(*args, **kwargs):
    return wording.revenue(reports.revenue_report(*args, **kwargs))


def bid_strategy(*args, **kwargs):
    return wording.bids(reports.bid_strategy(*args, **kwargs))


def reserve_report(*args, **kwargs):
    return wording.reserve(reserve.reserve_report(*args, **kwargs))


def metrics(direction):
    """A sweep's metrics under the caller's names for the direction."""
    return [wording.name(m, direction) for m in sweeps.METRICS]


def sweep(model, direction, bidders, reserves, rules, metrics, own_value=None):
    """The core's sweep, asked and answered under the caller's names."""
    core = [wording.CORE_NAMES[direction].get(m, m) for m in metrics]
    return wording.sweep(sweeps.sweep(model, direction, bidders, reserves, rules, core, own_value))
