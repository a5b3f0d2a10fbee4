"""Gradient reach: the time lag at which the norm of dL/dh has fallen by a given factor."""

from __future__ import annotations

import math

from loopzoo.report.loading import finite_number

__all__ = ["BEYOND", "reach_lag", "relative_norms"]

BEYOND = math.inf  # the norm never fell that far within the recorded lags ("beyond T")


def relative_norms(norms: object) -> list[float] | None:
    """``norms`` divided by the lag-0 norm; None when it is no list, or lag 0 is missing, zero or
    non-finite, or any norm is not a finite number.

    Records store norms already normalised to 1.0 at lag 0; dividing again keeps raw norms usable.
    """
    if not isinstance(norms, (list, tuple)):
        return None
    values = [finite_number(v) for v in norms]
    if not values or values[0] is None or values[0] <= 0.0 or any(v is None for v in values):
        return None
    return [v / values[0] for v in values]  # type: ignore[operator]


def reach_lag(lags: object, norms: object, factor: float) -> float | None:
    """First lag whose norm is at most ``1/factor`` of the lag-0 norm; ``BEYOND`` if none is.

    Example: ``reach_lag([0, 1, 2, 3], [1.0, 0.3, 0.05, 0.004], 10) == 2``. None when the
    series is unusable (length mismatch, missing or non-finite values).
    """
    if factor <= 1.0:
        raise ValueError(f"factor must exceed 1, got {factor!r}")
    relative = relative_norms(norms)
    if relative is None or not isinstance(lags, (list, tuple)):
        return None
    lag_values = [finite_number(v) for v in lags]
    if len(lag_values) != len(relative) or any(v is None for v in lag_values):
        return None
    for lag, value in zip(lag_values, relative, strict=True):
        if value <= 1.0 / factor:
            return lag
    return BEYOND
