"""One CSV line per (task, row) with every figure of the report, for spreadsheets and scripts."""

from __future__ import annotations

import csv
import io
import math

from loopzoo.report.results import (
    COST_FIELDS,
    REACH_FACTORS,
    REACH_PHASES,
    Row,
    Summary,
    TaskSummary,
)

__all__ = ["CSV_COLUMNS", "render_csv"]

CSV_COLUMNS = (
    "task", "metric", "goal", "kind", "row", "params", "ok", "diverged", "failed",
    "ok_without_metric", "n", "mean", "ci95_low", "ci95_high", "std", "rank", "vs_best", "welch_p",
    "vs_best_topology", "welch_p_best_topology", "pareto_latency", "pareto_params",
    *(f"cost_{field}" for field, _, _ in COST_FIELDS), "batched_batch_size",
    *(f"reach_{phase}_{factor}" for phase, _ in REACH_PHASES for factor in REACH_FACTORS),
    "feedback", "teacher_forced_mean", "free_running_mean", "exposure_gap_mean",
)


def _cell(value: object) -> str:
    if value is None:
        return ""
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float):
        return "beyond T" if math.isinf(value) else repr(value)
    return str(value)


def _count(value: float | None) -> float | int | None:
    return int(value) if value is not None and value.is_integer() else value


def _values(task: TaskSummary, row: Row) -> list[object]:
    interval, exposure = row.interval, row.exposure
    topology = row.kind == "model"
    return [
        task.label, task.metric, task.goal, row.kind, row.label, _count(row.params_value),
        row.counts["ok"], row.counts["diverged"], row.counts["failed"], row.counts["missing"],
        len(row.values),
        interval and interval.mean, interval and interval.low, interval and interval.high,
        interval and interval.std,
        row.rank, row.versus_best.verdict, row.versus_best.p_value,
        row.versus_pick.verdict if topology else None,
        row.versus_pick.p_value if topology else None,
        row.front_latency, row.front_params,
        *(row.cost.get(field) for field, _, _ in COST_FIELDS), row.batch_size,
        *(row.reach.get(f"{phase}_{factor}") for phase, _ in REACH_PHASES
          for factor in REACH_FACTORS),
        exposure and "; ".join(exposure.settings),
        exposure and exposure.teacher_forced and exposure.teacher_forced.mean,
        exposure and exposure.free_running and exposure.free_running.mean,
        exposure and exposure.gap and exposure.gap.mean,
    ]


def render_csv(summary: Summary) -> str:
    """The CSV text: a header line then one line per row of every task (full precision)."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(CSV_COLUMNS)
    for task in summary.tasks:
        for row in task.rows:
            writer.writerow(_cell(value) for value in _values(task, row))
    return buffer.getvalue()
