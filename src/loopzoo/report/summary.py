"""Turn run records into per-task rows (quality, counts, rank, cost, gradient reach, exposure bias)
and a cross-task view (mean rank, quality-versus-cost Pareto front)."""

from __future__ import annotations

import math
import statistics
from collections import Counter, defaultdict
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, replace
from typing import Any

from loopzoo.report.loading import Run, Skipped, finite_number
from loopzoo.report.pareto import pareto_front
from loopzoo.report.reach import reach_lag
from loopzoo.report.stats import Interval, mean_interval, welch_test

__all__ = [
    "COST_FIELDS",
    "REACH_FACTORS",
    "Comparison",
    "Exposure",
    "OverallRow",
    "Row",
    "Summary",
    "TaskSummary",
    "ranked_split",
    "summarise",
]

# (record field under "cost", column title, unit)
COST_FIELDS = (
    ("train_seconds", "train time", "s"),
    ("train_ms_per_step", "per train step", "ms"),
    ("step_latency_ms", "step, 1 stream", "ms"),
    ("batched_step_latency_ms", "step, batched", "ms"),
    ("peak_memory_mb", "peak memory", "MB"),
)
LATENCY_FIELD = "step_latency_ms"
REACH_FACTORS = (10, 100)
REACH_PHASES = (("init", "at init"), ("final", "trained"))


@dataclass(frozen=True)
class Comparison:
    """How a row stands against the best row: ``best``, ``indistinguishable`` (Welch p >= alpha),
    ``worse`` (p < alpha), ``untested`` (fewer than 2 values on a side) or ``no data``."""

    verdict: str
    p_value: float | None


@dataclass(frozen=True)
class Exposure:
    """Teacher-forced vs free-running test metric of an output-feedback row; gap = free - forced."""

    settings: tuple[str, ...]
    teacher_forced: Interval | None
    free_running: Interval | None
    gap: Interval | None


@dataclass(frozen=True)
class Row:
    """One topology (kind ``model``) or classical baseline (kind ``baseline``) on one task.

    ``versus_best`` compares with the best row of the task, ``versus_pick`` (topologies only) with
    the best topology; they differ when a classical baseline is best.
    """

    kind: str
    label: str
    runs: tuple[Run, ...]
    counts: Mapping[str, int]
    values: tuple[float, ...]
    interval: Interval | None
    params: str
    params_value: float | None
    rank: int | None
    versus_best: Comparison
    versus_pick: Comparison
    cost: Mapping[str, float | None]
    batch_size: int | None
    reach: Mapping[str, float | None]
    exposure: Exposure | None
    front_latency: bool | None
    front_params: bool | None

    @property
    def key(self) -> tuple[str, str]:
        """Identity across tasks (kind, label); fixes a row's plot style."""
        return self.kind, self.label


@dataclass(frozen=True)
class TaskSummary:
    """All rows of one task, ordered by rank (unranked rows last), with what is missing."""

    label: str
    metric: str | None
    goal: str
    rows: tuple[Row, ...]
    gaps: tuple[str, ...]

    @property
    def best(self) -> Row | None:
        """The first rank-1 row (ties: more seeds first), None when no row has a usable value."""
        return next((row for row in self.rows if row.rank == 1), None)


@dataclass(frozen=True)
class OverallRow:
    """A topology across tasks: mean rank among topologies, geometric-mean latency ratio to the
    fastest topology of each task, and whether it is on the (ratio, mean rank) Pareto front.
    Only tasks where at least two topologies have results count."""

    label: str
    tasks_ranked: int
    mean_rank: float | None
    relative_latency: float | None
    on_front: bool | None


@dataclass(frozen=True)
class Summary:
    """Everything the report shows, in a fixed order."""

    tasks: tuple[TaskSummary, ...]
    overall: tuple[OverallRow, ...]
    skipped: tuple[Skipped, ...]
    alpha: float
    confidence: float


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


def _latest_per_seed(runs: list[Run], row_label: str, gaps: list[str]) -> list[Run]:
    by_seed: dict[int, list[Run]] = defaultdict(list)
    for run in runs:
        by_seed[run.seed].append(run)
    kept = []
    for seed in sorted(by_seed):
        candidates = sorted(by_seed[seed], key=lambda r: (r.finished, r.run_id), reverse=True)
        kept.append(candidates[0])
        if len(candidates) > 1:
            ignored = ", ".join(r.source for r in candidates[1:])
            gaps.append(
                f"{row_label}: seed {seed} has several records; using the latest finished "
                f"({candidates[0].source}), ignoring {ignored}"
            )
    return kept


def _metric(run: Run, split: str, metric: str | None) -> float | None:
    values = run.metrics.get(split)
    if metric is None or not isinstance(values, Mapping):
        return None
    return finite_number(values.get(metric))


def ranked_split(run: Run) -> str:
    """The metrics group a run is ranked on: ``test``, except for output-feedback runs selected
    on free running (``feedback.selected_on``), which are ranked on ``test_free_running``, the
    figure they reach feeding back their own outputs."""
    feedback = run.feedback or {}
    if feedback.get("selected_on") == "free_running" and "test_free_running" in run.metrics:
        return "test_free_running"
    return "test"


def _median(values: Sequence[float]) -> float | None:
    return float(statistics.median(values)) if values else None


def _interval(values: Sequence[float], confidence: float) -> Interval | None:
    return mean_interval(values, confidence) if values else None


def _params(runs: Sequence[Run]) -> tuple[str, float | None]:
    ok = [r.params for r in runs if r.status == "ok" and r.params is not None]
    counts = ok or [r.params for r in runs if r.params is not None]
    if not counts:
        return "—", None
    low, high = min(counts), max(counts)
    return (str(low) if low == high else f"{low}–{high}"), _median(counts)


def _cost(ok_runs: Sequence[Run], label: str, gaps: list[str]) -> tuple[dict, int | None]:
    cost: dict[str, float | None] = {}
    missing: list[str] = []
    for field, _, _ in COST_FIELDS:
        values = [finite_number((r.cost or {}).get(field)) for r in ok_runs]
        present = [v for v in values if v is not None]
        cost[field] = _median(present)
        if len(present) < len(values):
            missing.append(f"{field} ({len(values) - len(present)} of {len(values)})")
    if missing:
        gaps.append(f"{label}: cost figures missing in ok runs: {', '.join(missing)}")
    sizes = [
        int(s) for r in ok_runs if (s := finite_number((r.cost or {}).get("batched_batch_size")))
    ]
    batch = Counter(sizes).most_common(1)[0][0] if sizes else None
    return cost, batch


def _reach(ok_runs: Sequence[Run], label: str, gaps: list[str]) -> dict[str, float | None]:
    lags: dict[str, list[float]] = {f"{p}_{f}": [] for p, _ in REACH_PHASES for f in REACH_FACTORS}
    unusable = 0
    for run in ok_runs:
        series = run.gradient_reach or {}
        found = {
            f"{phase}_{factor}": reach_lag(series.get("lags"), series.get(phase), factor)
            for phase, _ in REACH_PHASES
            for factor in REACH_FACTORS
        }
        unusable += any(lag is None for lag in found.values())
        for key, lag in found.items():
            if lag is not None:
                lags[key].append(lag)
    if unusable:
        gaps.append(f"{label}: gradient reach missing or unusable in {unusable} ok run(s)")
    return {key: _median(values) for key, values in lags.items()}


def _feedback_setting(feedback: Mapping[str, Any]) -> str:
    parts = [str(feedback[k]) for k in ("mode", "schedule", "fed_back") if feedback.get(k)]
    text = " / ".join(parts)
    return f"{text}, selected on {feedback['selected_on']}" if feedback.get("selected_on") else text


def _exposure(runs: Sequence[Run], metric: str | None, confidence: float) -> Exposure | None:
    fed = [r for r in runs if r.feedback is not None]
    if not fed:
        return None
    settings = sorted({_feedback_setting(r.feedback) for r in fed if r.feedback is not None})
    forced, free, gap = [], [], []
    for run in fed:
        if run.status != "ok":
            continue
        tf, fr = _metric(run, "test", metric), _metric(run, "test_free_running", metric)
        if tf is not None:
            forced.append(tf)
        if fr is not None:
            free.append(fr)
        if tf is not None and fr is not None:
            gap.append(fr - tf)
    return Exposure(
        tuple(settings),
        _interval(forced, confidence),
        _interval(free, confidence),
        _interval(gap, confidence),
    )


def _row_gaps(row_label: str, runs: Sequence[Run], metric: str | None, gaps: list[str]) -> None:
    for run in runs:
        where = f"{row_label}: seed {run.seed}"
        reason = f": {run.reason}" if run.reason else " (no reason recorded)"
        if run.status == "diverged":
            at = f" at step {run.diverged_at_step}" if run.diverged_at_step is not None else ""
            gaps.append(f"{where} diverged{at}{reason}")
        elif run.status == "failed":
            gaps.append(f"{where} failed{reason}")
        elif _metric(run, ranked_split(run), metric) is None:
            gaps.append(f"{where} is ok but has no finite test {metric or 'metric'} ({run.source})")


def _build_row(
    kind: str, label: str, runs: list[Run], metric: str | None, confidence: float, gaps: list[str]
) -> Row:
    runs = _latest_per_seed(runs, label, gaps)
    _row_gaps(label, runs, metric, gaps)
    ok_runs = [r for r in runs if r.status == "ok"]
    values = tuple(v for r in ok_runs if (v := _metric(r, ranked_split(r), metric)) is not None)
    counts = Counter(r.status for r in runs)
    counts["missing"] = len(ok_runs) - len(values)
    if len(values) == 1:
        gaps.append(f"{label}: only one usable seed, so no interval and no test against the best")
    params, params_value = _params(runs)
    if kind == "model":
        cost, batch = _cost(ok_runs, label, gaps)
        reach = _reach(ok_runs, label, gaps)
    else:
        cost, batch, reach = {f: None for f, _, _ in COST_FIELDS}, None, {}
    return Row(
        kind=kind,
        label=label,
        runs=tuple(runs),
        counts={s: counts.get(s, 0) for s in ("ok", "diverged", "failed", "missing")},
        values=values,
        interval=_interval(values, confidence),
        params=params,
        params_value=params_value,
        rank=None,
        versus_best=Comparison("no data", None),
        versus_pick=Comparison("no data", None),
        cost=cost,
        batch_size=batch,
        reach=reach,
        exposure=_exposure(runs, metric, confidence),
        front_latency=None,
        front_params=None,
    )


def _competition_ranks(rows: Sequence[Row], goal: str) -> dict[tuple[str, str], int]:
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


def _compare(row: Row, best: Row | None, alpha: float) -> Comparison:
    if row.interval is None or best is None:
        return Comparison("no data", None)
    if row.key == best.key:
        return Comparison("best", None)
    result = welch_test(row.values, best.values)
    if result is None:
        return Comparison("untested", None)
    verdict = "indistinguishable" if result.p_value >= alpha else "worse"
    return Comparison(verdict, result.p_value)


def _fronts(rows: Sequence[Row], goal: str, attribute: str) -> dict[tuple[str, str], bool]:
    sign = 1.0 if goal == "min" else -1.0
    candidates = [r for r in rows if r.kind == "model" and r.interval and _cost_axis(r, attribute)]
    flags = pareto_front([(_cost_axis(r, attribute), sign * r.interval.mean) for r in candidates])
    return {r.key: flag for r, flag in zip(candidates, flags, strict=True)}


def _cost_axis(row: Row, attribute: str) -> float | None:
    return row.cost.get(LATENCY_FIELD) if attribute == "latency" else row.params_value


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
        _build_row(kind, row_label, grouped[(kind, row_label)], metric, confidence, gaps)
        for kind, row_label in sorted(grouped)
    ]
    _missing_seeds(rows, gaps)
    ranks = _competition_ranks(rows, goal)
    order = {key: position for position, key in enumerate(ranks)}
    by_key = {r.key: r for r in rows}
    best = by_key.get(next(iter(ranks), None))
    pick = by_key.get(next((key for key in ranks if key[0] == "model"), None))
    latency_front = _fronts(rows, goal, "latency")
    params_front = _fronts(rows, goal, "params")
    finished = [
        replace(
            row,
            rank=ranks.get(row.key),
            versus_best=_compare(row, best, alpha),
            versus_pick=_compare(row, pick, alpha) if row.kind == "model" else row.versus_pick,
            front_latency=latency_front.get(row.key),
            front_params=params_front.get(row.key),
        )
        for row in rows
    ]
    finished.sort(key=lambda r: (order.get(r.key, len(order)), r.key))
    return TaskSummary(label, metric, goal, tuple(finished), tuple(gaps))


def _overall(tasks: Sequence[TaskSummary]) -> tuple[OverallRow, ...]:
    ranks: dict[str, list[int]] = defaultdict(list)
    ratios: dict[str, list[float]] = defaultdict(list)
    labels: set[str] = set()
    for task in tasks:
        model_rows = [r for r in task.rows if r.kind == "model"]
        labels.update(r.label for r in model_rows)
        model_rows = [r for r in model_rows if r.interval]
        if len(model_rows) < 2:
            continue  # a task with one topology ranks nothing and has no fastest to compare with
        for key, rank in _competition_ranks(model_rows, task.goal).items():
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
    return Summary(tasks, _overall(tasks), tuple(skipped), alpha, confidence)

