"""The auction rules: one registration each, which the revenue report, the bid strategy,
sweeps and the request schemas loop over.

Rules that are strategically the same share a ``Pricing``: what the winner (or every
bidder) pays as a function of the values, and so the price's distribution, its variance
route, its bids and its sweep terms. A rule adds its own revenue route (each rule's
expected revenue is computed by its own route, so that revenue equivalence is a check,
not an identity) and its own words."""
from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

from .errors import ParameterError


@dataclass(frozen=True)
class Pricing:
    """How the price is set: ``second`` (the winner pays max(X2, r); bidding one's value is
    dominant, Vickrey 1961), ``first`` (the winner pays its bid b(X1), Krishna 2009, ch. 2)
    or ``all_pay`` (every bidder pays its bid a(X) = F(X)^(n-1) b(X))."""

    name: str
    truthful: bool
    only_winner_pays: bool


SECOND = Pricing("second", truthful=True, only_winner_pays=True)
FIRST = Pricing("first", truthful=False, only_winner_pays=True)
ALL_PAY = Pricing("all_pay", truthful=False, only_winner_pays=False)


@dataclass(frozen=True)
class AuctionRule:
    """One auction rule: its name, its pricing, its own revenue route (auction -> (mean,
    abs error)), and what its bids mean in each direction (the bid strategy's note)."""

    name: str
    pricing: Pricing
    revenue: Callable
    note: dict


_REGISTRY: dict[str, AuctionRule] = {}
_BUILTINS_LOADED = False


def register(rule):
    """Add a rule (or replace one of the same name); it is then in every report and schema."""
    _REGISTRY[rule.name] = rule
    return rule


def unregister(name):
    _REGISTRY.pop(name, None)


def _with_builtins():
    """The registry, with the five built-in rules, which revenue.py registers beside their
    revenue routes (imported here, not at the top, since revenue.py imports this module;
    once, as sweeps look a rule up for every row)."""
    global _BUILTINS_LOADED
    if not _BUILTINS_LOADED:
        from . import revenue  # noqa: F401

        _BUILTINS_LOADED = True
    return _REGISTRY


def names():
    """The registered rules' names, in the order they were registered."""
    return tuple(_with_builtins())


def get(name, field="rule"):
    """The rule of that name; an unknown name is a ParameterError at ``field``."""
    _with_builtins()
    try:
        return _REGISTRY[name]
    except KeyError:
        raise ParameterError(field, f"one of {', '.join(_REGISTRY)}") from None
