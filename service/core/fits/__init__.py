"""Estimation from past auctions: value (or cost) models recovered from records of prices
and bids, which are order statistics and shaded values of the values, and so can be
inverted (records.py: the data; likelihood.py and mle.py: parametric maximum likelihood;
inversion.py: the nonparametric inversions; report.py: the /v1/fits report)."""
