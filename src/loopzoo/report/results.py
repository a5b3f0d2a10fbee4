"""The shapes of a comparison: rows, task summaries, the cross-task rows, and the column set
shared by the tables, the CSV and the pictures (the whole :class:`~loopzoo.report.summary.Summary`
lives beside ``summarise``)."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

from loopzoo.report.loading import Run, Tuning
from loopzoo.report.stats import Difference, Interval

__all__ = [
    "COST_FIELDS",
    "LATENCY_FIELD",
    "REACH_FACTORS",
    "REACH_PHASES",
    "Comparison",
    "Exposure",
    "OverallRow",
    "Row",
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
    """How a row stands against a reference row (the best row, or the best topology).

    ``verdict``: ``best`` (the reference itself); ``worse`` (Welch's test on the task's scale,
    significant after Holm's correction over the comparisons with that reference);
    ``equivalent`` (not significant and two one-sided tests show the pair inside the stated
    margin); ``not significant`` (neither: no evidence of a difference, and none of equal
    quality); ``untested`` (fewer than 2 values on a side); ``exact`` (both
    seed-independent: compared by value, never tested); ``no data``.
    ``difference`` is row against reference (a ratio of geometric means on the log scale),
    ``adjusted_p`` Holm's, ``seeds_needed`` the seeds per row a t-test would need to separate the
    pair at the observed spread (None: no difference observed, or more than the search limit).
    """

    verdict: str
    p_value: float | None
    adjusted_p: float | None = None
    difference: Difference | None = None
    equivalence_p: float | None = None
    seeds_needed: int | None = None


@dataclass(frozen=True)
class Exposure:
    """One-step test metric with measured outputs fed back (``teacher_forced``: teacher forcing
    of observed values only) vs free running, of an output-feedback row; gap = free - forced."""

    settings: tuple[str, ...]
    teacher_forced: Interval | None
    free_running: Interval | None
    gap: Interval | None


@dataclass(frozen=True)
class Row:
    """One topology (kind ``model``), classical row (``baseline``) or bound (``bound``: an exact
    optimum or noise floor, never ranked) on one task.

    ``versus_best`` compares with the best row of the task, ``versus_pick`` (topologies only) with
    the best topology; they differ when a classical row is best. ``exact``: the value does not
    depend on the seed (one value, no interval). ``flags`` say why the row may be unconverged
    (runs stopped at the step cap, a tuned value at a bound of its range). ``ship`` is the ok run
    with the best validation score (never chosen on test).
    """

    kind: str
    label: str
    runs: tuple[Run, ...]
    counts: Mapping[str, int]
    values: tuple[float, ...]
    interval: Interval | None
    exact: bool
    flags: tuple[str, ...]
    tuning: Tuning | None
    ship: Run | None
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
    scale: str
    rows: tuple[Row, ...]
    gaps: tuple[str, ...]

    @property
    def best(self) -> Row | None:
        """The first rank-1 row (ties: more seeds first), None when no row has a usable value."""
        return next((row for row in self.rows if row.rank == 1), None)

    @property
    def bounds(self) -> tuple[Row, ...]:
        """The bound rows with a value, tightest first (shown apart, never ranked)."""
        found = [r for r in self.rows if r.kind == "bound" and r.interval]
        sign = 1.0 if self.goal == "min" else -1.0
        return tuple(sorted(found, key=lambda r: (-sign * r.interval.mean, r.label)))


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
