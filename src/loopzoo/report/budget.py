"""Robustness to the tuning budget: the expected best validation score after n trials.

Dodge, Gururangan, Card, Schwartz & Smith, "Show Your Work: Improved Reporting of Experimental
Results", EMNLP 2019: from N observed trial scores, the expected best of n trials drawn with
replacement from their empirical distribution.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

from loopzoo.report.results import TaskSummary

__all__ = ["BudgetCurve", "budget_curves", "budget_sentence", "budgets", "expected_best",
           "leaders"]


def expected_best(values: Sequence[float], goal: str, budget: int) -> float:
    """Expected best of ``budget`` draws (with replacement) from the trial scores ``values``.

    Sorted from worst to best, v_(1) .. v_(N): ``E = sum_i v_(i) · ((i/N)^n - ((i-1)/N)^n)``,
    the probability that the best of n draws is v_(i) times v_(i). ``goal`` is ``"min"`` or
    ``"max"``. Example: ``expected_best([1.0, 3.0], "max", 2) == 2.5``.
    """
    if goal not in ("min", "max"):
        raise ValueError(f"goal must be 'min' or 'max', got {goal!r}")
    if budget < 1:
        raise ValueError(f"budget must be at least 1, got {budget!r}")
    if not values or not all(math.isfinite(v) for v in values):
        raise ValueError(f"expected_best needs finite trial scores, got {list(values)!r}")
    ordered = sorted(values, reverse=goal == "min")  # worst first
    n = len(ordered)
    weights = [(i / n) ** budget - ((i - 1) / n) ** budget for i in range(1, n + 1)]
    return math.fsum(v * w for v, w in zip(ordered, weights, strict=True))


def budgets(trials: int) -> list[int]:
    """The budgets a table shows for ``trials`` trials: 1, 2, 4, ... and ``trials`` itself."""
    if trials < 1:
        return []
    shown = []
    budget = 1
    while budget < trials:
        shown.append(budget)
        budget *= 2
    return [*shown, trials]


@dataclass(frozen=True)
class BudgetCurve:
    """One topology row's expected best validation score at budgets 1 .. ``trials``."""

    label: str
    trials: int
    expected: tuple[float, ...]  # entry n - 1 is the expected best of n trials


def budget_curves(task: TaskSummary) -> tuple[BudgetCurve, ...]:
    """The curves of the task's topology rows whose records hold their trial scores."""
    curves = []
    for row in task.rows:
        if row.kind != "model" or row.tuning is None or not row.tuning.values:
            continue
        values = row.tuning.values
        expected = tuple(expected_best(values, task.goal, n) for n in range(1, len(values) + 1))
        curves.append(BudgetCurve(row.label, len(values), expected))
    return tuple(curves)


def leaders(task: TaskSummary, curves: Sequence[BudgetCurve]) -> list[tuple[int, str]]:
    """(budget, label of the best expected score) for every budget all curves reach."""
    if len(curves) < 2:
        return []
    sign = 1.0 if task.goal == "min" else -1.0
    common = min(c.trials for c in curves)
    return [
        (n, min(curves, key=lambda c: (sign * c.expected[n - 1], c.label)).label)
        for n in range(1, common + 1)
    ]


def _spans(leading: Sequence[tuple[int, str]]) -> list[tuple[int, int, str]]:
    spans: list[tuple[int, int, str]] = []
    for budget, label in leading:
        if spans and spans[-1][2] == label:
            spans[-1] = (spans[-1][0], budget, label)
        else:
            spans.append((budget, budget, label))
    return spans


def budget_sentence(task: TaskSummary) -> str | None:
    """Whether the winner holds at every tuning budget (Dodge et al. 2019), in words."""
    curves = budget_curves(task)
    leading = leaders(task, curves)
    if not leading:
        return None
    counts = sorted({c.trials for c in curves})
    unequal = ""
    if len(counts) > 1:
        listed = ", ".join(f"{c.label} {c.trials}" for c in curves)
        unequal = (f" Trial counts differ ({listed}): the budgets were not equal, so budgets are "
                   f"compared up to {counts[0]}.")
    spans = _spans(leading)
    metric = task.metric or "score"
    if len(spans) == 1:
        text = (f"Tuning budget: {spans[0][2]} has the best expected validation {metric} at "
                f"every budget from 1 to {leading[-1][0]} trials (Dodge et al. 2019), so the "
                "winner on validation does not hinge on the budget.")
    else:
        parts = ", ".join(f"{label} at {low}" + (f"–{high}" if high > low else "")
                          for low, high, label in spans)
        text = (f"Tuning budget: the winner depends on it: the best expected validation {metric} "
                f"goes to {parts} trials (Dodge et al. 2019).")
    return text + unequal
