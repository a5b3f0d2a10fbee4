"""A short verdict per task in plain words: what to pick, what ties with it, at what cost."""

from __future__ import annotations

from loopzoo.report import formatting as fmt
from loopzoo.report.results import LATENCY_FIELD, Row, TaskSummary
from loopzoo.report.stats import welch_test

__all__ = ["task_verdict"]


def _names(rows: list[Row]) -> str:
    labels = [row.label for row in rows]
    return labels[0] if len(labels) == 1 else ", ".join(labels[:-1]) + " and " + labels[-1]


def _latency(row: Row) -> float | None:
    return row.cost.get(LATENCY_FIELD)


def _quality(row: Row, task: TaskSummary, seeds: bool = True) -> str:
    assert row.interval is not None
    text = f"{task.metric} {fmt.interval(row.interval)}"
    return f"{text} over {row.interval.n} seeds" if seeds and row.interval.n > 1 else text


def _pick_sentence(pick: Row, task: TaskSummary, alpha: float) -> list[str]:
    direction = "lower" if task.goal == "min" else "higher"
    topologies = [r for r in task.rows if r.kind == "model" and r.key != pick.key and r.interval]
    lead = f"Pick {pick.label}" if topologies else f"Only {pick.label} has results"
    sentences = [f"{lead}: {_quality(pick, task)} ({direction} is better)."]
    same = [r for r in topologies if r.versus_pick.verdict == "indistinguishable"]
    worse = [r for r in topologies if r.versus_pick.verdict == "worse"]
    untested = [r for r in topologies if r.versus_pick.verdict == "untested"]
    close = same
    loose = [r for r in topologies if r.versus_pick.verdict == "inconclusive"]
    if close:
        verb = "is" if len(close) == 1 else "are"
        sentences.append(
            f"{_names(close)} {verb} statistically indistinguishable from it "
            f"(Welch p ≥ {alpha:g} and a mean inside its interval), so the ranking among them is "
            "seed noise."
        )
        mine = _latency(pick)
        faster = [r for r in close if mine and _latency(r) and _latency(r) < mine]
        if faster:
            cheapest = min(faster, key=lambda r: (_latency(r), r.label))
            sentences.append(
                f"When latency matters take {cheapest.label}: as good within noise and "
                f"{fmt.ratio(_latency(pick) / _latency(cheapest))} faster per streaming step."
            )
    if loose:
        example = loose[0]
        sentences.append(
            f"{_names(loose)} {'is' if len(loose) == 1 else 'are'} not significantly different"
            f"{' either' if close else ''}, but only because "
            f"{'its' if len(loose) == 1 else 'their'} seeds vary widely "
            f"(e.g. {example.label}: {_quality(example, task, seeds=False)}); that is no "
            "evidence of being as good."
        )
    if worse and not same and not loose and not untested:
        sentences.append(f"It is significantly better than every other topology (p < {alpha:g}).")
    if untested:
        sentences.append(
            f"{_names(untested)} could not be tested against it (fewer than 2 usable seeds)."
        )
    if pick.interval is not None and pick.interval.n < 2:
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


def _baseline_sentence(pick: Row, task: TaskSummary, alpha: float) -> str | None:
    baselines = [r for r in task.rows if r.kind == "baseline" and r.interval]
    if not baselines or pick.interval is None:
        return None
    best = baselines[0]  # rows come in ranked order
    quality = f"{best.label} ({_quality(best, task, seeds=False)})"
    test = welch_test(pick.values, best.values)
    if test is not None and test.p_value >= alpha:
        return (
            f"It is statistically indistinguishable from the best classical baseline, "
            f"{best.label} ({_quality(best, task, seeds=False)}; Welch "
            f"{fmt.p_phrase(test.p_value)}): the best topology did not measurably beat it."
        )
    relation = "beats" if (pick.rank or 0) < (best.rank or 0) else "does not beat"
    return f"It {relation} the best classical baseline, {quality}."


def _exposure_sentence(pick: Row, task: TaskSummary) -> str | None:
    contenders = [pick] + [r for r in task.rows if r.versus_pick.verdict == "indistinguishable"]
    for row in contenders:
        exposure = row.exposure
        if exposure and exposure.teacher_forced and exposure.free_running:
            return (
                f"{row.label} feeds back its outputs: test {task.metric} "
                f"{fmt.number(exposure.free_running.mean)} free-running against "
                f"{fmt.number(exposure.teacher_forced.mean)} teacher-forced "
                f"({'; '.join(exposure.settings)}); expect the free-running figure in service."
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


def task_verdict(task: TaskSummary, alpha: float) -> list[str]:
    """Sentences naming the topology to pick for ``task``, its ties, cost and caveats."""
    topologies = [r for r in task.rows if r.kind == "model" and r.interval]
    if task.metric is None or not topologies:
        return ["No verdict: no topology has a usable test result for this task (see the gaps)."]
    pick = topologies[0]  # rows come in ranked order
    sentences = []
    best = task.best
    if best is not None and best.kind == "baseline" and best.key != pick.key:
        comparison = pick.versus_best
        relation = {
            "indistinguishable": "the best topology is within noise of it "
            f"(Welch {fmt.p_phrase(comparison.p_value)})",
            "worse": "it is significantly better than the best topology "
            f"(Welch {fmt.p_phrase(comparison.p_value)})",
        }.get(comparison.verdict, "no topology beat it")
        sentences.append(
            f"The classical baseline {best.label} has the best mean ({_quality(best, task)}); "
            f"{relation}."
        )
    sentences.extend(_pick_sentence(pick, task, alpha))
    baseline_best = best is not None and best.kind == "baseline" and best.key != pick.key
    extras = (
        _cost_sentence(pick, task),
        None if baseline_best else _baseline_sentence(pick, task, alpha),
        _exposure_sentence(pick, task),
        _health_sentence(pick),
    )
    sentences.extend(extra for extra in extras if extra)
    return sentences
