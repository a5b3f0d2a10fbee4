"""Turn run records into per-task summaries (rows ranked, compared and flagged, with what is
missing) and the cross-task view."""

from __future__ import annotations

from collections import Counter, defaultdict
from collections.abc import Iterable, Sequence
from dataclasses import replace

from loopzoo.report.cross_task import cross_task
from loopzoo.report.loading import Run, Skipped
from loopzoo.report.ranking import compare, competition_ranks, fronts
from loopzoo.report.results import Row, Summary, TaskSummary
from loopzoo.report.rows import build_row

__all__ = ["summarise"]


def _variant_labels(name: str, variants: Iterable[tuple]) -> dict[tuple, str]:
    """Label each distinct variant by ``name`` plus only the settings that tell variants apart."""
    distinct = sorted(set(variants))
    if len(distinct) == 1:
        return {distinct[0]: name}
    settings = [dict(v) for v in distinct]
    keys = sorted({k for s in settings for k in s})
    differing = [k for k in keys if len({s.get(k) for s in settings}) > 1]
    labels = {}
    for variant, setting in zip(distinct, settings, strict=True):
        parts = [f"{k.removeprefix('options.')}={setting.get(k, 'unset')}" for k in differing]
        labels[variant] = f"{name} ({', '.join(parts)})"
    return labels


def _primary(runs: Sequence[Run], task_label: str, gaps: list[str]) -> tuple[str | None, str]:
    named = Counter(r.primary for r in runs if r.primary is not None)
    if not named:
        gaps.append(f"{task_label}: no record names its primary metric; nothing can be ranked")
        return None, "min"
    (metric, goal), _ = sorted(named.items(), key=lambda item: (-item[1], item[0]))[0]
    for (other, other_goal), count in sorted(named.items()):
        if (other, other_goal) != (metric, goal):
            gaps.append(
                f"{task_label}: {count} record(s) name primary metric {other!r} ({other_goal}); "
                f"the task is ranked on {metric!r} ({goal})"
            )
    return metric, goal


def _missing_seeds(rows: Sequence[Row], gaps: list[str]) -> None:
    model_rows = [r for r in rows if r.kind == "model"]
    expected = {run.seed for row in model_rows for run in row.runs}
    for row in model_rows:
        absent = sorted(expected - {run.seed for run in row.runs})
        if absent:
            gaps.append(f"{row.label}: no record for seed(s) {', '.join(map(str, absent))}")


def _summarise_task(
    label: str, runs: list[Run], alpha: float, confidence: float
) -> TaskSummary:
    gaps: list[str] = []
    metric, goal = _primary(runs, label, gaps)
    grouped: dict[tuple[str, str], list[Run]] = defaultdict(list)
    for kind in ("model", "baseline"):
        by_name: dict[str, list[Run]] = defaultdict(list)
        for run in runs:
            if run.kind == kind:
                by_name[run.model].append(run)
        for name in sorted(by_name):
            labels = _variant_labels(name, (r.row_variant for r in by_name[name]))
            for run in by_name[name]:
                grouped[(kind, labels[run.row_variant])].append(run)
    rows = [
        build_row(kind, row_label, grouped[(kind, row_label)], metric, confidence, gaps)
        for kind, row_label in sorted(grouped)
    ]
    _missing_seeds(rows, gaps)
    ranks = competition_ranks(rows, goal)
    order = {key: position for position, key in enumerate(ranks)}
    by_key = {r.key: r for r in rows}
    best = by_key.get(next(iter(ranks), None))
    pick = by_key.get(next((key for key in ranks if key[0] == "model"), None))
    latency_front = fronts(rows, goal, "latency")
    params_front = fronts(rows, goal, "params")
    finished = [
        replace(
            row,
            rank=ranks.get(row.key),
            versus_best=compare(row, best, alpha),
            versus_pick=compare(row, pick, alpha) if row.kind == "model" else row.versus_pick,
            front_latency=latency_front.get(row.key),
            front_params=params_front.get(row.key),
        )
        for row in rows
    ]
    finished.sort(key=lambda r: (order.get(r.key, len(order)), r.key))
    return TaskSummary(label, metric, goal, tuple(finished), tuple(gaps))


def summarise(
    runs: Sequence[Run],
    skipped: Sequence[Skipped] = (),
    alpha: float = 0.05,
    confidence: float = 0.95,
) -> Summary:
    """Group runs by task (name plus differing task options) and row, and compute every figure.

    Example: ``summarise(load_runs(out)[0]).tasks[0].best.label`` names the best row of the first
    task (tasks in alphabetical order).
    """
    if not 0.0 < alpha < 1.0:
        raise ValueError(f"alpha must lie in (0, 1), got {alpha!r}")
    by_task: dict[str, list[Run]] = defaultdict(list)
    for run in runs:
        by_task[run.task].append(run)
    labelled: dict[str, list[Run]] = defaultdict(list)
    for name, task_runs in by_task.items():
        labels = _variant_labels(name, (r.task_variant for r in task_runs))
        for run in task_runs:
            labelled[labels[run.task_variant]].append(run)
    tasks = tuple(
        _summarise_task(label, labelled[label], alpha, confidence) for label in sorted(labelled)
    )
    return Summary(tasks, cross_task(tasks), tuple(skipped), alpha, confidence)
