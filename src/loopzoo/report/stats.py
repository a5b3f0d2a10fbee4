"""Seed statistics: Student-t confidence intervals and Welch's unequal-variance t-test."""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

from scipy import stats as _scipy_stats

__all__ = ["Interval", "WelchResult", "mean_interval", "welch_test"]


@dataclass(frozen=True)
class Interval:
    """Mean of ``n`` values with a two-sided Student-t interval (``low``/``high`` None if n < 2)."""

    mean: float
    n: int
    std: float | None
    low: float | None
    high: float | None
    confidence: float

    @property
    def half_width(self) -> float | None:
        """Half the interval's width (the "±" figure), None when no interval exists."""
        return None if self.high is None else self.high - self.mean


@dataclass(frozen=True)
class WelchResult:
    """Welch's two-sided t-test of equal means: statistic, Welch-Satterthwaite df, p-value."""

    statistic: float
    df: float
    p_value: float


def _mean_and_variance(values: Sequence[float]) -> tuple[float, float]:
    """Mean and sample variance (ddof 1); a constant sample gets exactly its value and 0, which
    rounding in the mean would otherwise turn into a tiny spurious variance."""
    if min(values) == max(values):
        return float(values[0]), 0.0
    mean = math.fsum(values) / len(values)
    return mean, math.fsum((v - mean) ** 2 for v in values) / (len(values) - 1)


def mean_interval(values: Sequence[float], confidence: float = 0.95) -> Interval:
    """Mean and Student-t interval ``mean ± t_{(1+c)/2, n-1} · s / sqrt(n)`` (s with ddof 1).

    Example: ``mean_interval([1.0, 2.0, 3.0]).half_width`` is ``4.303 · 1 / sqrt(3) ≈ 2.484``.
    """
    if not 0.0 < confidence < 1.0:
        raise ValueError(f"confidence must lie in (0, 1), got {confidence!r}")
    if len(values) == 0:
        raise ValueError("mean_interval needs at least one value, got none")
    if not all(math.isfinite(v) for v in values):
        raise ValueError(f"mean_interval needs finite values, got {list(values)!r}")
    n = len(values)
    if n < 2:
        return Interval(float(values[0]), n, None, None, None, confidence)
    mean, variance = _mean_and_variance(values)
    std = math.sqrt(variance)
    quantile = float(_scipy_stats.t.ppf((1.0 + confidence) / 2.0, n - 1))
    half = quantile * std / math.sqrt(n)
    return Interval(mean, n, std, mean - half, mean + half, confidence)


def welch_test(a: Sequence[float], b: Sequence[float]) -> WelchResult | None:
    """Welch's t-test: ``t = (mean_a - mean_b) / sqrt(s_a²/n_a + s_b²/n_b)``, two-sided p.

    Degrees of freedom by Welch-Satterthwaite. None when either sample has fewer than 2 values
    (no variance estimate). Two constant samples give p = 1 if their means are equal, else 0.
    Example: ``welch_test([1, 2, 3], [4, 5, 6]).p_value ≈ 0.0111``.
    """
    if len(a) < 2 or len(b) < 2:
        return None
    (mean_a, var_a), (mean_b, var_b) = _mean_and_variance(a), _mean_and_variance(b)
    term_a, term_b = var_a / len(a), var_b / len(b)
    pooled = term_a + term_b
    if pooled == 0.0:
        # Both samples constant: the difference is exact, not noise.
        same = mean_a == mean_b
        return WelchResult(0.0 if same else math.copysign(math.inf, mean_a - mean_b),
                           math.nan, 1.0 if same else 0.0)
    statistic = (mean_a - mean_b) / math.sqrt(pooled)
    df = pooled**2 / (term_a**2 / (len(a) - 1) + term_b**2 / (len(b) - 1))
    p_value = float(2.0 * _scipy_stats.t.sf(abs(statistic), df))
    return WelchResult(statistic, df, min(1.0, p_value))
