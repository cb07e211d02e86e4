"""How many bidders take part, as one object the core takes wherever a count is needed.

``Bidders`` holds a distribution over the count N: one n for certain, a Poisson or a
binomial count, or a table. Bidders know the distribution, not the realised count. What
depends on the count alone is here: the probability of a sale, expectations over N, the
chance that a rank exists, and the count's generating function H(u) = E[u^N], which is
the distribution of the highest value (P(X1 <= x) = H(F(x))) and whose derivative gives
the highest rival's: a bidder who takes part faces k rivals with chance
(k + 1) P(N = k + 1) / E[N], so P(highest rival <= x) = H'(F(x)) / E[N] (Krishna, Auction
Theory, 2nd ed., 2009, ch. 3).

A Poisson or binomial count keeps the counts whose tails beyond them are below
``TAIL``; the probability set aside is reported (``numerics``) and the rest renormalised.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import cached_property

import numpy as np
from scipy import stats

from .errors import ParameterError

#: Each tail of a Poisson or binomial count beyond the counts kept holds less than this.
TAIL = 5e-17


@dataclass(frozen=True)
class Bidders:
    """P(N = n) for each count n that can occur: ``counts`` increasing, ``weights`` summing to
    1; ``spec`` is the JSON the user sent (None for a bare integer), ``dropped`` the
    probability of the counts set aside, ``entry`` what a costly-entry count found."""

    counts: tuple
    weights: tuple
    spec: dict | None = field(default=None, compare=False, hash=False)
    dropped: float = 0.0
    entry: dict | None = field(default=None, compare=False, hash=False)

    @classmethod
    def exactly(cls, n):
        """n bidders for certain."""
        return cls((int(n),), (1.0,))

    @classmethod
    def of(cls, bidders):
        """A ``Bidders`` as given, or exactly n for an integer n."""
        return bidders if isinstance(bidders, cls) else cls.exactly(bidders)

    @classmethod
    def _kept(cls, counts, pmf, spec, dropped, entry=None):
        keep = pmf > 0.0
        counts, pmf = np.asarray(counts)[keep], pmf[keep]
        return cls(tuple(int(n) for n in counts), tuple((pmf / pmf.sum()).tolist()), spec, float(dropped), entry)

    @classmethod
    def _tails_cut(cls, dist, top, spec, entry=None):
        """The counts 0..top of ``dist`` whose tails beyond them each hold less than TAIL."""
        span = math.sqrt(dist.var())
        counts = np.arange(max(int(dist.mean() - 12.0 * span) - 20, 0), min(int(dist.mean() + 12.0 * span) + 40, top) + 1)
        below, above = dist.cdf(counts - 1), dist.sf(counts)
        keep = (below < 1.0 - TAIL) & (np.concatenate(([1.0], above[:-1])) >= TAIL)
        keep &= (dist.cdf(counts) >= TAIL)
        counts = counts[keep]
        dropped = float(dist.cdf(counts[0] - 1) + dist.sf(counts[-1]))
        return cls._kept(counts, dist.pmf(counts), spec, dropped, entry)

    @classmethod
    def poisson(cls, mean):
        """A Poisson count of mean ``mean`` (> 0): the counts whose tails beyond them hold less than TAIL."""
        return cls._tails_cut(stats.poisson(mean), 2**62, {"distribution": "poisson", "mean": mean})

    @classmethod
    def binomial(cls, potential, entry_probability, spec=None, entry=None):
        """Each of ``potential`` bidders takes part with chance ``entry_probability``, independently."""
        q = float(entry_probability)
        spec = spec or {"distribution": "binomial", "potential": potential, "entry_probability": entry_probability}
        if q <= 0.0 or q >= 1.0:
            return cls((0 if q <= 0.0 else int(potential),), (1.0,), spec, 0.0, entry)
        if potential * q < TAIL or potential * (1.0 - q) < TAIL:  # one count holds all but the tail (and scipy's
            nobody = potential * q < TAIL                          # pmf overflows at such q)
            return cls((0 if nobody else int(potential),), (1.0,), spec, potential * (q if nobody else 1.0 - q), entry)
        return cls._tails_cut(stats.binom(potential, q), potential, spec, entry)

    @classmethod
    def table(cls, rows):
        """A table of (count, probability) pairs; the probabilities sum to 1 (checked by the caller)."""
        merged = {}
        for n, p in rows:
            merged[int(n)] = merged.get(int(n), 0.0) + float(p)
        counts = sorted(n for n, p in merged.items() if p > 0.0)
        spec = {"distribution": "table", "probabilities": [{"bidders": int(n), "p": float(p)} for n, p in rows]}
        return cls._kept(np.array(counts), np.array([merged[n] for n in counts]), spec, 0.0)

    # n, rivals and lone are asked for in every inner loop of a report: each is computed once
    # (cached_property writes past the frozen dataclass's __setattr__; the counts never change).

    @cached_property
    def certain(self):
        """Whether the count is one n >= 1 for certain (no bidder at all is mixed: no sale)."""
        return len(self.counts) == 1 and self.counts[0] >= 1

    @cached_property
    def n(self):
        """The count, where it is certain."""
        if not self.certain:
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

    @cached_property
    def may_be_lone(self):
        """Whether a single bidder can take part (who then pays the reserve itself)."""
        return 1 in self.counts

    @cached_property
    def mean(self):
        """E[N]."""
        return self.expect(lambda n: n)

    def expect(self, figure):
        """E[figure(n)] over the count."""
        return sum(w * figure(n) for n, w in zip(self.counts, self.weights))

    def at_least(self, r):
        """P(N >= r): the chance that a rank-r value exists."""
        return sum(w for n, w in zip(self.counts, self.weights) if n >= r)

    @cached_property
    def rival_weights(self):
        """{k: P(a bidder who takes part faces k rivals)} = (k + 1) P(N = k + 1) / E[N]."""
        m = self.mean
        if m == 0.0:  # nobody takes part: one who did would be alone
            return {0: 1.0}
        return {n - 1: n * w / m for n, w in zip(self.counts, self.weights) if n >= 1}

    @cached_property
    def arrays(self):
        """(counts, weights) as float arrays."""
        return np.array(self.counts, float), np.array(self.weights, float)

    def _series(self, coef, power, s):
        """sum_n coef_n F^power_n at F = e^-s (array; s = inf is F = 0, where F^0 = 1)."""
        s = np.asarray(s, float)
        finite = np.where(np.isinf(s), 1e308, s)  # 0 * 1e308 = 0 keeps F^0 = 1 at F = 0
        with np.errstate(over="ignore"):
            return (coef @ np.exp(-np.multiply.outer(power, finite.ravel()))).reshape(s.shape)

    def highest_cdf_s(self, s):
        """H(F) = E[F^N] at F = e^-s (array): the chance that no value exceeds the one with
        -log F = s (no bidder at all included)."""
        n, w = self.arrays
        return self._series(w, n, s)

    def highest_density_s(self, s):
        """H'(F) = E[N F^(N-1)] at F = e^-s (array): the highest value's density over one value's."""
        n, w = self.arrays
        return self._series(w * n, np.maximum(n - 1.0, 0.0), s)

    def second_tail_s(self, s, v, terms=12):
        """P(X2 > x) = E[P(Binomial(N, v) >= 2)] at -log F(x) = s, v = S(x) (arrays), summed term
        by term, sum_{j=2}^{terms} C(n, j) v^j u^(n-j), each term from the last by (n-j)/(j+1) v/u:
        for v small, where 1 - H(u) - v H'(u) would lose its digits (the next term is below
        v^(terms-1) of the first)."""
        s, v = np.broadcast_arrays(np.asarray(s, float), np.asarray(v, float))
        n = np.array(self.counts, float).reshape((-1,) + (1,) * s.ndim)
        w = np.array(self.weights).reshape(n.shape)
        with np.errstate(invalid="ignore", over="ignore", under="ignore"):
            term = np.where(n >= 2, 0.5 * n * (n - 1.0) * v * v * np.exp(-np.maximum(n - 2.0, 0.0) * s), 0.0)
            total = term.copy()
            ratio = v * np.exp(s)  # v / u
            for j in range(2, terms):
                term = term * np.maximum(n - j, 0.0) / (j + 1.0) * ratio
                total += term
        return np.tensordot(w.ravel(), total, axes=1)

    def second_density_s(self, s):
        """H''(F) = E[N (N-1) F^(N-2)] at F = e^-s (array): with (1 - F) it is the second-highest
        value's density over one value's (P(X2 <= x) = H(F) + (1 - F) H'(F))."""
        n, w = self.arrays
        return self._series(w * n * (n - 1.0), np.maximum(n - 2.0, 0.0), s)

    def p_sale(self, s_floor):
        """P(some value beats the floor) = E[1 - F(floor)^N], from s = -log F(floor) (a float,
        or an array for many floors; inf where the floor binds nowhere), through expm1 so that
        a floor near the top keeps its digits. No bidder at all is no sale."""
        if np.ndim(s_floor) == 0:
            s = float(s_floor)
            return self.expect(lambda n: (-math.expm1(-n * s) if math.isfinite(s) else 1.0) if n else 0.0)
        s = np.asarray(s_floor, float)
        finite = np.isfinite(s)
        with np.errstate(over="ignore", invalid="ignore"):
            return self.expect(lambda n: np.where(finite, -np.expm1(-n * np.where(finite, s, 0.0)), 1.0) if n else np.zeros(s.shape))

    def numerics(self):
        """What the report says of the count: the counts summed over and the probability set aside."""
        return {"counts_from": self.counts[0], "counts_to": self.counts[-1], "probability_set_aside": self.dropped}

    def to_params(self):
        """The JSON a user sends for this count: the integer n, or the distribution's object."""
        return self.n if self.spec is None else dict(self.spec)


@dataclass(frozen=True)
class CostlyEntry:
    """N potential bidders who enter at a cost (Levin and Smith 1994): the count follows
    from the value model, the reserve and the cost (``mixing.entry_count``)."""

    potential: int
    entry_cost: float

    def to_params(self):
        return {"distribution": "entry", "potential": self.potential, "entry_cost": self.entry_cost}


def check_counts(count, field, most_counts, most_bidders):
    """A ParameterError at ``field`` when the count spans more counts than ``most_counts``
    or reaches beyond ``most_bidders``: each count kept is one auction's figures."""
    if len(count.counts) > most_counts:
        raise ParameterError(field, f"the count spans {len(count.counts)} numbers of bidders (from {count.counts[0]} to "
                                    f"{count.counts[-1]}); at most {most_counts} are summed over")
    if count.counts[-1] > most_bidders:
        raise ParameterError(field, f"the count reaches {count.counts[-1]} bidders; at most {most_bidders}")
    return count
