"""The bidder count as an object (service/core/bidders.py): today one n with probability 1,
giving the same figures as the bare integer it replaces."""
from __future__ import annotations

import math

import numpy as np
import pytest

import api_reports as A
from service.core import models as M
from service.core.bidders import Bidders


@pytest.mark.parametrize("n,r", [(1, 0.3), (5, 0.3), (40, 0.9), (3, 1e-9)])
def test_probability_of_sale(n, r):
    # P(sale) = 1 - F(r)^n: some value beats the reserve (Krishna, Auction Theory, 2009, ch. 2);
    # uniform [0, 1] values, so F(r) = r and s = -log r.
    count = Bidders.exactly(n)
    assert count.p_sale(-math.log(r)) == pytest.approx(1.0 - r**n, rel=1e-15)
    many = count.p_sale(np.array([-math.log(r), math.inf, 0.0]))
    assert many[0] == count.p_sale(-math.log(r)) and many[1] == 1.0 and many[2] == 0.0


def test_a_count_object_gives_the_integer_s_figures():
    model = M.Gamma(3.0, 2.0)
    assert A.revenue_report(model, "forward", Bidders.exactly(4), 3.0) == A.revenue_report(model, "forward", 4, 3.0)
    assert A.bid_strategy(model, "reverse", Bidders.exactly(1), 8.0, at=[2.0, 9.0]) == \
        A.bid_strategy(model, "reverse", 1, 8.0, at=[2.0, 9.0])


def test_the_lone_bidder_and_rivals():
    assert Bidders.exactly(1).lone and not Bidders.exactly(2).lone
    assert Bidders.exactly(7).rivals == 6.0 and Bidders.of(Bidders.exactly(7)) == Bidders.exactly(7)
    # E[n (n - 1)] over a certain count is that count's own value.
    assert Bidders.exactly(7).expect(lambda n: n * (n - 1)) == 42
    assert Bidders.exactly(7).to_params() == 7
