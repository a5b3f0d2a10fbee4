"""Ranks, comparisons with a reference row (Welch on the task's scale, Holm across the family,
two one-sided tests for equivalence) and Pareto flags within one task."""

from __future__ import annotations

from collections.abc import Sequence

from loopzoo.report.loading import UNRANKED
from loopzoo.report.results import LATENCY_FIELD, Comparison, Row
from loopzoo.report.stats import Difference, equivalence_p, holm, seeds_needed, welch

__all__ = ["compare_family", "competition_ranks", "fronts", "pair_test", "pareto_front"]


def competition_ranks(rows: Sequence[Row], goal: str) -> dict[tuple[str, str], int]:
    """Rank rows with a value, bounds excepted: 1 is best; equal centres share the better rank
    ("1224"). The dict is in ranked order: better centre first, then more seeds, then name."""
    sign = 1.0 if goal == "min" else -1.0
    ranked = sorted(
        (r for r in rows if r.interval and r.kind not in UNRANKED),
        key=lambda r: (sign * r.interval.mean, -r.interval.n, r.key),
    )
    ranks: dict[tuple[str, str], int] = {}
    for position, row in enumerate(ranked, start=1):
        previous = ranked[position - 2] if position > 1 else None
        tied = previous is not None and previous.interval.mean == row.interval.mean
        ranks[row.key] = ranks[previous.key] if tied else position
    return ranks


def pair_test(row: Row, reference: Row, scale: str, confidence: float) -> Difference | None:
    """Welch's test of ``row`` against ``reference`` on ``scale`` (None when untestable)."""
    return welch(row.values, reference.values, scale, confidence,
                 exact_a=row.exact, exact_b=reference.exact)


def _spread(row: Row) -> float | None:
    return None if row.exact or row.interval is None else row.interval.std


def compare_family(
    rows: Sequence[Row],
    reference: Row | None,
    scale: str,
    alpha: float,
    margin: float,
    confidence: float,
) -> dict[tuple[str, str], Comparison]:
    """Every row's :class:`Comparison` with ``reference``; Holm's correction runs over the rows
    that could be tested, so the chance of calling any equal row worse stays at most alpha."""
    found: dict[tuple[str, str], Comparison] = {}
    tests = {}
    for row in rows:
        if row.interval is None or reference is None or reference.interval is None:
            found[row.key] = Comparison("no data", None)
        elif row.key == reference.key:
            found[row.key] = Comparison("best", None)
        elif row.exact and reference.exact:
            # Two seed-independent values: nothing is sampled, so there is nothing to test.
            found[row.key] = Comparison("exact", None)
        elif (result := pair_test(row, reference, scale, confidence)) is None:
            found[row.key] = Comparison("untested", None)
        else:
            tests[row.key] = (row, result)
    adjusted = dict(zip(tests, holm([result.p_value for _, result in tests.values()]),
                        strict=True))
    for key, (row, result) in tests.items():
        assert reference is not None and row.interval is not None
        equivalent = equivalence_p(row.values, reference.values, margin, scale,
                                   exact_a=row.exact, exact_b=reference.exact)
        if adjusted[key] < alpha:
            verdict = "worse"
        elif equivalent is not None and equivalent < alpha:
            verdict = "equivalent"
        else:
            verdict = "not significant"
        needed = None
        spread, other = _spread(row), _spread(reference)
        if spread is None:  # an exact row against a seed-dependent reference
            spread, other = other, None
        if verdict == "not significant" and spread is not None:
            difference = row.interval.centre - reference.interval.centre
            needed = seeds_needed(difference, spread, other, alpha)
        found[key] = Comparison(verdict, result.p_value, adjusted[key], result, equivalent, needed)
    return found


def pareto_front(points: Sequence[tuple[float, float]]) -> list[bool]:
    """For each (cost, loss) point, whether no other point is at least as good on both and
    strictly better on one. Example: ``pareto_front([(1, 3), (2, 1), (3, 2)]) == [True, True,
    False]``. Negate a score that is maximised before calling.
    """
    flags = []
    for i, (cost, loss) in enumerate(points):
        dominated = any(
            other_cost <= cost and other_loss <= loss and (other_cost < cost or other_loss < loss)
            for j, (other_cost, other_loss) in enumerate(points)
            if j != i
        )
        flags.append(not dominated)
    return flags


def fronts(rows: Sequence[Row], goal: str, attribute: str) -> dict[tuple[str, str], bool]:
    """Pareto flags of the topology rows on (cost, quality); ``attribute`` is ``latency`` (step
    latency, one stream) or ``params``. Rows without the cost or a value are left out."""
    sign = 1.0 if goal == "min" else -1.0
    candidates = [r for r in rows if r.kind == "model" and r.interval and _cost_axis(r, attribute)]
    flags = pareto_front([(_cost_axis(r, attribute), sign * r.interval.mean) for r in candidates])
    return {r.key: flag for r, flag in zip(candidates, flags, strict=True)}


def _cost_axis(row: Row, attribute: str) -> float | None:
    return row.cost.get(LATENCY_FIELD) if attribute == "latency" else row.params_value
