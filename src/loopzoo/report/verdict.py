"""A short verdict per task in plain words: what to ship (topology or classical row), the run and
command behind it, how the others compare without overclaiming, at what cost."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from loopzoo.report import formatting as fmt
from loopzoo.report.budget import budget_sentence
from loopzoo.report.ranking import pair_test
from loopzoo.report.results import LATENCY_FIELD, Row, TaskSummary
from loopzoo.report.rows import validation_score
from loopzoo.report.stats import SEEDS_LIMIT

__all__ = ["shipped_row", "task_verdict"]


def _names(rows: list[Row]) -> str:
    labels = [row.label for row in rows]
    return labels[0] if len(labels) == 1 else ", ".join(labels[:-1]) + " and " + labels[-1]


def _latency(row: Row) -> float | None:
    return row.cost.get(LATENCY_FIELD)


def _quality(row: Row, task: TaskSummary, seeds: bool = True) -> str:
    assert row.interval is not None
    text = f"{task.metric} {fmt.interval(row.interval)}"
    return f"{text} over {row.interval.n} seeds" if seeds and row.interval.n > 1 else text


def _topologies(task: TaskSummary) -> list[Row]:
    return [r for r in task.rows if r.kind == "model" and r.interval]


def _best_classical(task: TaskSummary) -> Row | None:
    return next((r for r in task.rows if r.kind == "baseline" and r.interval), None)


def shipped_row(task: TaskSummary, alpha: float, confidence: float = 0.95) -> Row | None:
    """The row the verdict says to ship: the best classical row when it has the best value or no
    topology is significantly better than it (Welch on the task's scale), else the best topology.
    None when no ranked row has a value."""
    topologies, classical = _topologies(task), _best_classical(task)
    pick = topologies[0] if topologies else None  # rows come in ranked order
    if pick is None or classical is None:
        return pick or classical
    if (classical.rank or 0) < (pick.rank or 0):
        return classical
    test = pair_test(pick, classical, task.scale, confidence)
    return classical if test is None or test.p_value >= alpha else pick


def _settings(values: Mapping[str, Any]) -> str:
    return ", ".join(f"{k}={fmt.number(v) if isinstance(v, float) else v}"
                     for k, v in sorted(values.items()))


def _ship_details(row: Row, task: TaskSummary) -> str:
    parts = []
    if row.kind == "model":
        tuning = row.tuning
        if tuning is None:
            parts.append("tuning not recorded")
        else:
            trials = tuning.completed if tuning.completed is not None else tuning.trials
            chosen = _settings(tuning.chosen) or "nothing tuned"
            parts.append(f"tuned values {chosen} (best of {trials} trials on validation)")
    elif row.runs and row.runs[0].details:
        parts.append(f"fitted {_settings(row.runs[0].details)}")
    run = row.ship
    if run is None:
        parts.append("no run has a validation score to choose by, so no run is named")
        return "Configuration: " + "; ".join(parts) + "."
    score = validation_score(run, task.metric)
    parts.append(
        f"run to ship: seed {run.seed} ({run.run_id}), best validation {task.metric} "
        f"{fmt.number(score)} (chosen on validation, never on test)"
    )
    parts.append(f"artifact {run.artifact}" if run.artifact else "artifact not recorded")
    parts.append(f"reproduce with `{run.reproduce}`" if run.reproduce
                 else "reproduce command not recorded")
    return "Configuration: " + "; ".join(parts) + "."


def _unconverged_sentence(task: TaskSummary) -> str | None:
    flagged = [r for r in _topologies(task) if r.flags]
    if not flagged:
        return None
    listed = "; ".join(f"{r.label} ({', '.join(r.flags)})" for r in flagged)
    return (
        f"Drawn from unconverged rows, so treat it as provisional: {listed}; more steps or a "
        "wider search range could change it."
    )


def _ship_sentence(ship: Row, pick: Row | None, task: TaskSummary, alpha: float) -> str:
    direction = "lower" if task.goal == "min" else "higher"
    if ship.kind == "model":
        lead = "Ship" if len(_topologies(task)) > 1 else f"Only {ship.label} has results; ship"
        return f"{lead} {ship.label}: {_quality(ship, task)} ({direction} is better)."
    text = (f"Ship the classical row {ship.label}: {_quality(ship, task)} ({direction} is "
            "better); no recurrent topology beat it here")
    if pick is None:
        return text + " (no topology has results)."
    test = pair_test(pick, ship, task.scale, 0.95)
    if test is None:
        relation = "could not be tested against it"
    elif (pick.rank or 0) > (ship.rank or 0):
        words = "significantly worse" if test.p_value < alpha else "not significantly different"
        relation = f"is {words} (Welch {fmt.p_phrase(test.p_value)})"
    else:
        relation = ("has a better value but is not significantly better "
                    f"(Welch {fmt.p_phrase(test.p_value)})")
    best = f"the best topology, {pick.label} ({_quality(pick, task, seeds=False)})"
    return f"{text}: {best}, {relation}."


def _comparison_sentences(pick: Row, task: TaskSummary, alpha: float, margin: float) -> list[str]:
    others = [r for r in _topologies(task) if r.key != pick.key]
    by = {v: [r for r in others if r.versus_pick.verdict == v]
          for v in ("worse", "equivalent", "not significant", "untested")}
    tested = len(others) - len(by["untested"])
    sentences = []
    if by["worse"] and len(by["worse"]) == tested and not by["untested"]:
        sentences.append(
            f"It is significantly better than every other topology (Welch on the "
            f"{task.scale} scale, Holm-adjusted over {tested} comparisons, p < {alpha:g})."
        )
    elif by["worse"]:
        sentences.append(
            f"Significantly worse than it after Holm's correction over {tested} comparisons: "
            f"{_names(by['worse'])}."
        )
    if by["equivalent"]:
        sentences.append(
            f"{_names(by['equivalent'])} {'is' if len(by['equivalent']) == 1 else 'are'} "
            f"equivalent to it within ±{margin:.0%} (two one-sided tests, p < {alpha:g})."
        )
        mine = _latency(pick)
        faster = [r for r in by["equivalent"] if mine and _latency(r) and _latency(r) < mine]
        if faster:
            cheapest = min(faster, key=lambda r: (_latency(r), r.label))
            sentences.append(
                f"When latency matters take {cheapest.label}: equivalent within the margin and "
                f"{fmt.ratio(mine / _latency(cheapest))} faster per streaming step."
            )
    for row in by["not significant"]:
        comparison = row.versus_pick
        sentences.append(
            f"{row.label} is not significantly different "
            f"({fmt.difference(comparison.difference)}, Holm-adjusted "
            f"{fmt.p_phrase(comparison.adjusted_p)}), which is no evidence of equal quality; "
            f"separating the pair at the observed spread would take "
            f"{fmt.seeds_phrase(comparison.seeds_needed, SEEDS_LIMIT, comparison.difference)}."
        )
    if by["untested"]:
        sentences.append(
            f"{_names(by['untested'])} could not be tested against it (fewer than 2 usable seeds)."
        )
    if pick.interval is not None and pick.interval.n < 2 and not pick.exact:
        sentences.append("Only one usable seed: treat this as a hint, not a result.")
    return sentences


def _cost_sentence(pick: Row, task: TaskSummary) -> str | None:
    latencies = [(r.cost.get(LATENCY_FIELD), r.label) for r in task.rows if r.kind == "model"]
    present = [(v, label) for v, label in latencies if v]
    mine = _latency(pick)
    if not present or not mine:
        return None
    fastest, fastest_label = min(present)
    train = pick.cost.get("train_seconds")
    parts = [f"Cost: {fmt.number(mine, 3)} ms per streaming step"]
    if train is not None:
        parts.append(f"{fmt.number(train, 3)} s of training")
    text = ", ".join(parts)
    if fastest_label != pick.label:
        text += f"; {fmt.ratio(mine / fastest)} the step latency of the fastest, {fastest_label}"
    else:
        text += "; the fastest topology per step"
    return text + "."


def _classical_sentence(pick: Row, task: TaskSummary) -> str | None:
    best = _best_classical(task)
    if best is None or pick.interval is None:
        return None
    test = pair_test(pick, best, task.scale, 0.95)
    detail = "" if test is None else f"; {fmt.difference(test)}, Welch {fmt.p_phrase(test.p_value)}"
    return (f"It is significantly better than the best classical row, {best.label} "
            f"({_quality(best, task, seeds=False)}{detail}).")


def _bound_sentence(ship: Row, task: TaskSummary) -> str | None:
    if not task.bounds or ship.interval is None:
        return None
    bound = task.bounds[0]
    assert bound.interval is not None
    gap = fmt.gap(ship.interval.mean, bound.interval.mean, task.scale)
    return (f"Bound (not a model one could ship): {bound.label} at {task.metric} "
            f"{fmt.number(bound.interval.mean)}; gap of the shipped row to it: {gap}.")


def _exposure_sentence(pick: Row, task: TaskSummary) -> str | None:
    contenders = [pick] + [r for r in task.rows if r.versus_pick.verdict == "equivalent"]
    for row in contenders:
        exposure = row.exposure
        if exposure and exposure.teacher_forced and exposure.free_running:
            return (
                f"{row.label} feeds back its outputs: test {task.metric} "
                f"{fmt.number(exposure.free_running.mean)} free-running against "
                f"{fmt.number(exposure.teacher_forced.mean)} one-step with measured outputs "
                f"({'; '.join(exposure.settings)}); expect the free-running figure in service "
                "unless measured outputs are fed back there."
            )
    return None


def _health_sentence(pick: Row) -> str | None:
    bad = pick.counts["diverged"] + pick.counts["failed"] + pick.counts["missing"]
    if not bad:
        return None
    total = pick.counts["ok"] + pick.counts["diverged"] + pick.counts["failed"]
    return (
        f"Caution: {bad} of its {total} runs gave no usable result "
        f"({pick.counts['diverged']} diverged, {pick.counts['failed']} failed, "
        f"{pick.counts['missing']} without the metric)."
    )


def task_verdict(task: TaskSummary, alpha: float, margin: float = 0.05) -> list[str]:
    """Sentences naming the row to ship for ``task`` (its configuration, run, artifact and
    command), how the other topologies compare, the cost and the caveats. A verdict drawn from
    unconverged rows says so first."""
    topologies = _topologies(task)
    ship = shipped_row(task, alpha)
    if task.metric is None or ship is None:
        return ["No verdict: no topology or classical row has a usable test result for this task "
                "(see the gaps)."]
    pick = topologies[0] if topologies else None
    sentences = [s for s in (_unconverged_sentence(task),) if s]
    sentences.append(_ship_sentence(ship, pick, task, alpha))
    sentences.append(_ship_details(ship, task))
    if pick is not None:
        if ship.kind == "model":
            sentences.extend(_comparison_sentences(pick, task, alpha, margin))
        extras = (
            _cost_sentence(pick, task) if ship.kind == "model" else None,
            _classical_sentence(pick, task) if ship.kind == "model" else None,
            budget_sentence(task),
            _exposure_sentence(pick, task),
            _health_sentence(pick),
        )
        sentences.extend(extra for extra in extras if extra)
    bound = _bound_sentence(ship, task)
    if bound:
        sentences.append(bound)
    return sentences
