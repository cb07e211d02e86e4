"""Service settings from environment variables (all listed in README)."""
from __future__ import annotations

import os
from dataclasses import dataclass


def _int_env(name, default):
    raw = os.environ.get(name)
    if raw is None or raw == "":
        return default
    try:
        value = int(raw)
    except ValueError:
        raise SystemExit(f"{name} must be a whole number, not {raw!r}") from None
    if value < 1:
        raise SystemExit(f"{name} must be at least 1")
    return value


def _seconds_env(name, default):
    raw = os.environ.get(name)
    if raw is None or raw == "":
        return default
    try:
        value = float(raw)
    except ValueError:
        raise SystemExit(f"{name} must be a number of seconds, not {raw!r}") from None
    if not 0 < value < 86400:
        raise SystemExit(f"{name} must be more than 0 and less than a day")
    return value


@dataclass(frozen=True)
class Caps:
    """Per-request caps, enforced while a request loads, before any work."""

    bidders: int = _int_env("BIDSTATS_MAX_BIDDERS", 1_000_000)
    ranks: int = _int_env("BIDSTATS_MAX_RANKS", 50)
    quantiles: int = _int_env("BIDSTATS_MAX_QUANTILES", 200)
    curve_points: int = _int_env("BIDSTATS_MAX_CURVE_POINTS", 2001)
    grid_points: int = _int_env("BIDSTATS_MAX_GRID_POINTS", 401)
    points: int = _int_env("BIDSTATS_MAX_POINTS", 10_000)
    sample: int = _int_env("BIDSTATS_MAX_SAMPLE", 10_000)
    components: int = _int_env("BIDSTATS_MAX_COMPONENTS", 50)
    body_bytes: int = _int_env("BIDSTATS_MAX_BODY_BYTES", 2_000_000)
    batch_items: int = _int_env("BIDSTATS_MAX_BATCH_ITEMS", 1000)
    sweep_rows: int = _int_env("BIDSTATS_MAX_SWEEP_ROWS", 200_000)
    sweep_axis: int = _int_env("BIDSTATS_MAX_SWEEP_AXIS", 2000)
    seconds: float = _seconds_env("BIDSTATS_MAX_SECONDS", 10.0)
    response_bytes: int = _int_env("BIDSTATS_MAX_RESPONSE_BYTES", 32_000_000)
    heavy_slots: int = _int_env("BIDSTATS_HEAVY_SLOTS", 1)
    heavy_after: float = _seconds_env("BIDSTATS_HEAVY_AFTER", 0.25)


CAPS = Caps()
