"""Gradient-reach lags and the Pareto front on small hand-checked cases."""

import math

import pytest

from loopzoo.report.ranking import pareto_front
from loopzoo.report.reach import BEYOND, reach_lag, relative_norms


def test_reach_lag_first_lag_at_or_below_the_fraction():
    lags, norms = [0, 1, 2, 3], [1.0, 0.3, 0.05, 0.004]
    assert reach_lag(lags, norms, 10) == 2
    assert reach_lag(lags, norms, 100) == 3


def test_reach_lag_geometric_decay_matches_closed_form():
    # Norm r**k falls to 1/10 first at k = ceil(log(10) / log(1/r)).
    rate = 0.8
    norms = [rate**k for k in range(60)]
    expected = math.ceil(math.log(10) / -math.log(rate))
    assert reach_lag(list(range(60)), norms, 10) == expected


def test_reach_lag_beyond_recorded_lags():
    assert reach_lag([0, 1, 2], [1.0, 0.9, 0.8], 10) is BEYOND


def test_raw_norms_are_normalised_by_lag_zero():
    assert relative_norms([4.0, 2.0, 0.4]) == [1.0, 0.5, 0.1]
    assert reach_lag([0, 1, 2], [4.0, 2.0, 0.4], 10) == 2


@pytest.mark.parametrize(
    ("lags", "norms"),
    [([0, 1], [1.0]), ([0, 1], [0.0, 0.0]), ([0, 1], [1.0, None]), ([], []), ([0, 1], [1, "x"])],
)
def test_unusable_series_give_none(lags, norms):
    assert reach_lag(lags, norms, 10) is None


def test_reach_factor_must_exceed_one():
    with pytest.raises(ValueError, match="factor"):
        reach_lag([0], [1.0], 1.0)


def test_pareto_front_minimises_both():
    assert pareto_front([(1, 3), (2, 1), (3, 2)]) == [True, True, False]
    # Equal points do not dominate each other.
    assert pareto_front([(1, 1), (1, 1), (2, 2)]) == [True, True, False]
    assert pareto_front([]) == []
