"""The cross-task view: mean rank per topology, latency ratio and the Pareto front."""

from __future__ import annotations

import math
import statistics
from collections import defaultdict
from collections.abc import Sequence

from loopzoo.report.ranking import competition_ranks, pareto_front
from loopzoo.report.results import LATENCY_FIELD, OverallRow, TaskSummary

__all__ = ["cross_task"]


def cross_task(tasks: Sequence[TaskSummary]) -> tuple[OverallRow, ...]:
    """One :class:`OverallRow` per topology label, best mean rank first (see its docstring)."""
    ranks: dict[str, list[int]] = defaultdict(list)
    ratios: dict[str, list[float]] = defaultdict(list)
    labels: set[str] = set()
    for task in tasks:
        model_rows = [r for r in task.rows if r.kind == "model"]
        labels.update(r.label for r in model_rows)
        model_rows = [r for r in model_rows if r.interval]
        if len(model_rows) < 2:
            continue  # a task with one topology ranks nothing and has no fastest to compare with
        for key, rank in competition_ranks(model_rows, task.goal).items():
            ranks[key[1]].append(rank)
        latencies = {r.label: r.cost.get(LATENCY_FIELD) for r in model_rows}
        present = [v for v in latencies.values() if v]
        if present:
            fastest = min(present)
            for name, latency in latencies.items():
                if latency:
                    ratios[name].append(latency / fastest)
    mean_ranks = {name: statistics.fmean(ranks[name]) for name in labels if ranks[name]}
    relative = {
        name: math.exp(statistics.fmean(math.log(v) for v in ratios[name]))
        for name in labels
        if ratios[name]
    }
    both = sorted(name for name in labels if name in mean_ranks and name in relative)
    flags = pareto_front([(relative[n], mean_ranks[n]) for n in both])
    front = dict(zip(both, flags, strict=True))
    rows = [
        OverallRow(
            name, len(ranks[name]), mean_ranks.get(name), relative.get(name), front.get(name)
        )
        for name in labels
    ]
    rows.sort(key=lambda r: (r.mean_rank is None, r.mean_rank or 0.0, r.label))
    return tuple(rows)
