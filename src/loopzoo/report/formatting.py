"""Fixed-precision text for numbers, so tables are stable and readable."""

from __future__ import annotations

import math

from loopzoo.report.stats import Difference, Interval

__all__ = [
    "MISSING", "difference", "gap", "interval", "lag", "number", "p_phrase", "p_value", "ratio",
    "seeds_phrase",
]

MISSING = "—"


def number(value: float | None, digits: int = 4) -> str:
    """``value`` to ``digits`` significant digits; ``MISSING`` for None. ``number(0.012345)`` ->
    ``'0.01235'``."""
    if value is None:
        return MISSING
    if value == 0.0:
        return "0"
    return f"{value:.{digits}g}"


def interval(value: Interval | None) -> str:
    """``'mean ± half width'`` (raw scale), ``'geometric mean ×/÷ factor'`` (log scale),
    ``'mean [low, high]'`` (clipped to the metric's range), ``'value (same for every seed)'`` for a
    seed-independent row, or the mean with ``(1 seed)`` when there is no interval."""
    if value is None:
        return MISSING
    if value.exact:
        return f"{number(value.mean)} (same for every seed)"
    if value.low is None or value.high is None:
        return f"{number(value.mean)} (1 seed)"
    if value.factor is not None:
        return f"{number(value.mean)} ×/÷ {number(value.factor, 3)}"
    if value.half_width is None:
        return f"{number(value.mean)} [{number(value.low, 3)}, {number(value.high, 3)}]"
    return f"{number(value.mean)} ± {number(value.half_width, 2)}"


def difference(value: Difference | None, confidence: float = 0.95) -> str:
    """A row against its reference: ``'ratio 3.2 (95% CI 1.4 to 7.1)'`` on the log scale (a
    ratio of geometric means), ``'difference +0.012 (95% CI ...)'`` on the raw scale."""
    if value is None:
        return MISSING
    level = f"{confidence:.0%} CI"
    if value.scale == "log":
        return (f"ratio {number(value.estimate, 3)} ({level} {number(value.low, 3)} to "
                f"{number(value.high, 3)})")
    return (f"difference {value.estimate:+.3g} ({level} {value.low:+.3g} to "
            f"{value.high:+.3g})")


def seeds_phrase(seeds: int | None, limit: int, observed: Difference | None) -> str:
    """How many seeds per row would separate a pair: ``'about 14 seeds per row'``; nothing to
    separate when the observed difference is exactly 0."""
    if observed is not None and observed.statistic == 0.0:
        return "no number of seeds (the observed difference is 0)"
    return f"more than {limit:,} seeds per row" if seeds is None else f"about {seeds} seeds per row"


def gap(value: float, bound: float, scale: str) -> str:
    """A row's distance to a bound: ``'1.3x'`` on the log scale, ``'+0.012'`` on the raw scale."""
    if scale == "log" and bound > 0.0:
        return f"{number(value / bound, 3)}x"
    return f"{value - bound:+.3g}"


def lag(value: float | None) -> str:
    """A gradient-reach lag: whole numbers plain, ``'beyond T'`` for infinity."""
    if value is None:
        return MISSING
    if math.isinf(value):
        return "beyond T"
    return str(int(value)) if value == int(value) else f"{value:.1f}"


def p_value(value: float | None) -> str:
    """A p-value to 2 significant digits, ``'<0.001'`` below that."""
    if value is None:
        return MISSING
    return "<0.001" if value < 0.001 else f"{value:.2g}"


def p_phrase(value: float | None) -> str:
    """``'p = 0.03'`` or ``'p < 0.001'`` for running text."""
    if value is None:
        return "p unknown"
    return "p < 0.001" if value < 0.001 else f"p = {value:.2g}"


def ratio(value: float | None) -> str:
    """A cost ratio such as ``'2.3x'``."""
    return MISSING if value is None else f"{value:.2g}x" if value < 10 else f"{value:.0f}x"
