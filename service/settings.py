"""Service settings from environment variables (all listed in README)."""
from __future__ import annotations

import os
from dataclasses import dataclass, fields


def _whole(name, raw):
    try:
        value = int(raw)
    except (TypeError, ValueError):
        raise SystemExit(f"{name} must be a whole number, not {raw!r}") from None
    if value < 1:
        raise SystemExit(f"{name} must be at least 1")
    return value


def _seconds(name, raw):
    try:
        value = float(raw)
    except (TypeError, ValueError):
        raise SystemExit(f"{name} must be a number of seconds, not {raw!r}") from None
    if not 0 < value < 86400:
        raise SystemExit(f"{name} must be more than 0 and less than a day")
    return value


@dataclass(frozen=True)
class Caps:
    """Per-request caps, enforced while a request loads, before any work."""

    bidders: int = 1_000_000
    bidder_counts: int = 400
    groups: int = 6
    draws: int = 1_000_000
    ranks: int = 50
    quantiles: int = 200
    curve_points: int = 2001
    grid_points: int = 401
    points: int = 10_000
    sample: int = 10_000
    components: int = 50
    body_bytes: int = 2_000_000
    batch_items: int = 1000
    sweep_rows: int = 200_000
    sweep_axis: int = 2000
    fit_auctions: int = 20_000
    seconds: float = 10.0
    response_bytes: int = 32_000_000
    heavy_slots: int = 1
    heavy_after: float = 0.25

    @classmethod
    def from_settings(cls, environ=None, config=None):
        """The caps from the environment (``environ``, default os.environ), each overridden
        by the same name in ``config`` (``create_app``'s), checked alike."""
        environ = os.environ if environ is None else environ
        config = config or {}
        values = {}
        for field in fields(cls):
            name = ENV_NAMES[field.name]
            raw = config.get(name, environ.get(name))
            if raw is None or raw == "":
                continue
            values[field.name] = _seconds(name, raw) if field.type == "float" else _whole(name, raw)
        return cls(**values)


#: Each cap's environment variable (and create_app config key).
ENV_NAMES = {
    "bidders": "BIDSTATS_MAX_BIDDERS", "bidder_counts": "BIDSTATS_MAX_BIDDER_COUNTS", "groups": "BIDSTATS_MAX_GROUPS", "draws": "BIDSTATS_MAX_DRAWS", "ranks": "BIDSTATS_MAX_RANKS", "quantiles": "BIDSTATS_MAX_QUANTILES",
    "curve_points": "BIDSTATS_MAX_CURVE_POINTS", "grid_points": "BIDSTATS_MAX_GRID_POINTS", "points": "BIDSTATS_MAX_POINTS",
    "sample": "BIDSTATS_MAX_SAMPLE", "components": "BIDSTATS_MAX_COMPONENTS", "body_bytes": "BIDSTATS_MAX_BODY_BYTES",
    "batch_items": "BIDSTATS_MAX_BATCH_ITEMS", "sweep_rows": "BIDSTATS_MAX_SWEEP_ROWS", "sweep_axis": "BIDSTATS_MAX_SWEEP_AXIS",
    "fit_auctions": "BIDSTATS_MAX_FIT_AUCTIONS",
    "seconds": "BIDSTATS_MAX_SECONDS", "response_bytes": "BIDSTATS_MAX_RESPONSE_BYTES", "heavy_slots": "BIDSTATS_HEAVY_SLOTS",
    "heavy_after": "BIDSTATS_HEAVY_AFTER",
}

#: The caps outside an app (the app's own are in ``app.extensions["bidstats.caps"]``).
CAPS = Caps.from_settings()
