"""Seed statistics for comparing rows without overclaiming.

- Intervals stay inside the metric's range: positive error metrics (mse, mae, cross-entropy, bits
  per character) are summarised on the log scale (geometric mean, Student-t interval of the log
  values mapped back), bounded metrics (accuracy) have their interval clipped to the range.
- One Welch core (unequal variances) on that scale gives the test of a difference, its interval
  (a ratio of geometric means on the log scale), two one-sided tests for equivalence against a
  stated margin (Schuirmann 1987), and copes with a seed-independent ("exact") side.
- Holm's step-down correction (Holm 1979) over a family of comparisons, and the number of seeds
  per row a two-sided t-test would need to separate a pair at the observed spread.
"""

from __future__ import annotations

import math
import re
from collections.abc import Sequence
from dataclasses import dataclass

from scipy import special as _special

__all__ = [
    "POWER",
    "SEEDS_LIMIT",
    "Difference",
    "Interval",
    "analysis_scale",
    "equivalence_p",
    "holm",
    "interval",
    "mean_interval",
    "metric_limits",
    "seeds_needed",
    "welch",
]

POWER = 0.8  # target power of the seeds-needed figure (common practice)
SEEDS_LIMIT = 10_000  # beyond this the seeds-needed search gives up ("more than ...")

_POSITIVE_ERRORS = re.compile(r"^(mse|mae|rmse)(_.+)?$|^(cross_entropy|bits_per_char)$")
_UNIT_RANGE = re.compile(r"^accuracy(_.+)?$")


def metric_limits(metric: str | None) -> tuple[float | None, float | None]:
    """The range a metric's values can take: ``(0, None)`` for error metrics, ``(0, 1)`` for
    accuracy, ``(None, None)`` for a metric the report does not know."""
    if metric is None:
        return None, None
    if _POSITIVE_ERRORS.match(metric):
        return 0.0, None
    if _UNIT_RANGE.match(metric):
        return 0.0, 1.0
    return None, None


def analysis_scale(metric: str | None, values: Sequence[float]) -> str:
    """``"log"`` for a positive error metric whose every value is above 0, else ``"raw"``.

    Seed-to-seed spread of an error metric is right-skewed and multiplicative: comparing log values
    (ratios of geometric means) keeps intervals above 0 (common practice).
    """
    positive = metric is not None and _POSITIVE_ERRORS.match(metric) is not None
    return "log" if positive and values and min(values) > 0.0 else "raw"


@dataclass(frozen=True)
class Interval:
    """A row's centre with a two-sided Student-t interval (``low``/``high`` None if n < 2).

    ``scale`` ``"raw"``: ``mean`` is the arithmetic mean, the interval ``mean ± t·s/√n`` clipped
    to the metric's range (``clipped`` says whether that cut it). ``"log"``: ``mean`` is the
    geometric mean and the interval is ``exp(mean(log v) ± t·s_log/√n)``, so it is ``mean ×/÷
    factor``. ``std`` is the spread (ddof 1) on the analysis scale. ``exact``: a value that does
    not depend on the seed, known without seed noise.
    """

    mean: float
    n: int
    std: float | None
    low: float | None
    high: float | None
    confidence: float
    scale: str = "raw"
    clipped: bool = False
    exact: bool = False

    @property
    def half_width(self) -> float | None:
        """Half the width of an unclipped raw-scale interval (the "±" figure), else None."""
        if self.high is None or self.scale != "raw" or self.clipped:
            return None
        return self.high - self.mean

    @property
    def factor(self) -> float | None:
        """The "×/÷" figure of a log-scale interval (``high / mean``), else None."""
        return self.high / self.mean if self.scale == "log" and self.high is not None else None

    @property
    def centre(self) -> float:
        """The centre on the analysis scale (the log of a geometric mean)."""
        return math.log(self.mean) if self.scale == "log" else self.mean


def _mean_and_variance(values: Sequence[float]) -> tuple[float, float]:
    """Mean and sample variance (ddof 1); a constant sample gets exactly its value and 0, which
    rounding in the mean would otherwise turn into a tiny spurious variance."""
    if min(values) == max(values):
        return float(values[0]), 0.0
    mean = math.fsum(values) / len(values)
    return mean, math.fsum((v - mean) ** 2 for v in values) / (len(values) - 1)


def _check(values: Sequence[float], confidence: float) -> None:
    if not 0.0 < confidence < 1.0:
        raise ValueError(f"confidence must lie in (0, 1), got {confidence!r}")
    if len(values) == 0:
        raise ValueError("mean_interval needs at least one value, got none")
    if not all(math.isfinite(v) for v in values):
        raise ValueError(f"mean_interval needs finite values, got {list(values)!r}")


# Student-t and noncentral-t through scipy.special's ufuncs (what scipy.stats.t / nct call, without
# their per-call argument handling, which dominated the report's time).
def _t_cdf(x: float, df: float) -> float:
    return float(_special.stdtr(df, x))


def _t_ppf(q: float, df: float) -> float:
    return float(_special.stdtrit(df, q))


def _quantile(confidence: float, df: float) -> float:
    return _t_ppf((1.0 + confidence) / 2.0, df)


def mean_interval(values: Sequence[float], confidence: float = 0.95) -> Interval:
    """Mean and Student-t interval ``mean ± t_{(1+c)/2, n-1} · s / sqrt(n)`` (s with ddof 1).

    Example: ``mean_interval([1.0, 2.0, 3.0]).half_width`` is ``4.303 · 1 / sqrt(3) ≈ 2.484``.
    """
    _check(values, confidence)
    n = len(values)
    if n < 2:
        return Interval(float(values[0]), n, None, None, None, confidence)
    mean, variance = _mean_and_variance(values)
    std = math.sqrt(variance)
    half = _quantile(confidence, n - 1) * std / math.sqrt(n)
    return Interval(mean, n, std, mean - half, mean + half, confidence)


def interval(
    values: Sequence[float],
    scale: str = "raw",
    confidence: float = 0.95,
    limits: tuple[float | None, float | None] = (None, None),
    exact: bool = False,
) -> Interval:
    """The interval of ``values`` on ``scale`` (see :class:`Interval`), inside ``limits``.

    ``exact``: the values do not depend on the seed; the first is the row's value and no interval
    is formed. Example: ``interval([1.0, 4.0], "log").mean == 2.0`` (the geometric mean).
    """
    _check(values, confidence)
    if exact:
        return Interval(float(values[0]), 1, None, None, None, confidence, scale, exact=True)
    if scale == "log":
        if min(values) <= 0.0:
            raise ValueError(f"log-scale interval needs values above 0, got {list(values)!r}")
        logs = mean_interval([math.log(v) for v in values], confidence)
        low, high = (None, None) if logs.low is None else (math.exp(logs.low), math.exp(logs.high))
        return Interval(math.exp(logs.mean), logs.n, logs.std, low, high, confidence, "log")
    raw = mean_interval(values, confidence)
    if raw.low is None:
        return raw
    bottom, top = limits
    low = raw.low if bottom is None else max(bottom, raw.low)
    high = raw.high if top is None else min(top, raw.high)
    return Interval(raw.mean, raw.n, raw.std, low, high, confidence,
                    clipped=(low, high) != (raw.low, raw.high))


@dataclass(frozen=True)
class Difference:
    """Welch's comparison of sample a with sample b on the analysis scale.

    ``estimate`` is ``mean_a - mean_b`` (raw) or the ratio of geometric means ``gm_a / gm_b``
    (log), with its two-sided ``confidence`` interval ``low``..``high``; ``statistic``, ``df``
    (Welch-Satterthwaite; NaN when both sides are exact) and the two-sided ``p_value``.
    """

    scale: str
    estimate: float
    low: float
    high: float
    statistic: float
    df: float
    p_value: float
    std_error: float


def _analysis(values: Sequence[float], scale: str) -> list[float]:
    return [math.log(v) for v in values] if scale == "log" else [float(v) for v in values]


def _side(values: Sequence[float], scale: str, exact: bool) -> tuple[float, float, int] | None:
    """(mean, variance of the mean, n) on the analysis scale; an exact side has no variance."""
    data = _analysis(values, scale)
    if exact:
        return data[0], 0.0, 1
    if len(data) < 2:
        return None
    mean, variance = _mean_and_variance(data)
    return mean, variance / len(data), len(data)


def _core(
    a: Sequence[float], b: Sequence[float], scale: str, exact_a: bool, exact_b: bool
) -> tuple[float, float, float] | None:
    """(difference of means, its standard error, Welch df) on the analysis scale."""
    side_a, side_b = _side(a, scale, exact_a), _side(b, scale, exact_b)
    if side_a is None or side_b is None:
        return None
    (mean_a, term_a, n_a), (mean_b, term_b, n_b) = side_a, side_b
    pooled = term_a + term_b
    if pooled == 0.0:
        return mean_a - mean_b, 0.0, math.nan
    parts = [t**2 / (n - 1) for t, n in ((term_a, n_a), (term_b, n_b)) if t > 0.0]
    return mean_a - mean_b, math.sqrt(pooled), pooled**2 / math.fsum(parts)


def _back(value: float, scale: str) -> float:
    return math.exp(value) if scale == "log" else value


def welch(
    a: Sequence[float],
    b: Sequence[float],
    scale: str = "raw",
    confidence: float = 0.95,
    exact_a: bool = False,
    exact_b: bool = False,
) -> Difference | None:
    """Welch's two-sided test of equal means, ``t = (m_a - m_b) / sqrt(s_a²/n_a + s_b²/n_b)``,
    on ``scale`` (``"log"``: of the log values). An exact side (a seed-independent value) adds no
    variance, which makes the test the one-sample t-test against that value (df = n - 1).

    None when a non-exact side has fewer than 2 values. Two constant or exact sides give p = 1 if
    their means are equal, else 0. Example: ``welch([1, 2, 3], [4, 5, 6]).p_value ≈ 0.0111``.
    """
    core = _core(a, b, scale, exact_a, exact_b)
    if core is None:
        return None
    difference, error, df = core
    if error == 0.0:
        same = difference == 0.0
        statistic = 0.0 if same else math.copysign(math.inf, difference)
        estimate = _back(difference, scale)
        return Difference(scale, estimate, estimate, estimate, statistic, df,
                          1.0 if same else 0.0, 0.0)
    statistic = difference / error
    p_value = min(1.0, 2.0 * _t_cdf(-abs(statistic), df))
    half = _quantile(confidence, df) * error
    return Difference(scale, _back(difference, scale), _back(difference - half, scale),
                      _back(difference + half, scale), statistic, df, p_value, error)


def equivalence_p(
    a: Sequence[float],
    b: Sequence[float],
    margin: float,
    scale: str = "raw",
    exact_a: bool = False,
    exact_b: bool = False,
) -> float | None:
    """p-value of two one-sided Welch tests (Schuirmann 1987) that a and b are equivalent.

    The margin is relative: on the log scale the ratio of geometric means must lie within
    ``[1/(1+margin), 1+margin]``; on the raw scale the difference within ``± margin · |mean_b|``.
    Equivalence is shown when the returned p (the larger one-sided p) is below alpha. None when a
    side lacks the values for a variance (see :func:`welch`).
    """
    if not margin > 0.0:
        raise ValueError(f"equivalence margin must be above 0, got {margin!r}")
    core = _core(a, b, scale, exact_a, exact_b)
    if core is None:
        return None
    difference, error, df = core
    if scale == "log":
        bound = math.log1p(margin)
    else:
        bound = margin * abs(_analysis(b, scale)[0] if exact_b else math.fsum(b) / len(b))
    if error == 0.0:
        return 0.0 if abs(difference) < bound else 1.0
    above_lower = _t_cdf(-(difference + bound) / error, df)
    below_upper = _t_cdf((difference - bound) / error, df)
    return max(above_lower, below_upper)


def holm(p_values: Sequence[float]) -> list[float]:
    """Holm's (1979) step-down adjusted p-values, in the order given.

    With p sorted ascending, ``adjusted_(i) = max_{j<=i} min(1, (m - j + 1) · p_(j))``; a
    comparison is significant at family-wise level alpha when its adjusted p is below alpha.
    """
    m = len(p_values)
    order = sorted(range(m), key=lambda i: p_values[i])
    adjusted = [0.0] * m
    running = 0.0
    for position, index in enumerate(order):
        running = max(running, min(1.0, (m - position) * p_values[index]))
        adjusted[index] = running
    return adjusted


def _power(n: int, effect: float, alpha: float, one_sample: bool) -> float:
    """Power of the two-sided t-test at ``n`` seeds per row for a standardised ``effect``."""
    df = n - 1 if one_sample else 2 * n - 2
    shift = effect * math.sqrt(n if one_sample else n / 2.0)
    critical = _t_ppf(1.0 - alpha / 2.0, df)
    return 1.0 - _nct_cdf(critical, df, shift) + _nct_cdf(-critical, df, shift)


def _nct_cdf(x: float, df: float, shift: float) -> float:
    """Noncentral-t CDF; where scipy's nctdtr gives NaN (noncentrality beyond about 35, where the
    distribution is nearly normal) the normal approximation Φ(x - shift) stands in."""
    value = float(_special.nctdtr(df, shift, x))
    return value if math.isfinite(value) else float(_special.ndtr(x - shift))


def seeds_needed(
    difference: float,
    std_a: float,
    std_b: float | None,
    alpha: float,
    power: float = POWER,
) -> int | None:
    """Seeds per row for a two-sided t-test at ``alpha`` to detect ``difference`` with ``power``.

    ``difference`` and the spreads are on the analysis scale. Equal seeds per row and the pooled
    spread ``sqrt((s_a² + s_b²)/2)`` (two-sample t-test); ``std_b`` None means b is exact, so a
    one-sample test with ``s_a``. None when nothing was observed to separate (difference 0) or
    more than ``SEEDS_LIMIT`` seeds would be needed.
    """
    if difference == 0.0:
        return None
    one_sample = std_b is None
    spread = std_a if std_b is None else math.sqrt((std_a**2 + std_b**2) / 2.0)
    if spread == 0.0:
        return 2
    effect = abs(difference) / spread

    def enough(n: int) -> bool:
        return _power(n, effect, alpha, one_sample) >= power

    # Start near the normal approximation n = k (z_{1-alpha/2} + z_power)² / effect² (k = 2 for
    # two samples) and search from there; power grows with n, so the search is exact.
    normal = _special.ndtri
    guess = (1 if one_sample else 2) * ((normal(1 - alpha / 2) + normal(power)) / effect) ** 2
    if guess > SEEDS_LIMIT or not enough(SEEDS_LIMIT):
        return None
    n = min(SEEDS_LIMIT, max(2, math.ceil(guess) - 1))
    if enough(n):
        while n > 2 and enough(n - 1):
            n -= 1
        return n
    low, step = n, 1  # power(low) is short of the target
    while not enough(min(low + step, SEEDS_LIMIT)):
        low, step = low + step, 2 * step
    high = min(low + step, SEEDS_LIMIT)
    while high - low > 1:
        middle = (low + high) // 2
        if enough(middle):
            high = middle
        else:
            low = middle
    return high
