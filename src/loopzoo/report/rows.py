"""One row of a task table from its runs: seeds, counts, quality, cost, gradient reach, the
exposure-bias figures, convergence flags and the run to ship, with a plain sentence for everything
that is missing."""

from __future__ import annotations

import statistics
from collections import Counter, defaultdict
from collections.abc import Mapping, Sequence
from typing import Any

from loopzoo.report.loading import Run, Tuning, finite_number
from loopzoo.report.reach import reach_lag
from loopzoo.report.results import (
    COST_FIELDS,
    REACH_FACTORS,
    REACH_PHASES,
    Comparison,
    Exposure,
    Row,
)
from loopzoo.report.stats import Interval, interval, mean_interval, metric_limits

__all__ = ["build_row", "ranked_split", "row_interval", "validation_score"]

STATUS_COUNTS = ("ok", "diverged", "failed", "skipped", "missing")


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
    """The metrics group a run is ranked on: what a deployed model scores. ``test``, except for
    output-feedback runs not selected on measured feedback, which are ranked on
    ``test_free_running`` (feeding back their own outputs). Records written before measured
    feedback existed held a teacher-forced ``test`` that may have fed back values a deployed
    model never has, so they are ranked free running too."""
    feedback = run.feedback or {}
    if feedback.get("selected_on") != "measured_feedback" and "test_free_running" in run.metrics:
        return "test_free_running"
    return "test"


def validation_score(run: Run, metric: str | None) -> float | None:
    """The run's validation figure matching its ranked test figure (``val`` or
    ``val_free_running``): what the run to ship is chosen on."""
    return _metric(run, ranked_split(run).replace("test", "val", 1), metric)


def row_interval(
    values: Sequence[float], exact: bool, scale: str, metric: str | None, confidence: float
) -> Interval | None:
    """The row's interval on the task's analysis ``scale``, inside the metric's range."""
    if not values:
        return None
    return interval(values, scale, confidence, metric_limits(metric), exact=exact)


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
    """Measured-feedback (one step, measured outputs fed back) against free-running figures;
    only for runs whose fed-back targets are observations a deployed model has at that step
    (``test_measured_feedback``): elsewhere the gap would measure a leak, not exposure bias."""
    fed = [r for r in runs if r.feedback is not None and "test_measured_feedback" in r.metrics]
    if not fed:
        return None
    settings = sorted({_feedback_setting(r.feedback) for r in fed if r.feedback is not None})
    forced, free, gap = [], [], []
    for run in fed:
        if run.status != "ok":
            continue
        tf = _metric(run, "test_measured_feedback", metric)
        fr = _metric(run, "test_free_running", metric)
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
        if run.status == "skipped":
            gaps.append(f"{where} skipped{reason}")
        elif run.status == "diverged":
            at = f" at step {run.diverged_at_step}" if run.diverged_at_step is not None else ""
            gaps.append(f"{where} diverged{at}{reason}")
        elif run.status == "failed":
            gaps.append(f"{where} failed{reason}")
        elif _metric(run, ranked_split(run), metric) is None:
            gaps.append(f"{where} is ok but has no finite test {metric or 'metric'} ({run.source})")


def _exact(label: str, ok_runs: Sequence[Run], values: Sequence[float], gaps: list[str]) -> bool:
    """Whether the row's value does not depend on the seed (``seed_dependent: false``)."""
    if not ok_runs or any(r.seed_dependent for r in ok_runs):
        return False
    if len(set(values)) > 1:
        gaps.append(
            f"{label}: recorded as not depending on the seed, yet its values differ across "
            "seeds; treated as seed-dependent"
        )
        return False
    return True


def _flags(runs: Sequence[Run]) -> tuple[str, ...]:
    """Why a row may be unconverged: runs stopped at the step cap, tuned values at a bound."""
    flags = []
    capped = [r for r in runs if r.convergence and r.convergence.stopped == "step_cap"]
    recorded = [r for r in runs if r.convergence and r.convergence.stopped]
    if capped:
        flags.append(f"{len(capped)} of {len(recorded)} runs stopped at the step cap")
    at_bound = sorted({name for r in runs if r.tuning for name in r.tuning.at_bound})
    if at_bound:
        own = "its" if len(at_bound) == 1 else "their"
        flags.append(f"tuned {', '.join(at_bound)} at a bound of {own} range")
    return tuple(flags)


def _ship(ok_runs: Sequence[Run], metric: str | None, goal: str) -> Run | None:
    """The ok run with the best validation score (ties: lower seed); None without any."""
    scored = [(v, r.seed, r) for r in ok_runs if (v := validation_score(r, metric)) is not None]
    if not scored:
        return None
    sign = 1.0 if goal == "min" else -1.0
    return min(scored, key=lambda item: (sign * item[0], item[1]))[2]


def _tuning(runs: Sequence[Run]) -> Tuning | None:
    """The row's tuning record: the latest finished run's (one study serves every seed)."""
    tuned = [r for r in runs if r.tuning is not None]
    return max(tuned, key=lambda r: (r.finished, r.run_id)).tuning if tuned else None


def build_row(
    kind: str,
    label: str,
    runs: list[Run],
    metric: str | None,
    goal: str,
    confidence: float,
    gaps: list[str],
) -> Row:
    """The row ``label`` from its runs (one per seed kept), appending what is missing to ``gaps``.

    The interval is on the raw scale; rank, comparisons and Pareto flags are left unset: the task
    summary sets its analysis scale and fills them in.
    """
    runs = _latest_per_seed(runs, label, gaps)
    _row_gaps(label, runs, metric, gaps)
    ok_runs = [r for r in runs if r.status == "ok"]
    values = tuple(v for r in ok_runs if (v := _metric(r, ranked_split(r), metric)) is not None)
    counts = Counter(r.status for r in runs)
    counts["missing"] = len(ok_runs) - len(values)
    exact = _exact(label, ok_runs, values, gaps)
    if len(values) == 1 and not exact:
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
        counts={s: counts.get(s, 0) for s in STATUS_COUNTS},
        values=values,
        interval=row_interval(values, exact, "raw", metric, confidence),
        exact=exact,
        flags=_flags(runs) if kind == "model" else (),
        tuning=_tuning(runs),
        ship=_ship(ok_runs, metric, goal),
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
