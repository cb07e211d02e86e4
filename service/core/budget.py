"""A per-call time budget, so that an allowed but pathological request is refused
with a clear error before the server's worker timeout kills it.

The caller opens a budget with ``within(seconds)``; long loops in the core call
``check()``, which raises ParameterError once the budget is spent.
"""
from __future__ import annotations

import contextlib
import contextvars
import time

from .errors import ParameterError

_deadline = contextvars.ContextVar("bidstats_deadline", default=None)


@contextlib.contextmanager
def within(seconds):
    outer = _deadline.get()
    mine = time.monotonic() + seconds if seconds else None
    token = _deadline.set(min((d for d in (outer, mine) if d is not None), default=None))
    try:
        yield
    finally:
        _deadline.reset(token)


def check():
    deadline = _deadline.get()
    if deadline is not None and time.monotonic() > deadline:
        raise ParameterError("(request)", "this request needs more computation than one request may take "
                                          "(BIDSTATS_MAX_SECONDS); ask for fewer bidder counts, components or points")
