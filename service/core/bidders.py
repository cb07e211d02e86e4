"""How many bidders take part, as one object the core takes wherever a count is needed.

``Bidders`` holds a distribution over the count n. Today every request gives one n
with probability 1; the object is where the probability of a sale, expectations over
n and the single-bidder case live, so that a distribution over n (Poisson, binomial,
a table) changes this module and the figures that mix over it, not every caller.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cached_property

import numpy as np


@dataclass(frozen=True)
class Bidders:
    """P(N = n) for each count n that can occur: ``counts`` increasing, ``weights`` summing to 1."""

    counts: tuple
    weights: tuple

    @classmethod
    def exactly(cls, n):
        """n bidders for certain."""
        return cls((int(n),), (1.0,))

    @classmethod
    def of(cls, bidders):
        """A ``Bidders`` as given, or exactly n for an integer n."""
        return bidders if isinstance(bidders, cls) else cls.exactly(bidders)

    # n, rivals and lone are asked for in every inner loop of a report: each is computed once
    # (cached_property writes past the frozen dataclass's __setattr__; the counts never change).

    @cached_property
    def n(self):
        """The count, where it is certain (every route today needs one)."""
        if len(self.counts) != 1:
            raise ValueError("this figure needs a certain number of bidders")
        return self.counts[0]

    @cached_property
    def rivals(self):
        """The count each bidder faces, n - 1, as a float (the exponent of F in G = F^(n-1))."""
        return self.n - 1.0

    @cached_property
    def lone(self):
        """Whether a single bidder takes part for certain: no rival to beat, so it pays the floor."""
        return self.counts == (1,)

    def expect(self, figure):
        """E[figure(n)] over the count."""
        return sum(w * figure(n) for n, w in zip(self.counts, self.weights))

    def p_sale(self, s_floor):
        """P(some value beats the floor) = E[1 - F(floor)^N], from s = -log F(floor) (a float,
        or an array for many floors; inf where the floor binds nowhere), through expm1 so that
        a floor near the top keeps its digits."""
        if np.ndim(s_floor) == 0:
            s = float(s_floor)
            return self.expect(lambda n: -math.expm1(-n * s) if math.isfinite(s) else 1.0)
        s = np.asarray(s_floor, float)
        finite = np.isfinite(s)
        with np.errstate(over="ignore", invalid="ignore"):
            return self.expect(lambda n: np.where(finite, -np.expm1(-n * np.where(finite, s, 0.0)), 1.0))

    def to_params(self):
        """The JSON a user sends for this count: the integer n."""
        return self.n
