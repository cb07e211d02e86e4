"""The log-likelihood of prices of second-price and ascending auctions under a value model
(forward twin), and the prices' probability integral transforms for the fit check.

With n independent values from F, the price is the second-highest value X(n-1:n) when it
is above the reserve r: density n(n-1) F^(n-2) (1 - F) f; it is r itself when one value
alone clears it: probability n F(r)^(n-1) (1 - F(r)); nothing sells with probability F(r)^n
(David and Nagaraja, Order Statistics, 3rd ed., 2003, section 2.1; Athey and Haile,
Identification of standard auction models, Econometrica 70(6), 2002, section 3).
"""
from __future__ import annotations

import math

import numpy as np
from scipy import special as sp


def _times(k, log_p):
    """k log p with 0 log 0 = 0 (a count of 0 contributes nothing, even where p = 0)."""
    return np.where(k > 0, k * np.where(k > 0, log_p, 0.0), 0.0)


def price_log_likelihood(model, rec):
    """Sum over the records of the log probability (density) of what each saw; -inf where a
    record is impossible under the model (a price outside its support)."""
    total = 0.0
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        if rec.above.any():
            n, p = rec.n[rec.above], rec.price[rec.above]
            log_f = np.log(model.pdf(p))
            total += float(np.sum(np.log(n * (n - 1.0)) + _times(n - 2.0, model.logcdf(p)) + model.logsf(p) + log_f))
        if rec.at_reserve.any():
            n, r = rec.n[rec.at_reserve], rec.reserve[rec.at_reserve]
            total += float(np.sum(np.log(n) + _times(n - 1.0, model.logcdf(r)) + model.logsf(r)))
        if rec.unsold.any():
            total += float(np.sum(_times(rec.n[rec.unsold], model.logcdf(rec.reserve[rec.unsold]))))
    return total if math.isfinite(total) else -math.inf


def second_highest_cdf(model, n, x):
    """P(X(n-1:n) <= x) = I_F(x)(n - 1, 2): at least n - 1 of the n values at or below x."""
    return sp.betainc(n - 1.0, 2.0, np.clip(model.cdf(x), 0.0, 1.0))


def price_transforms(model, rec):
    """Each price paid above its reserve, through the distribution the model implies for it
    given that it is above the reserve: uniform on [0, 1] when the model is right."""
    n, p, r = rec.n[rec.above], rec.price[rec.above], rec.reserve[rec.above]
    h_p, h_r = second_highest_cdf(model, n, p), second_highest_cdf(model, n, r)
    with np.errstate(divide="ignore", invalid="ignore"):
        u = (h_p - h_r) / (1.0 - h_r)
    return np.clip(np.where(np.isfinite(u), u, 1.0), 0.0, 1.0)
