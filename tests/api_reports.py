"""The core's reports as a caller of the API reads them: each report passed through the web
layer's wording, which names its keys for the direction (payment, award, costs) and adds
the assumptions and notes. The reference tests check figures under those names."""
from __future__ import annotations

from service.core import reports, reserve


def revenue_report(*args, **kwargs):
    return reports.revenue_report(*args, **kwargs)


def bid_strategy(*args, **kwargs):
    return reports.bid_strategy(*args, **kwargs)


def reserve_report(*args, **kwargs):
    return reserve.reserve_report(*args, **kwargs)
