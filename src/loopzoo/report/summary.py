"""Turn run records into per-task summaries (rows ranked, compared and flagged, with what is
missing) and the cross-task view."""

from __future__ import annotations

from collections import Counter, defaultdict
from collections.abc import Sequence
from dataclasses import dataclass, replace

from loopzoo.report.cross_task import cross_task
from loopzoo.report.labels import option_label, variant_labels
from loopzoo.report.loading import UNRANKED, Run, Skipped
from loopzoo.report.ranking import compare_family, competition_ranks, fronts
from loopzoo.report.results import OverallRow, Row, TaskSummary
from loopzoo.report.rows import build_row, row_interval
from loopzoo.report.stats import analysis_scale

__all__ = ["EQUIVALENCE_MARGIN", "Summary", "summarise"]

EQUIVALENCE_MARGIN = 0.05  # relative margin of the equivalence test (5%: a stated convention)
ROW_KINDS = ("model", "baseline", "bound", "reference")


@dataclass(frozen=True)
class Summary:
    """Everything the report shows, in a fixed order."""

    tasks: tuple[TaskSummary, ...]
    overall: tuple[OverallRow, ...]
    skipped: tuple[Skipped, ...]
    alpha: float
    confidence: float
    margin: float


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


def _group_rows(runs: Sequence[Run]) -> dict[tuple[str, str], list[Run]]:
    """Runs by (kind, row label): the name with its non-default options, then whatever else
    tells same-labelled variants apart (feedback settings, budget)."""
    grouped: dict[tuple[str, str], list[Run]] = defaultdict(list)
    for kind in ROW_KINDS:
        by_name: dict[str, list[Run]] = defaultdict(list)
        for run in runs:
            if run.kind == kind:
                by_name[option_label(run.model, run.options)].append(run)
        for name in sorted(by_name):
            labels = variant_labels(name, (r.row_variant for r in by_name[name]))
            for run in by_name[name]:
                grouped[(kind, labels[run.row_variant])].append(run)
    return grouped


def _summarise_task(
    label: str, runs: list[Run], notes: Sequence[str], alpha: float, margin: float,
    confidence: float,
) -> TaskSummary:
    gaps: list[str] = list(notes)
    metric, goal = _primary(runs, label, gaps)
    grouped = _group_rows(runs)
    rows = [
        build_row(kind, row_label, grouped[(kind, row_label)], metric, goal, confidence, gaps)
        for kind, row_label in sorted(grouped)
    ]
    _missing_seeds(rows, gaps)
    scale = analysis_scale(metric, [v for r in rows for v in r.values])
    if scale == "raw" and analysis_scale(metric, [1.0]) == "log":
        gaps.append(f"{label}: some {metric} values are 0 or below, so rows are compared on the "
                    "raw scale rather than as ratios")
    rows = [replace(r, interval=row_interval(r.values, r.exact, scale, metric, confidence))
            for r in rows]
    ranks = competition_ranks(rows, goal)
    order = {key: position for position, key in enumerate(ranks)}
    by_key = {r.key: r for r in rows}
    best = by_key.get(next(iter(ranks), None))
    pick = by_key.get(next((key for key in ranks if key[0] == "model"), None))
    ranked = [r for r in rows if r.kind not in UNRANKED]
    versus_best = compare_family(ranked, best, scale, alpha, margin, confidence)
    versus_pick = compare_family([r for r in rows if r.kind == "model"], pick, scale, alpha,
                                 margin, confidence)
    latency_front = fronts(rows, goal, "latency")
    params_front = fronts(rows, goal, "params")
    finished = [
        replace(
            row,
            rank=ranks.get(row.key),
            versus_best=versus_best.get(row.key, row.versus_best),
            versus_pick=versus_pick.get(row.key, row.versus_pick),
            front_latency=latency_front.get(row.key),
            front_params=params_front.get(row.key),
        )
        for row in rows
    ]
    finished.sort(key=lambda r: (order.get(r.key, len(order)), ROW_KINDS.index(r.kind), r.key))
    return TaskSummary(label, metric, goal, scale, tuple(finished), tuple(gaps))


def _short(sha256: str) -> str:
    return sha256[:12]


def _data_versions(label: str, runs: list[Run]) -> dict[str, tuple[list[Run], list[str]]]:
    """Split a task's runs by the content of the files they read (``data.files``): runs of
    different data versions are never pooled. Returns label -> (runs, notes)."""
    versions: dict[tuple, list[Run]] = defaultdict(list)
    unrecorded = [r for r in runs if r.data_files is None]
    for run in runs:
        if run.data_files is not None:
            versions[run.data_files].append(run)
    if len(versions) <= 1:
        notes = []
        if unrecorded and any(versions):  # a task that reads no user file has nothing to say
            notes.append(
                f"{label}: {len(unrecorded)} record(s) do not record the content hash of the data "
                "they read (not recorded); pooled with the rest"
            )
        return {label: (runs, notes)}
    roles = sorted({(f.role, f.path) for files in versions for f in files})
    changed = [
        (role, path) for role, path in roles
        if len({next((f.sha256 for f in files if (f.role, f.path) == (role, path)), None)
                for files in versions}) > 1
    ]
    described = []
    for files, members in sorted(versions.items(), key=lambda item: (-len(item[1]), item[0])):
        hashes = ", ".join(
            _short(f.sha256) for f in files if (f.role, f.path) in changed
        ) or "absent"
        described.append((files, members, hashes))
    summary = "; ".join(f"sha256 {hashes}… in {len(members)} record(s)"
                        for _, members, hashes in described)
    what = ", ".join(f"{path} ({role})" for role, path in changed)
    note = (f"{label}: not pooled: its runs read different versions of {what}: {summary}; each "
            "version is reported as its own task")
    split = {f"{label} (data {hashes})": (members, [note]) for _, members, hashes in described}
    if unrecorded:
        split[f"{label} (data not recorded)"] = (unrecorded, [note])
    return split


def summarise(
    runs: Sequence[Run],
    skipped: Sequence[Skipped] = (),
    alpha: float = 0.05,
    confidence: float = 0.95,
    margin: float = EQUIVALENCE_MARGIN,
) -> Summary:
    """Group runs by task (name, differing task options, data version) and row, and compute every
    figure. ``margin`` is the relative equivalence margin of the two one-sided tests.

    Example: ``summarise(load_runs(out)[0]).tasks[0].best.label`` names the best row of the first
    task (tasks in alphabetical order).
    """
    if not 0.0 < alpha < 1.0:
        raise ValueError(f"alpha must lie in (0, 1), got {alpha!r}")
    if not margin > 0.0:
        raise ValueError(f"equivalence margin must be above 0, got {margin!r}")
    by_task: dict[str, list[Run]] = defaultdict(list)
    for run in runs:
        by_task[run.task].append(run)
    labelled: dict[str, tuple[list[Run], list[str]]] = {}
    for name, task_runs in by_task.items():
        labels = variant_labels(name, (r.task_variant for r in task_runs))
        grouped: dict[str, list[Run]] = defaultdict(list)
        for run in task_runs:
            grouped[labels[run.task_variant]].append(run)
        for label, members in grouped.items():
            labelled.update(_data_versions(label, members))
    tasks = tuple(
        _summarise_task(label, labelled[label][0], labelled[label][1], alpha, margin, confidence)
        for label in sorted(labelled)
    )
    return Summary(tasks, cross_task(tasks), tuple(skipped), alpha, confidence, margin)
