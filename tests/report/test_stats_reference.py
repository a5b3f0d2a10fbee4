"""The report's seed statistics against scipy.stats on the same numbers.

Reference: scipy.stats.t.interval (Student-t confidence interval of a mean, with
scipy.stats.sem) and scipy.stats.ttest_ind(equal_var=False) (Welch's t-test).
"""

import math

import pytest
from scipy import stats

from loopzoo.report.stats import mean_interval, welch_test

# Invented per-seed test MSEs of the demo scenario (pump-vibration, see conftest.py).
DEMO_SAMPLES = {
    "hidden-feedback": [0.046, 0.0516, 0.0544, 0.048],
    "output-feedback": [0.043, 0.0486, 0.0514, 0.045],
    "stacked": [0.028, 0.0308, 0.0322, 0.029],
    "lstm": [0.029, 0.0318, 0.0332, 0.030],
    "gru": [0.034, 0.0368, 0.0382, 0.035],
}
UNEVEN = [[0.31, 0.29, 0.35], [0.2, 0.4, 0.1, 0.33, 0.27, 0.25], [1.0, 1.5], [7.0, 7.1, 6.9, 7.05]]


@pytest.mark.parametrize("values", [*DEMO_SAMPLES.values(), *UNEVEN])
@pytest.mark.parametrize("confidence", [0.9, 0.95, 0.99])
def test_interval_matches_scipy_t_interval(values, confidence):
    # Source: scipy.stats.t.interval(confidence, n - 1, loc=mean, scale=sem).
    mean = sum(values) / len(values)
    low, high = stats.t.interval(confidence, len(values) - 1, loc=mean, scale=stats.sem(values))
    interval = mean_interval(values, confidence)
    assert interval.mean == pytest.approx(mean, rel=1e-12)
    assert interval.low == pytest.approx(low, rel=1e-10)
    assert interval.high == pytest.approx(high, rel=1e-10)
    assert interval.std == pytest.approx(stats.tstd(values), rel=1e-10)


def test_interval_textbook_quantile():
    # Student-t table (from memory, any statistics textbook): t_{0.975, 2} = 4.303, so three
    # values 1, 2, 3 (s = 1) give a half width of 4.303 / sqrt(3) = 2.484.
    assert mean_interval([1.0, 2.0, 3.0]).half_width == pytest.approx(4.303 / math.sqrt(3), 1e-3)


def test_single_value_has_no_interval():
    interval = mean_interval([0.5])
    assert interval.mean == 0.5 and interval.low is None and interval.half_width is None


@pytest.mark.parametrize(
    ("a", "b"),
    [
        (DEMO_SAMPLES["stacked"], DEMO_SAMPLES["lstm"]),
        (DEMO_SAMPLES["stacked"], DEMO_SAMPLES["gru"]),
        (DEMO_SAMPLES["hidden-feedback"], DEMO_SAMPLES["output-feedback"]),
        (UNEVEN[0], UNEVEN[1]),
        (UNEVEN[1], UNEVEN[2]),
        (UNEVEN[2], UNEVEN[3]),
        (UNEVEN[3], [6.8, 7.3, 7.0]),
    ],
)
def test_welch_matches_scipy(a, b):
    # Source: scipy.stats.ttest_ind(a, b, equal_var=False), two-sided Welch test.
    reference = stats.ttest_ind(a, b, equal_var=False)
    result = welch_test(a, b)
    assert result is not None
    assert result.statistic == pytest.approx(reference.statistic, rel=1e-10)
    assert result.p_value == pytest.approx(reference.pvalue, rel=1e-8)
    if hasattr(reference, "df"):
        assert result.df == pytest.approx(reference.df, rel=1e-10)


def test_welch_needs_two_values_each_side():
    assert welch_test([1.0], [1.0, 2.0]) is None
    assert welch_test([1.0, 2.0], []) is None


def test_welch_constant_samples_are_exact():
    # scipy returns NaN here; the report treats two constant samples as an exact comparison.
    assert welch_test([0.4, 0.4], [0.4, 0.4, 0.4]).p_value == 1.0
    assert welch_test([0.4, 0.4], [0.5, 0.5]).p_value == 0.0


@pytest.mark.parametrize("bad", [[], [1.0, math.nan], [math.inf, 1.0]])
def test_interval_rejects_bad_values(bad):
    with pytest.raises(ValueError, match="mean_interval"):
        mean_interval(bad)


def test_interval_rejects_bad_confidence():
    with pytest.raises(ValueError, match="confidence"):
        mean_interval([1.0, 2.0], confidence=95)
