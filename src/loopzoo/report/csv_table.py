"""One CSV line per (task, row) with every figure of the report, for spreadsheets and scripts.

Each column is declared once below (name and how its value is read); the header follows.
"""

from __future__ import annotations

import csv
import io
import math
from collections.abc import Callable

from loopzoo.report.loading import UNRANKED
from loopzoo.report.results import (
    COST_FIELDS,
    REACH_FACTORS,
    REACH_PHASES,
    Comparison,
    Row,
    TaskSummary,
)
from loopzoo.report.summary import Summary

__all__ = ["CSV_COLUMNS", "render_csv"]

Value = Callable[[TaskSummary, Row], object]


def _count(value: float | None) -> float | int | None:
    return int(value) if value is not None and value.is_integer() else value


def _comparison(prefix: str, pick: Callable[[Row], Comparison | None]) -> list[tuple[str, Value]]:
    def get(read: Callable[[Comparison], object]) -> Value:
        return lambda _, row: None if (c := pick(row)) is None else read(c)

    return [
        (prefix, get(lambda c: c.verdict)),
        (f"welch_p{prefix.removeprefix('vs')}", get(lambda c: c.p_value)),
        (f"holm_p{prefix.removeprefix('vs')}", get(lambda c: c.adjusted_p)),
        (f"tost_p{prefix.removeprefix('vs')}", get(lambda c: c.equivalence_p)),
        (f"effect{prefix.removeprefix('vs')}",
         get(lambda c: c.difference and c.difference.estimate)),
        (f"seeds_needed{prefix.removeprefix('vs')}", get(lambda c: c.seeds_needed)),
    ]


def _bound_value(task: TaskSummary, _: Row) -> float | None:
    return task.bounds[0].interval.mean if task.bounds and task.bounds[0].interval else None


def _ship(read: Callable) -> Value:
    return lambda _, row: None if row.ship is None else read(row.ship)


COLUMNS: tuple[tuple[str, Value], ...] = (
    ("task", lambda t, r: t.label),
    ("metric", lambda t, r: t.metric),
    ("goal", lambda t, r: t.goal),
    ("scale", lambda t, r: t.scale),
    ("kind", lambda t, r: r.kind),
    ("row", lambda t, r: r.label),
    ("params", lambda t, r: _count(r.params_value)),
    *((status if status != "missing" else "ok_without_metric", lambda t, r, s=status: r.counts[s])
      for status in ("ok", "diverged", "failed", "skipped", "missing")),
    ("n", lambda t, r: len(r.values)),
    ("seed_dependent", lambda t, r: not r.exact),
    ("mean", lambda t, r: r.interval and r.interval.mean),
    ("ci95_low", lambda t, r: r.interval and r.interval.low),
    ("ci95_high", lambda t, r: r.interval and r.interval.high),
    ("std", lambda t, r: r.interval and r.interval.std),
    ("rank", lambda t, r: r.rank),
    *_comparison("vs_best", lambda r: None if r.kind in UNRANKED else r.versus_best),
    *_comparison("vs_best_topology", lambda r: r.versus_pick if r.kind == "model" else None),
    ("bound", _bound_value),
    ("flags", lambda t, r: "; ".join(r.flags)),
    ("tuning_trials", lambda t, r: r.tuning and len(r.tuning.values)),
    ("ship_run", _ship(lambda run: run.run_id)),
    ("ship_artifact", _ship(lambda run: run.artifact)),
    ("ship_reproduce", _ship(lambda run: run.reproduce)),
    ("pareto_latency", lambda t, r: r.front_latency),
    ("pareto_params", lambda t, r: r.front_params),
    *((f"cost_{field}", lambda t, r, f=field: r.cost.get(f)) for field, _, _ in COST_FIELDS),
    ("batched_batch_size", lambda t, r: r.batch_size),
    *((f"reach_{phase}_{factor}", lambda t, r, k=f"{phase}_{factor}": r.reach.get(k))
      for phase, _ in REACH_PHASES for factor in REACH_FACTORS),
    ("feedback", lambda t, r: r.exposure and "; ".join(r.exposure.settings)),
    ("measured_outputs_mean",
     lambda t, r: r.exposure and r.exposure.teacher_forced and r.exposure.teacher_forced.mean),
    ("free_running_mean",
     lambda t, r: r.exposure and r.exposure.free_running and r.exposure.free_running.mean),
    ("exposure_gap_mean", lambda t, r: r.exposure and r.exposure.gap and r.exposure.gap.mean),
)
CSV_COLUMNS = tuple(name for name, _ in COLUMNS)


def _cell(value: object) -> str:
    if value is None:
        return ""
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float):
        return "beyond T" if math.isinf(value) else repr(value)
    return str(value)


def render_csv(summary: Summary) -> str:
    """The CSV text: a header line then one line per row of every task (full precision)."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(CSV_COLUMNS)
    for task in summary.tasks:
        for row in task.rows:
            writer.writerow(_cell(value(task, row)) for _, value in COLUMNS)
    return buffer.getvalue()
