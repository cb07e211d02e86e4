"""A per-call time budget, so that an allowed but pathological request is refused
with a clear error long before the server's worker timeout would kill it.

The caller opens a budget with ``within(seconds)``; long loops in the core call
``check()``, which raises BudgetSpent once the budget is spent. The outermost
budget in a process's main thread also arms a timer signal a little past the
deadline, the hard backstop for Python code that never reaches a ``check()``;
it cannot interrupt one long call into compiled code, so such calls must be
bounded by their inputs beforehand. ``within`` may also take a ``checkpoint``:
a function of the seconds spent so far that each ``check()`` calls (the web
layer uses it to move a request that turns out heavy into a heavy slot).
"""
from __future__ import annotations

import contextlib
import contextvars
import signal
import threading
import time

from .errors import ParameterError

#: Seconds past the deadline at which the timer signal interrupts the computation.
BACKSTOP_GRACE = 0.5

_deadline = contextvars.ContextVar("bidstats_deadline", default=None)
_checkpoint = contextvars.ContextVar("bidstats_checkpoint", default=None)
_started = contextvars.ContextVar("bidstats_started", default=None)


class BudgetSpent(ParameterError):
    """The request needs more computation than one request may take."""

    def __init__(self):
        super().__init__("(request)", "this request needs more computation than one request may take "
                                      "(BIDSTATS_MAX_SECONDS); ask for fewer bidder counts, components, points or items")


def _on_alarm(signum, frame):
    raise BudgetSpent()


@contextlib.contextmanager
def _backstop(seconds):
    """Arm SIGALRM ``seconds`` from now, where this thread may own it; disarm on exit."""
    if not seconds or threading.current_thread() is not threading.main_thread() or not hasattr(signal, "setitimer"):
        yield
        return
    previous = signal.signal(signal.SIGALRM, _on_alarm)
    signal.setitimer(signal.ITIMER_REAL, seconds)
    try:
        yield
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, previous)


@contextlib.contextmanager
def within(seconds, checkpoint=None):
    """Run the body under a deadline ``seconds`` from now (an outer, earlier one wins)."""
    outer = _deadline.get()
    mine = time.monotonic() + seconds if seconds else None
    deadline = min((d for d in (outer, mine) if d is not None), default=None)
    tokens = [(_deadline, _deadline.set(deadline))]
    if checkpoint is not None:
        tokens += [(_checkpoint, _checkpoint.set(checkpoint)), (_started, _started.set(time.monotonic()))]
    armed = outer is None and deadline is not None
    try:
        with _backstop(deadline - time.monotonic() + BACKSTOP_GRACE if armed else None):
            yield
    finally:
        for var, token in reversed(tokens):
            var.reset(token)


def remaining():
    """Seconds left in the current budget (None when there is none)."""
    deadline = _deadline.get()
    return None if deadline is None else deadline - time.monotonic()


def check():
    """Raise BudgetSpent once the deadline has passed; call the checkpoint, if any."""
    deadline = _deadline.get()
    now = time.monotonic()
    if deadline is not None and now > deadline:
        raise BudgetSpent()
    hook = _checkpoint.get()
    if hook is not None:
        hook(now - _started.get())
