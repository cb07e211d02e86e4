"""Observed differences between items: prices and bids scaled to one reference item.

Under multiplicative separability a bidder's value for an item with covariates x is
Gamma(x) u, u drawn from one distribution whatever the item; the equilibrium bids and the
prices then scale by Gamma(x) too, so log bids (log prices) are x'gamma plus an item-free
part, and gamma comes from least squares (Haile, Hong and Shum, Nonparametric tests for
common values in first-price sealed-bid auctions, NBER working paper 10105, 2003, section
4). Each record is divided by exp((x - x_ref)'gamma), the reference item x_ref being the
records' mean of each number and the most frequent level of each category, and the
scaled records are fitted as any others: the model describes the reference item.
The bidder count enters the regression as categories beside the covariates (bids and prices
rise with it). Standard errors are clustered by auction (the bids of one auction share its item).
"""
from __future__ import annotations

import math

import numpy as np

from ..errors import ParameterError

_OBSERVED = ("price", "bids", "winning_bid")


def _column(auctions, name, i_field):
    """A covariate's values over the auctions: numbers, or strings as categories."""
    values = []
    for i, a in enumerate(auctions):
        cov = a.get("covariates") or {}
        if name not in cov:
            raise ParameterError(f"auctions.{i}.covariates.{name}", "missing: every auction needs each covariate asked for")
        values.append(cov[name])
    numeric = all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in values)
    if not numeric and not all(isinstance(v, str) for v in values):
        raise ParameterError(f"covariates.{i_field}", f"{name}: give numbers, or strings (categories), not both")
    if numeric and not all(math.isfinite(v) and abs(v) <= 1e150 for v in values):
        bad = next(i for i, v in enumerate(values) if not (math.isfinite(v) and abs(v) <= 1e150))
        raise ParameterError(f"auctions.{bad}.covariates.{name}", "must be a finite number of at most 1e150 in size")
    if len(set(values)) < 2:
        raise ParameterError(f"covariates.{i_field}", f"{name} takes one value in every record: there is nothing to control for")
    return values, numeric


def _design(auctions, names, given=None):
    """(the columns of x - x_ref, their names, the reference item): the records' own reference
    item, or ``given`` (a bootstrap resample keeps the full sample's item and levels)."""
    cols, labels, reference = [], [], {}
    for j, name in enumerate(names):
        logged = name.startswith("log(") and name.endswith(")")
        key = name[4:-1] if logged else name
        values, numeric = _column(auctions, key, j)
        if numeric:
            x = np.array(values, float)
            if logged:
                if np.any(x <= 0):
                    raise ParameterError(f"covariates.{j}", f"{key}: a logged covariate must be positive")
                x = np.log(x)
            centre = np.mean(x) if given is None else (math.log(given[name][0]) if logged else given[name][0])
            reference[name] = (float(centre) if not logged else float(math.exp(centre)), None)
            cols.append(x - centre)
            labels.append(name)
        else:
            levels, counts = np.unique(values, return_counts=True)
            base, levels = (str(levels[np.argmax(counts)]), levels) if given is None else given[name]
            reference[name] = (base, levels)
            for level in levels:
                if str(level) != base:
                    cols.append(np.array([v == level for v in values], float))
                    labels.append(f"{name}={level}")
    return np.column_stack(cols) if cols else np.empty((len(auctions), 0)), labels, reference


def _observations(auctions):
    """(auction index, log of each price or bid in the caller's direction) over the sold records."""
    rows, ys = [], []
    for i, a in enumerate(auctions):
        for key in _OBSERVED:
            if a.get(key) is None:
                continue
            seen = np.atleast_1d(np.asarray(a[key], float))
            if np.any(seen <= 0):
                raise ParameterError(f"auctions.{i}.{key}", "controlling for covariates takes logs: prices and bids must be positive")
            rows += [i] * len(seen)
            ys += np.log(seen).tolist()
    return np.array(rows, int), np.array(ys)


def homogenize(auctions, names, reference=None):
    """(the auctions scaled to the reference item, the homogenization report); ``reference`` (a
    report's ``_reference``) holds a resample to the full sample's item."""
    X, labels, reference = _design(auctions, names, reference)
    rows, y = _observations(auctions)
    # The bidder count moves prices and bids too (more rivals, higher bids): its levels enter the
    # regression, so that a count that goes with a covariate is not read as the covariate's effect.
    counts = np.array([a["bidders"] for a in auctions])[rows]
    levels = np.unique(counts)
    dummies = [(counts == c).astype(float) for c in levels[1:]]
    Z = np.column_stack((np.ones(len(y)), X[rows], *dummies))
    k = X.shape[1]
    if len(y) <= Z.shape[1] or np.linalg.matrix_rank(Z) < Z.shape[1]:
        raise ParameterError("covariates", "the covariates cannot be told apart from each other with these records")
    coef, *_ = np.linalg.lstsq(Z, y, rcond=None)
    resid = y - Z @ coef
    bread = np.linalg.inv(Z.T @ Z)
    meat = sum(np.outer(s, s) for s in (Z[rows == g].T @ resid[rows == g] for g in np.unique(rows)))
    se = np.sqrt(np.maximum(np.diag(bread @ meat @ bread), 0.0))
    scale = np.exp(X @ coef[1:1 + k])
    out = []
    for a, factor in zip(auctions, scale):
        rec = {key: v for key, v in a.items() if key != "covariates"}
        for key in (*_OBSERVED, "reserve"):
            if rec.get(key) is not None:
                rec[key] = (np.asarray(rec[key], float) / factor).tolist() if key == "bids" else rec[key] / factor
        out.append(rec)
    r2 = max(1.0 - float(resid @ resid) / float(((y - y.mean()) @ (y - y.mean()))), 0.0) if np.ptp(y) > 0 else 1.0
    report = {"coefficients": {lab: {"estimate": float(c), "standard_error": float(s)}
                               for lab, c, s in zip(labels, coef[1:1 + k], se[1:1 + k])},
              "r_squared": r2, "reference": {k: v[0] for k, v in reference.items()},
              "method": "log_least_squares_clustered_by_auction", "_reference": reference}
    return out, report
