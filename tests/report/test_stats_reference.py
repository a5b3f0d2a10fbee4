"""The report's seed statistics against scipy.stats and statsmodels on the same hand-made numbers.

References named beside each check: scipy.stats.t.interval, scipy.stats.gmean,
scipy.stats.ttest_ind(equal_var=False) (Welch's test) and its confidence_interval(),
scipy.stats.ttest_1samp, statsmodels.stats.multitest.multipletests(method="holm") (Holm 1979,
"A Simple Sequentially Rejective Multiple Test Procedure", Scand. J. Statistics 6),
statsmodels.stats.weightstats.ttost_ind / DescrStatsW.ttost_mean (two one-sided tests,
Schuirmann 1987, J. Pharmacokinetics and Biopharmaceutics 15), statsmodels.stats.power
(TTestIndPower / TTestPower).
"""

import math

import pytest
from scipy import stats
from statsmodels.stats.multitest import multipletests
from statsmodels.stats.power import TTestIndPower, TTestPower
from statsmodels.stats.weightstats import DescrStatsW, ttost_ind

from loopzoo.report.stats import (
    analysis_scale,
    equivalence_p,
    holm,
    interval,
    mean_interval,
    metric_limits,
    seeds_needed,
    welch,
)

# Invented per-seed test MSEs of the demo scenario (pump-vibration, see conftest.py).
DEMO_SAMPLES = {
    "hidden-feedback": [0.046, 0.0516, 0.0544, 0.048],
    "output-feedback": [0.043, 0.0486, 0.0514, 0.045],
    "stacked": [0.028, 0.0308, 0.0322, 0.029],
    "lstm": [0.029, 0.0318, 0.0332, 0.030],
    "gru": [0.034, 0.0368, 0.0382, 0.035],
}
UNEVEN = [[0.31, 0.29, 0.35], [0.2, 0.4, 0.1, 0.33, 0.27, 0.25], [1.0, 1.5], [7.0, 7.1, 6.9, 7.05]]
# Hand-made right-skewed errors: one seed an order of magnitude off, as error metrics often are.
SKEWED = [[0.004, 0.006, 0.09], [0.05, 0.07, 0.06], [0.0003, 0.0004, 0.0011, 0.0002]]
PAIRS = [
    (DEMO_SAMPLES["stacked"], DEMO_SAMPLES["lstm"]),
    (DEMO_SAMPLES["stacked"], DEMO_SAMPLES["gru"]),
    (DEMO_SAMPLES["hidden-feedback"], DEMO_SAMPLES["output-feedback"]),
    (UNEVEN[0], UNEVEN[1]),
    (UNEVEN[1], UNEVEN[2]),
    (UNEVEN[2], UNEVEN[3]),
    (UNEVEN[3], [6.8, 7.3, 7.0]),
    (SKEWED[0], SKEWED[1]),
    (SKEWED[2], SKEWED[0]),
]


@pytest.mark.parametrize("values", [*DEMO_SAMPLES.values(), *UNEVEN])
@pytest.mark.parametrize("confidence", [0.9, 0.95, 0.99])
def test_interval_matches_scipy_t_interval(values, confidence):
    # Source: scipy.stats.t.interval(confidence, n - 1, loc=mean, scale=sem).
    mean = sum(values) / len(values)
    low, high = stats.t.interval(confidence, len(values) - 1, loc=mean, scale=stats.sem(values))
    result = mean_interval(values, confidence)
    assert result.mean == pytest.approx(mean, rel=1e-12)
    assert result.low == pytest.approx(low, rel=1e-10)
    assert result.high == pytest.approx(high, rel=1e-10)
    assert result.std == pytest.approx(stats.tstd(values), rel=1e-10)


def test_interval_textbook_quantile():
    # Student-t table (from memory, any statistics textbook): t_{0.975, 2} = 4.303, so three
    # values 1, 2, 3 (s = 1) give a half width of 4.303 / sqrt(3) = 2.484.
    assert mean_interval([1.0, 2.0, 3.0]).half_width == pytest.approx(4.303 / math.sqrt(3), 1e-3)


@pytest.mark.parametrize("values", [*SKEWED, *DEMO_SAMPLES.values()])
def test_log_interval_is_the_t_interval_of_the_logs_and_stays_positive(values):
    # Source: scipy.stats.gmean and scipy.stats.t.interval on log values, mapped back by exp.
    logs = [math.log(v) for v in values]
    low, high = stats.t.interval(0.95, len(logs) - 1, loc=stats.tmean(logs), scale=stats.sem(logs))
    result = interval(values, "log")
    assert result.mean == pytest.approx(stats.gmean(values), rel=1e-12)
    assert (result.low, result.high) == pytest.approx((math.exp(low), math.exp(high)), rel=1e-10)
    assert result.low > 0 and result.factor == pytest.approx(result.high / result.mean)
    # The raw-scale t interval of the same numbers leaves the metric's range for the first sample.
    if values is SKEWED[0]:
        assert mean_interval(values).low < 0


def test_raw_interval_is_clipped_to_the_metric_range():
    accuracy = [0.97, 0.99, 1.0]
    raw = mean_interval(accuracy)
    clipped = interval(accuracy, "raw", limits=metric_limits("accuracy"))
    assert raw.high > 1.0 and clipped.high == 1.0 and clipped.low == raw.low
    assert clipped.clipped and clipped.half_width is None


def test_metric_ranges_and_scale():
    assert metric_limits("mse") == (0.0, None) and metric_limits("mse_h5") == (0.0, None)
    assert metric_limits("bits_per_char") == (0.0, None)
    assert metric_limits("accuracy") == (0.0, 1.0) and metric_limits("custom") == (None, None)
    assert analysis_scale("cross_entropy", [0.1, 0.2]) == "log"
    assert analysis_scale("mse", [0.0, 0.2]) == "raw"  # an exact zero has no logarithm
    assert analysis_scale("accuracy", [0.5, 0.6]) == "raw"


def test_single_value_has_no_interval():
    result = mean_interval([0.5])
    assert result.mean == 0.5 and result.low is None and result.half_width is None


@pytest.mark.parametrize(("a", "b"), PAIRS)
@pytest.mark.parametrize("scale", ["raw", "log"])
def test_welch_matches_scipy(a, b, scale):
    # Source: scipy.stats.ttest_ind(a, b, equal_var=False) (two-sided Welch test) and its
    # confidence_interval(0.95), on log values for the log scale.
    x, y = ([math.log(v) for v in s] for s in (a, b)) if scale == "log" else (a, b)
    reference = stats.ttest_ind(x, y, equal_var=False)
    low, high = reference.confidence_interval(0.95)
    result = welch(a, b, scale)
    back = math.exp if scale == "log" else float
    assert result.statistic == pytest.approx(reference.statistic, rel=1e-10)
    assert result.p_value == pytest.approx(reference.pvalue, rel=1e-8)
    assert result.df == pytest.approx(reference.df, rel=1e-10)
    assert (result.low, result.high) == pytest.approx((back(low), back(high)), rel=1e-9)
    if scale == "log":
        assert result.estimate == pytest.approx(stats.gmean(a) / stats.gmean(b), rel=1e-12)


def test_log_scale_sees_a_failure_the_raw_scale_hides():
    # Hand-made: a tanh-like row stuck near the memoryless level on two seeds and good on one,
    # against a gated-like row; the raw scale cannot separate them, the log scale can.
    stuck, gated = [0.16, 0.15, 0.02], [0.0004, 0.0002, 0.0006]
    assert welch(stuck, gated).p_value > 0.05
    assert welch(stuck, gated, "log").p_value < 0.05


@pytest.mark.parametrize("scale", ["raw", "log"])
def test_exact_side_is_the_one_sample_test(scale):
    # Source: scipy.stats.ttest_1samp(a, popmean): a value that does not depend on the seed has
    # no variance, so Welch's statistic and df reduce to the one-sample test's.
    a, value = [0.031, 0.029, 0.035, 0.033], 0.0305
    x = [math.log(v) for v in a] if scale == "log" else a
    reference = stats.ttest_1samp(x, math.log(value) if scale == "log" else value)
    result = welch(a, [value], scale, exact_b=True)
    assert result.p_value == pytest.approx(reference.pvalue, rel=1e-8)
    assert result.df == len(a) - 1
    assert welch(a, [value], scale) is None  # without the flag one value has no variance


def test_welch_needs_two_values_each_side():
    assert welch([1.0], [1.0, 2.0]) is None
    assert welch([1.0, 2.0], []) is None


def test_welch_constant_samples_are_exact():
    # scipy returns NaN here; the report treats two constant samples as an exact comparison.
    assert welch([0.4, 0.4], [0.4, 0.4, 0.4]).p_value == 1.0
    assert welch([0.4, 0.4], [0.5, 0.5]).p_value == 0.0
    assert welch([0.4], [0.5], exact_a=True, exact_b=True).estimate == pytest.approx(-0.1)


HOLM_CASES = [
    [0.01, 0.04, 0.03, 0.005],
    [0.2, 0.001, 0.049, 0.03, 0.6, 0.012, 0.04],
    [0.5],
    [0.02, 0.02, 0.02],
    [0.9, 0.8, 0.0001],
]


@pytest.mark.parametrize("p_values", HOLM_CASES)
def test_holm_matches_statsmodels(p_values):
    # Source: statsmodels.stats.multitest.multipletests(p, method="holm")[1], Holm (1979).
    assert holm(p_values) == pytest.approx(list(multipletests(p_values, method="holm")[1]))


def test_holm_hand_worked_example():
    # Holm (1979), the step-down rule by hand: sorted 0.005, 0.01, 0.03, 0.04 times 4, 3, 2, 1
    # gives 0.02, 0.03, 0.06, 0.04; the running maximum makes the last 0.06.
    assert holm([0.01, 0.04, 0.03, 0.005]) == pytest.approx([0.03, 0.06, 0.06, 0.02])


@pytest.mark.parametrize(("a", "b"), PAIRS)
@pytest.mark.parametrize("margin", [0.05, 0.2, 1.0])
def test_tost_matches_statsmodels(a, b, margin):
    # Source: statsmodels.stats.weightstats.ttost_ind(x1, x2, low, upp, usevar="unequal")[0]
    # (Schuirmann 1987); the raw-scale margin is relative to b's mean, the log-scale one a ratio.
    bound = margin * abs(sum(b) / len(b))
    reference = ttost_ind(a, b, -bound, bound, usevar="unequal")[0]
    assert equivalence_p(a, b, margin) == pytest.approx(reference, rel=1e-8, abs=1e-15)
    logs_a, logs_b = ([math.log(v) for v in s] for s in (a, b))
    log_bound = math.log1p(margin)
    reference = ttost_ind(logs_a, logs_b, -log_bound, log_bound, usevar="unequal")[0]
    assert equivalence_p(a, b, margin, "log") == pytest.approx(reference, rel=1e-8, abs=1e-15)


def test_tost_against_an_exact_value_matches_statsmodels():
    # Source: statsmodels DescrStatsW(a).ttost_mean(low, upp)[0], the one-sample TOST.
    a, value, margin = [0.101, 0.098, 0.1, 0.103], 0.1, 0.05
    reference = DescrStatsW(a).ttost_mean(value * (1 - margin), value * (1 + margin))[0]
    assert equivalence_p(a, [value], margin, exact_b=True) == pytest.approx(reference, rel=1e-8)


def test_tost_refuses_a_non_positive_margin():
    with pytest.raises(ValueError, match="margin"):
        equivalence_p([1.0, 2.0], [1.0, 2.0], 0.0)


@pytest.mark.parametrize(
    ("difference", "std_a", "std_b", "alpha"),
    [(1.0, 1.0, 1.0, 0.05), (0.3, 0.5, 0.7, 0.05), (0.05, 0.2, 0.1, 0.01), (2.0, 1.5, 0.2, 0.05),
     (-0.8, 0.4, 0.9, 0.1), (0.033, 0.06, 0.06, 0.05)],
)
def test_seeds_needed_matches_statsmodels_power(difference, std_a, std_b, alpha):
    # Source: statsmodels.stats.power.TTestIndPower().solve_power (two-sample t-test, equal
    # group sizes, power 0.8); the smallest whole number of seeds at or above its solution.
    spread = math.sqrt((std_a**2 + std_b**2) / 2)
    n = TTestIndPower().solve_power(effect_size=abs(difference) / spread, alpha=alpha, power=0.8)
    assert seeds_needed(difference, std_a, std_b, alpha) == max(2, math.ceil(n - 1e-9))


def test_seeds_needed_against_an_exact_value_matches_one_sample_power():
    # Source: statsmodels.stats.power.TTestPower().solve_power (one-sample t-test, power 0.8).
    n = TTestPower().solve_power(effect_size=0.5 / 0.8, alpha=0.05, power=0.8)
    assert seeds_needed(0.5, 0.8, None, 0.05) == math.ceil(n)


def test_seeds_needed_edge_cases():
    assert seeds_needed(0.0, 1.0, 1.0, 0.05) is None  # nothing to separate
    assert seeds_needed(1e-6, 1.0, 1.0, 0.05) is None  # beyond the search limit
    assert seeds_needed(0.1, 0.0, 0.0, 0.05) == 2  # no spread: any replication separates


@pytest.mark.parametrize("bad", [[], [1.0, math.nan], [math.inf, 1.0]])
def test_interval_rejects_bad_values(bad):
    with pytest.raises(ValueError, match="mean_interval"):
        mean_interval(bad)


def test_interval_rejects_bad_confidence():
    with pytest.raises(ValueError, match="confidence"):
        mean_interval([1.0, 2.0], confidence=95)
