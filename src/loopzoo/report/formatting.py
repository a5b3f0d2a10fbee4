"""Fixed-precision text for numbers, so tables are stable and readable."""

from __future__ import annotations

import math

from loopzoo.report.stats import Interval

__all__ = ["MISSING", "number", "interval", "lag", "p_phrase", "p_value", "ratio"]

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
    """``'mean ± half width'``, or the mean alone with ``(1 seed)`` when there is no interval."""
    if value is None:
        return MISSING
    if value.half_width is None:
        return f"{number(value.mean)} (1 seed)"
    return f"{number(value.mean)} ± {number(value.half_width, 2)}"


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
