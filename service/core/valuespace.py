"""Integrals over values by Gauss-Legendre panels that refine themselves: the route for
integrands in value space (the ascending clock's price, the payoff between two reserves).

A panel spanning a wide ratio on one side of zero runs in log|x|, where a power-law tail
becomes an exponential that the rule integrates exactly; a panel whose 24- and 16-node
rules disagree is halved, so that steep stretches are refined where they are.
"""
from __future__ import annotations

import math

import numpy as np

from . import budget
from . import orderstats as os_


def value_spans(edges):
    """Panels, whether each lies on one side of zero, and its |log(b / a)| there: taken as
    log|b| - log|a|, since b / a overflows from a subnormal floor (1e-315) up to 1."""
    a, b = edges[:-1], edges[1:]
    same_side = np.sign(a) * np.sign(b) > 0
    with np.errstate(divide="ignore"):
        gap = np.log(np.abs(np.where(same_side, b, 1.0))) - np.log(np.abs(np.where(same_side, a, 1.0)))
    return a, b, same_side, np.abs(gap)


def widened(edges):
    """Edges with every panel spanning more than e^3 on one side of zero cut into pieces."""
    a, b, _, log_ratio = value_spans(edges)
    wide = np.nonzero(log_ratio > 3.0)[0]
    if wide.size:
        extra = [math.copysign(v, a[i]) for i in wide
                 for v in np.geomspace(abs(a[i]), abs(b[i]), min(int(log_ratio[i] / 3.0), 400) + 2)[1:-1]]
        edges = np.unique(np.concatenate((edges, extra)))
    return edges


def _value_panel_sums(la, lb, logp, sgn, integrand):
    """Per panel, the 24-node and the 16-node Gauss-Legendre integrals of
    ``integrand`` over [la, lb], in x or (where ``logp``) in y = log|x|, dx = x dy.
    Both rules' nodes go to ``integrand`` in one call."""
    half, mid = 0.5 * (lb - la), 0.5 * (lb + la)
    pts = mid[:, None] + half[:, None] * os_.BOTH_NODES
    hw = half[:, None] * os_.BOTH_WEIGHTS
    if logp.any():
        pts[logp] = sgn[logp, None] * np.exp(pts[logp])
        hw = np.where(logp[:, None], hw * pts, hw)
    sums = (hw * integrand(pts)) @ os_.RULE_COLUMNS
    return sums[:, 0], sums[:, 1]


def refined_value_integral(la, lb, logp, sgn, integrand, offset_scale, rtol=2e-14, max_panels=4000):
    """Both rules' integrals over all panels, halving (in each panel's own coordinate)
    any panel whose two rules disagree by more than rtol of the whole, so that steep
    stretches the fixed edges do not resolve (a mixture's far-apart components) are
    refined where they are and nowhere else."""
    hi, lo = _value_panel_sums(la, lb, logp, sgn, integrand)
    while True:
        budget.check()
        bad = np.abs(hi - lo) > rtol * (offset_scale + np.abs(hi).sum())
        if not bad.any() or len(la) + np.count_nonzero(bad) > max_panels:
            break
        mid = 0.5 * (la[bad] + lb[bad])
        na, nb = np.concatenate((la[bad], mid)), np.concatenate((mid, lb[bad]))
        nlog, nsgn = np.tile(logp[bad], 2), np.tile(sgn[bad], 2)
        nhi, nlo = _value_panel_sums(na, nb, nlog, nsgn, integrand)
        keep = ~bad
        la, lb = np.concatenate((la[keep], na)), np.concatenate((lb[keep], nb))
        logp, sgn = np.concatenate((logp[keep], nlog)), np.concatenate((sgn[keep], nsgn))
        hi, lo = np.concatenate((hi[keep], nhi)), np.concatenate((lo[keep], nlo))
    return float(hi.sum()), float(lo.sum())
