"""Admission: what a request may cost, decided before the work where the request
alone says so, and while it runs where it does not.

- The time budget. Every view runs inside one ``budget.within`` (``request_scope``),
  so a route's computation, its JSON encoding and every item of a batch count
  against BIDSTATS_MAX_SECONDS.
- The answer's size. Each handler declares how many numbers its answer will hold
  (``admit``), estimated from the loaded request; a request's total (a batch adds
  up its items) must stay within BIDSTATS_MAX_RESPONSE_BYTES, or the request gets a
  422 naming the field that sets the size, before any computation.
- Heavy slots. A request whose estimated work (``admit``) is over HEAVY_WORK, or
  that has run for more than BIDSTATS_HEAVY_AFTER seconds, must hold one of the
  instance's BIDSTATS_HEAVY_SLOTS slots. Slots are exclusive locks (flock) on files
  that every worker of one gunicorn instance shares (BIDSTATS_SLOT_DIR, made by
  gunicorn.conf.py), so heavy requests can never occupy every worker: /healthz,
  /readyz and ordinary requests keep a worker. The kernel drops a dead worker's
  locks. When every slot is taken the request gets 503 with Retry-After.
"""
from __future__ import annotations

import contextlib
import contextvars
import fcntl
import os
import tempfile

from marshmallow import ValidationError

from .fields import caps
from ..core import budget

#: Bytes one number takes in a JSON answer: 17 significant digits, an exponent and a separator.
BYTES_PER_NUMBER = 24
#: Estimated work above which a request is heavy. A unit is roughly one parametric model's
#: revenue under one rule (1 to 3 ms here); 100 units are a few tenths of a second.
HEAVY_WORK = 100.0
#: Seconds a client is asked to wait when every heavy slot is taken.
RETRY_AFTER = 2


class Busy(Exception):
    """Every heavy slot of this instance is taken; the caller should retry later."""


_state = contextvars.ContextVar("bidstats_admission", default=None)


class _RequestState:
    def __init__(self, slots):
        self.slots, self.numbers, self.work, self.fd = slots, 0, 0.0, None

    def promote(self):
        """Hold a heavy slot from now on (no-op if held): Busy when none is free."""
        if self.fd is None:
            self.fd = self.slots.acquire()
            if self.fd is None:
                raise Busy()

    def checkpoint(self, spent):
        if self.fd is None and spent > caps().heavy_after:
            self.promote()


class Slots:
    """A fixed number of exclusive slots shared by the processes that use one directory."""

    def __init__(self, count, directory=None):
        self.count = count
        self.directory = directory or tempfile.mkdtemp(prefix="bidstats-slots-")
        self._fds = None

    def _open(self):
        if self._fds is None or self._fds[0] != os.getpid():  # file descriptions must not be shared across fork
            paths = [os.path.join(self.directory, f"heavy-{i}") for i in range(self.count)]
            self._fds = (os.getpid(), [os.open(p, os.O_RDWR | os.O_CREAT, 0o600) for p in paths])
        return self._fds[1]

    def acquire(self):
        """A locked slot's descriptor, or None when all are taken."""
        for fd in self._open():
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
                return fd
            except BlockingIOError:
                continue
        return None

    @staticmethod
    def release(fd):
        fcntl.flock(fd, fcntl.LOCK_UN)


@contextlib.contextmanager
def request_scope(slots):
    """One request: its time budget, its answer-size tally and its heavy slot."""
    state = _RequestState(slots)
    token = _state.set(state)
    try:
        with budget.within(caps().seconds, checkpoint=state.checkpoint):
            yield state
    finally:
        _state.reset(token)
        if state.fd is not None:
            slots.release(state.fd)


def admit(work, numbers, field):
    """Count a handler's estimated work and answer size towards its request's (a batch
    adds up its items): 422 at ``field`` when the answer would pass
    BIDSTATS_MAX_RESPONSE_BYTES; a heavy slot (or Busy) when the work passes HEAVY_WORK."""
    state = _state.get()
    if state is None:
        return
    state.numbers += int(numbers)
    state.work += work
    size, cap = state.numbers * BYTES_PER_NUMBER, caps().response_bytes
    if size > cap:
        raise ValidationError({field: [f"The answer would hold about {size:,} bytes; the cap is {cap:,} "
                                       "(BIDSTATS_MAX_RESPONSE_BYTES). Ask for fewer points, rows or items."]})
    if state.work > HEAVY_WORK:
        state.promote()


def model_work(raw):
    """Relative cost of evaluating a value model, from its JSON as the caller wrote it:
    1 for a parametric family, a kernel sample by its size, a mixture the sum of its parts."""
    if not isinstance(raw, dict):
        return 1.0
    if raw.get("family") == "mixture" and isinstance(raw.get("components"), list):
        return 1.0 + sum(model_work(c.get("model")) for c in raw["components"] if isinstance(c, dict))
    if raw.get("family") == "empirical" and isinstance(raw.get("sample"), list):
        return 1.0 + len(raw["sample"]) / 200.0
    return 1.0
