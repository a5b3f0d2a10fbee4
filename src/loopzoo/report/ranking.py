"""Ranks, comparisons with the best row (Welch) and Pareto flags within one task."""

from __future__ import annotations

from collections.abc import Sequence

from loopzoo.report.pareto import pareto_front
from loopzoo.report.results import LATENCY_FIELD, Comparison, Row
from loopzoo.report.stats import welch_test

__all__ = ["compare", "competition_ranks", "fronts"]


def competition_ranks(rows: Sequence[Row], goal: str) -> dict[tuple[str, str], int]:
    """Rank rows with a value: 1 is best; equal means share the better rank ("1224").

    The dict is in ranked order: better mean first, then more seeds, then name.
    """
    sign = 1.0 if goal == "min" else -1.0
    ranked = sorted(
        (r for r in rows if r.interval),
        key=lambda r: (sign * r.interval.mean, -r.interval.n, r.key),
    )
    ranks: dict[tuple[str, str], int] = {}
    for position, row in enumerate(ranked, start=1):
        previous = ranked[position - 2] if position > 1 else None
        tied = previous is not None and previous.interval.mean == row.interval.mean
        ranks[row.key] = ranks[previous.key] if tied else position
    return ranks


def compare(row: Row, best: Row | None, alpha: float) -> Comparison:
    """Welch's two-sided test of ``row`` against ``best`` at ``alpha`` (see :class:`Comparison`)."""
    if row.interval is None or best is None:
        return Comparison("no data", None)
    if row.key == best.key:
        return Comparison("best", None)
    result = welch_test(row.values, best.values)
    if result is None:
        return Comparison("untested", None)
    if result.p_value < alpha:
        return Comparison("worse", result.p_value)
    # Not separated by Welch. Call it a tie only when the row's mean lies inside the best row's
    # interval; otherwise the test merely lacked power (the row's seeds spread widely).
    assert row.interval is not None and best.interval is not None
    low, high = best.interval.low, best.interval.high
    inside = low is not None and high is not None and low <= row.interval.mean <= high
    return Comparison("indistinguishable" if inside else "inconclusive", result.p_value)


def fronts(rows: Sequence[Row], goal: str, attribute: str) -> dict[tuple[str, str], bool]:
    """Pareto flags of the topology rows on (cost, quality); ``attribute`` is ``latency`` (step
    latency, one stream) or ``params``. Rows without the cost or a value are left out."""
    sign = 1.0 if goal == "min" else -1.0
    candidates = [r for r in rows if r.kind == "model" and r.interval and _cost_axis(r, attribute)]
    flags = pareto_front([(_cost_axis(r, attribute), sign * r.interval.mean) for r in candidates])
    return {r.key: flag for r, flag in zip(candidates, flags, strict=True)}


def _cost_axis(row: Row, attribute: str) -> float | None:
    return row.cost.get(LATENCY_FIELD) if attribute == "latency" else row.params_value
