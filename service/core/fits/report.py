"""The /v1/fits report: value (cost) models recovered from past auctions, each with its fit
check, the one selected, bootstrap intervals and counterfactual figures.

Figures come in the caller's direction under the core's names (the web layer names them
per direction, service/web/wording.py). Intervals are percentile intervals of a bootstrap
that resamples whole auctions, never single bids, so the dependence of the bids within an
auction is kept (Efron and Tibshirani, An Introduction to the Bootstrap, 1993, ch. 13).
"""
from __future__ import annotations

import math

import numpy as np
from scipy import stats

from .. import budget
from .. import models as M
from ..errors import ParameterError
from ..notes import Note
from ..topvalues import finite
from . import inversion, mle, simulate
from .counterfactual import counterfactual_figures
from .covariates import homogenize
from .likelihood import log_likelihood, transforms
from .records import BidRecords, PriceRecords, records

#: A candidate whose fit check rejects it at this level is not selected.
REJECT_AT = 0.05
#: The parametric bootstrap of the fit check refits at most this many simulated data sets, and at
#: least this many (below 19 its p-value could never fall under REJECT_AT; 39 lets it reach 0.025).
CHECK_REPLICATIONS = 99
MIN_CHECK_REPLICATIONS = 39


def check_replications(replications):
    """How many simulated data sets the fit check refits: none without a bootstrap, else the
    replications asked for, kept between MIN_CHECK_REPLICATIONS and CHECK_REPLICATIONS."""
    return 0 if replications == 0 else max(min(replications, CHECK_REPLICATIONS), MIN_CHECK_REPLICATIONS)


def _families(asked, data, rec):
    """The families to try: those asked (each must hold the data), or every one that does
    (for first-price bids, none unless asked: each evaluation of their likelihood solves the
    equilibrium bids afresh, too slow to try every family within a request's time)."""
    if asked is None:
        return [] if isinstance(rec, BidRecords) else [f for f in mle.FITTED if mle.applicable(f, data)]
    for i, f in enumerate(asked):
        if f not in mle.FITTED:
            raise ParameterError(f"families.{i}", f"one of {', '.join(mle.FITTED)}")
        if not mle.applicable(f, data):
            raise ParameterError(f"families.{i}", f"{f} holds positive values only, and the data are not all positive")
    return list(asked)


def _ks(u):
    return float(stats.kstest(u, "uniform").statistic) if len(u) else 0.0


def _fit_check(fit, rec, data, sign, rng, replications):
    """(KS distance of the prices' transforms from uniform, its p-value): by parametric
    bootstrap, refitting each simulated data set, so that the estimated parameters are
    accounted for (Stute, Gonzalez Manteiga and Presedo Quindimil, Bootstrap based
    goodness-of-fit tests, Metrika 40, 1993); without replications, Kolmogorov's asymptotic
    p-value, which ignores the estimation (too large)."""
    twin = M.Reflected(fit.model) if sign < 0 else fit.model
    d = _ks(transforms(twin, rec))
    if replications == 0:
        return d, float(stats.kstest(transforms(twin, rec), "uniform").pvalue)
    beyond = 0
    for _ in range(replications):
        budget.check()
        sim = simulate.records_like(twin, rec, rng)
        refit = mle.fit_family(fit.family, sign * sim.start_values, lambda m: log_likelihood(m, sim), sign, fit)
        if refit is None:
            continue
        beyond += _ks(transforms(M.Reflected(refit.model) if sign < 0 else refit.model, sim)) >= d
    return d, (1.0 + beyond) / (1.0 + replications)


def _table_model(xs, cdf, seen, sign):
    """A quantile table through a recovered F (at values ``xs``, forward twin), in the caller's
    direction, its ends a share 1/N of the ``seen`` values' range beyond the lowest and highest
    (values beyond them are not identified: the table goes no further)."""
    xs, cdf = inversion.table_points(xs, cdf)
    if len(xs) < 2:
        raise ParameterError("auctions", "too few distinct prices or bids to recover a distribution: at least 2")
    pad = (seen.max() - seen.min()) / max(len(seen), 1)
    xs = np.concatenate(([seen.min() - pad], xs, [seen.max() + pad]))
    _within_reach(xs)
    cdf = np.concatenate(([0.0], cdf, [1.0]))
    if sign > 0:
        return M.QuantileTable([(float(p), float(x)) for p, x in zip(cdf, xs)])
    return M.QuantileTable([(float(1.0 - p), float(-x)) for p, x in zip(cdf[::-1], xs[::-1])])


#: The largest magnitude a value model may hold anywhere it is sent (StrictFloat's cap).
_MAX_MAGNITUDE = 1e150


def _within_reach(values):
    """Refuse recovered values beyond the magnitude every route accepts: the model could not be sent on."""
    if np.any(np.abs(values) > _MAX_MAGNITUDE):
        raise ParameterError("auctions", f"the recovered values pass {_MAX_MAGNITUDE:g} in size: a model holding them could "
                                         "not be sent to any route; rescale the records (thousands, millions)")


def _nonparametric(rec, sign):
    """(model in the caller's direction, its report entry) by the inversion that fits the records."""
    if isinstance(rec, PriceRecords):
        model = _table_model(*inversion.prices_to_cdf(rec), rec.price[rec.above], sign)
        twin = M.Reflected(model) if sign < 0 else model
        return model, {"method": "athey_haile", "bandwidth": None, "trimmed": 0,
                       "fit": _counts_agree(transforms(twin, rec), rec.n[rec.above])}
    if rec.winners_only:
        xs, cdf, h, falls = inversion.winners_to_cdf(rec)
        model = _table_model(xs, cdf, xs, sign)
        return model, {"method": "guerre_perrigne_vuong_winning_bids", "bandwidth": h, "trimmed": 0, "not_increasing": falls,
                       "fit": _private_values_check(rec)}
    inv = inversion.bids_to_values(rec)
    _within_reach(inv.values)
    try:
        model = _table_model(*inv.cdf, inv.cdf[0], sign) if inv.cdf is not None else M.empirical((sign * inv.values).tolist())
    except ParameterError:
        raise ParameterError("auctions", "every bid recovers the same value: the bids need some spread") from None
    return model, {"method": inv.method, "bandwidth": inv.bandwidth, "trimmed": 0, "not_increasing": inv.not_increasing,
                   "fit": _private_values_check(rec)}


def _counts_agree(u, counts):
    """Under private values one value model lies behind every bidder count, so the prices'
    transforms through the pooled model are uniform in each count alike: the two most frequent
    counts' transforms compared by the two-sample KS test (Athey and Haile 2002, section 6)."""
    levels, seen = np.unique(counts, return_counts=True)
    if len(levels) < 2 or np.sort(seen)[-2] < 5:
        return {"ks_distance": None, "p_value": None}
    a, b = levels[np.argsort(seen)[-2:]]
    test = stats.ks_2samp(u[counts == a], u[counts == b])
    return {"ks_distance": float(test.statistic), "p_value": float(test.pvalue)}


def _private_values_check(rec):
    """Under private values the bids of each bidder count recover one value distribution: the
    pseudo-values of the two most frequent counts compared by the two-sample KS test."""
    counts, seen = np.unique(rec.n, return_counts=True)
    if len(counts) < 2:
        return {"ks_distance": None, "p_value": None}
    a, b = counts[np.argsort(seen)[-2:]]
    if rec.winners_only:  # the winners' values are the highest of n: compare F itself, F_win^(1/n)
        return {"ks_distance": None, "p_value": None}
    # every pseudo-value, not the model's thinned sample (evenly spaced order statistics are no sample)
    xa = inversion.bids_to_values(rec.take(np.nonzero(rec.n == a)[0]), thin=False).values
    xb = inversion.bids_to_values(rec.take(np.nonzero(rec.n == b)[0]), thin=False).values
    test = stats.ks_2samp(xa, xb)
    return {"ks_distance": float(test.statistic), "p_value": float(test.pvalue)}


def _interval(draws, level):
    """The percentile interval [lo, hi] at ``level`` of the finite draws; None with fewer than 10."""
    x = np.asarray([d for d in draws if d is not None and math.isfinite(d)], float)
    if len(x) < 10:
        return None
    tail = 50.0 * (1.0 - level)
    lo, hi = np.percentile(x, [tail, 100.0 - tail])
    return [finite(float(lo)), finite(float(hi))]


def _refit_all(rec, fits, sign, nonparametric):
    """One bootstrap replicate's models: each candidate refitted (warm), and the inversion."""
    data = sign * rec.start_values
    out = {}
    for fit in fits:
        ll = (lambda r: lambda m: log_likelihood(m, r))(rec)
        out[fit.family] = mle.fit_family(fit.family, data, ll, sign, fit)
    if nonparametric:
        try:
            out[None] = _nonparametric(rec, sign)[0]
        except ParameterError:
            out[None] = None
    return out


def _resampler(rec, rule, direction, auctions, covariates, reference):
    """rng -> one bootstrap resample's records: whole auctions drawn with replacement; with
    covariates, the scaling estimated again on each resample, so that the intervals carry its
    uncertainty too."""
    if not covariates:
        return lambda rng: rec.take(rng.integers(0, len(rec.n), len(rec.n)))

    def draw(rng):
        picked = [auctions[i] for i in rng.integers(0, len(auctions), len(auctions))]
        return records(rule, direction, homogenize(picked, list(covariates), reference)[0],
                       1.0 - rec.alpha if isinstance(rec, BidRecords) else 0.0)
    return draw


def _bootstrap(draw, fits, sign, confidence, selected, direction, ask):
    """Per candidate, each parameter's draws; the selected model's counterfactual draws. A
    resample that cannot be fitted (a covariate with one value in it) counts as a failed draw."""
    rng = np.random.default_rng(confidence["seed"])
    params = {f.family: {k: [] for k in f.free} for f in fits}
    figures = {}
    for _ in range(confidence["replications"]):
        budget.check()
        try:
            sample = draw(rng)
        except ParameterError:
            for f in fits:
                for k in f.free:
                    params[f.family][k].append(None)
            continue
        models = _refit_all(sample, fits, sign, selected is None)
        for f in fits:
            got = models.get(f.family)
            for k in f.free:
                params[f.family][k].append(None if got is None else got.params[k])
        if ask is not None:
            chosen = models.get(selected)
            chosen = chosen.model if isinstance(chosen, mle.Fit) else chosen
            try:
                # Every standard rule raises the same expected revenue under the model (revenue
                # equivalence: Myerson 1981), so a replicate takes the quickest route, second price.
                cf = {} if chosen is None else counterfactual_figures(chosen, direction, ask, ["second_price"])
            except ParameterError:
                cf = {}
            for key, value in cf.items():
                figures.setdefault(key, []).append(value)
    return params, figures


def _candidates(rec, data, sign, families, check_reps, rng):
    """The parametric fits, best AIC first, each with its fit check; with the warnings."""
    fits, warnings = [], []
    for family in families:
        fit = mle.fit_family(family, data, lambda m: log_likelihood(m, rec), sign)
        if fit is None:
            what = "prices" if isinstance(rec, PriceRecords) else "bids"
            warnings.append(f"{family}: no parameter value gives these {what} a positive likelihood; not a candidate")
            continue
        fits.append((fit, _fit_check(fit, rec, data, sign, rng, check_reps)))
    fits.sort(key=lambda pair: pair[0].aic)
    return fits, warnings


def _selection(fits, nonparametric):
    """(key, reason): the lowest AIC among candidates whose fit is not rejected at REJECT_AT;
    the nonparametric model when none passes."""
    for fit, (_, p) in fits:
        if p >= REJECT_AT:
            return fit.family, f"{fit.family}: the lowest AIC among the candidates whose fit check is not rejected at {REJECT_AT:g}"
    if nonparametric:
        why = "no parametric candidate passes its fit check" if fits else "no parametric candidate was fitted"
        return None, f"the nonparametric model: {why} (at {REJECT_AT:g})"
    if not fits:
        raise ParameterError("families", "no family tried fits these records and nonparametric is off: try other families "
                                         "or turn nonparametric on")
    return fits[0][0].family, (f"{fits[0][0].family}: the lowest AIC; every candidate's fit check rejects it at "
                               f"{REJECT_AT:g}, and nonparametric is off")


def fit_report(rule, direction, auctions, families=None, nonparametric=True, confidence=None, counterfactual=None,
               covariates=(), risk_aversion=0.0):
    """Models recovered from past auctions under ``rule``, the one selected, intervals and
    counterfactuals; with ``covariates``, for the reference item the records are scaled to.
    ``risk_aversion`` (the bidders' CRRA rho, given, not learnt) enters the first-price
    inversion and the counterfactual."""
    if risk_aversion and rule == "first_price" and families:
        raise ParameterError("families", "under risk aversion first-price bids are inverted nonparametrically only "
                                         "(Campo, Guerre, Perrigne and Vuong 2011); leave families out")
    confidence = {"level": 0.9, "replications": 200, "seed": 0, **(confidence or {})}
    sign = 1.0 if direction == "forward" else -1.0
    homogenization, raw, reference = None, auctions, None
    if covariates:
        auctions, homogenization = homogenize(auctions, list(covariates))
        reference = homogenization.pop("_reference")
    rec = records(rule, direction, auctions, risk_aversion)
    data = sign * rec.start_values
    rng = np.random.default_rng(confidence["seed"])
    check_reps = check_replications(confidence["replications"])
    fits, warnings = _candidates(rec, data, sign, _families(families, data, rec), check_reps, rng)
    np_model, np_entry = _nonparametric(rec, sign) if nonparametric or not fits else (None, None)
    selected, reason = _selection(fits, np_model is not None)
    model = next(f.model for f, _ in fits if f.family == selected) if selected else np_model
    ask = None if counterfactual is None else {"rules": ["first_price", "second_price"], **counterfactual,
                                               **({"risk_aversion": risk_aversion} if risk_aversion else {})}
    params, figures = ({}, {}) if confidence["replications"] == 0 else \
        _bootstrap(_resampler(rec, rule, direction, raw, covariates, reference), [f for f, _ in fits], sign, confidence,
                   selected, direction, ask)
    out = {
        "direction": direction,
        "rule": rule,
        "auctions": len(auctions),
        "bidder_values": model.to_params(),
        "candidates": [_candidate_entry(f, check, params.get(f.family), confidence["level"]) for f, check in fits],
        "nonparametric": None if np_model is None else {"model": np_model.to_params(), **np_entry},
        "selected": {"model": selected or "nonparametric", "reason": reason},
        "numerics": {"optimizer": "nelder_mead", "replications": confidence["replications"], "seed": confidence["seed"],
                     "level": confidence["level"], "fit_check_replications": check_reps},
    }
    if homogenization is not None:
        out["homogenization"] = homogenization
    if ask is not None:
        out["counterfactual"] = _counterfactual_entry(model, direction, ask, figures, confidence["level"])
    if families is None and isinstance(rec, BidRecords):
        warnings.append("no parametric family was fitted: for first-price bids each is fitted only when named in "
                        "families (every evaluation of their likelihood solves the equilibrium bids afresh)")
    if risk_aversion:
        out["risk_aversion"] = {"crra": risk_aversion}
        warnings.append(f"the bids were inverted with the risk aversion given ({risk_aversion:g}), not learnt from them: one "
                        "bidder count cannot tell risk aversion from the value model (Campo, Guerre, Perrigne and Vuong 2011)"
                        if isinstance(rec, BidRecords) else "risk aversion does not change prices under this rule (bidding "
                        "one's value stays dominant); it enters the counterfactual only")
    out["warnings"] = warnings + _inversion_warnings(np_entry) + _data_warnings(rec, nonparametric, selected)
    return out


def _data_warnings(rec, nonparametric, selected):
    """What the records leave unidentified or the request could not have."""
    out = []
    if isinstance(rec, PriceRecords):
        if selected is None:
            out.append(Note("fit_beyond_prices"))
    elif np.isfinite(rec.reserve).any() and selected is None:
        out.append(Note("fit_beyond_reserve"))
    if isinstance(rec, BidRecords) and selected is not None:
        out.append(Note("fit_bids_not_regular"))
    return out


def _candidate_entry(fit, check, draws, level):
    ci = {k: (_interval(draws[k], level) if draws else None) for k in fit.free}
    return {"model": fit.model.to_params(), "log_likelihood": finite(fit.log_likelihood), "aic": finite(fit.aic),
            "parameters_ci": ci, "fit": {"ks_distance": finite(check[0]), "p_value": finite(check[1])}}


def _counterfactual_entry(model, direction, ask, draws, level):
    """Each counterfactual figure under the selected model, with its interval: rules' figures as a
    list, each by its own route, with the one interval they share (revenue equivalence)."""
    values = counterfactual_figures(model, direction, ask)
    entry = {"bidders": ask["bidders"], "reserve": ask.get("reserve"), "expected_revenue": []}
    for key, value in values.items():
        shared = "expected_revenue.second_price" if key.startswith("expected_revenue.") else key
        item = {"value": finite(value), "ci": _interval(draws.get(shared, []), level)}
        if key.startswith("expected_revenue."):
            entry["expected_revenue"].append({"rule": key.split(".", 1)[1], **item})
        else:
            entry[key] = item
    return entry


def _inversion_warnings(entry):
    out = []
    if entry and entry.get("not_increasing"):
        out.append(Note("fit_not_increasing", count=entry["not_increasing"]))
    p = entry["fit"]["p_value"] if entry else None
    if p is not None and p < REJECT_AT:
        out.append(Note("fit_counts_disagree", p=p))
    return out
