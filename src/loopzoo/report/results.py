"""The shapes of a comparison: rows, task summaries, the cross-task view, and the column set
shared by the tables, the CSV and the pictures."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

from loopzoo.report.loading import Run, Skipped
from loopzoo.report.stats import Interval

__all__ = [
    "COST_FIELDS",
    "LATENCY_FIELD",
    "REACH_FACTORS",
    "REACH_PHASES",
    "Comparison",
    "Exposure",
    "OverallRow",
    "Row",
    "Summary",
    "TaskSummary",
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
    """How a row stands against the best row: ``best``; ``indistinguishable`` (Welch p >= alpha
    and the row's mean inside the best row's interval); ``inconclusive`` (p >= alpha but the mean
    outside it: the seeds spread too widely to tell); ``worse`` (p < alpha); ``untested`` (fewer
    than 2 values on a side); or ``no data``."""

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
