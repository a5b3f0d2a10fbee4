"""Lay out the report: verdicts, one section per task, the cross-task view, skipped files."""

from __future__ import annotations

import re
from collections.abc import Callable

from loopzoo.report import formatting as fmt
from loopzoo.report.document import (
    Block,
    Bullets,
    Contents,
    Figure,
    Heading,
    Paragraph,
    Table,
)
from loopzoo.report.figures import overall_figure, styles_for, task_figures
from loopzoo.report.results import (
    COST_FIELDS,
    LATENCY_FIELD,
    REACH_FACTORS,
    REACH_PHASES,
    Comparison,
    Row,
    Summary,
    TaskSummary,
)
from loopzoo.report.verdict import task_verdict

__all__ = ["TITLE", "report_blocks"]

TITLE = "loopzoo: which recurrent topology to pick"


def _anchor(text: str) -> str:
    return "task-" + re.sub(r"[^a-z0-9]+", "-", text.lower()).strip("-")


def _reading_guide(summary: Summary) -> Bullets:
    confidence = f"{summary.confidence:.0%}"
    return Bullets((
        f"Quality is the task's primary test metric: mean over the seeds that finished ok, ± the "
        f"half width of its {confidence} Student-t confidence interval. Diverged and failed runs "
        "are counted, not averaged in.",
        f"'vs best' is Welch's two-sided t-test (unequal variances) against the rank-1 row at "
        f"alpha = {summary.alpha:g}: 'tie' means not significantly different and the row's mean "
        "lies inside the best row's interval; 'inconclusive' means not significantly different "
        "only because the row's seeds spread widely (no evidence of equal quality); 'untested' "
        "means a side has fewer than 2 usable seeds.",
        "Output-feedback rows selected on free running are ranked on their free-running test "
        "metric (feeding back their own outputs); the exposure-bias table shows both figures.",
        "Rank 1 is best; equal means share a rank. Classical baselines are ranked with the "
        "topologies; the cross-task mean rank counts topologies only.",
        "Costs are medians over ok runs: training wall time, time per training step, inference "
        "latency of one streaming step for one stream and for a batch of streams, peak memory.",
        "Gradient reach: the time lag at which the norm of dL/dh has fallen to 1/10 and 1/100 of "
        "its lag-0 value (median over seeds); 'beyond T' means it never fell that far.",
        "Pareto front: topologies that no other topology beats on both quality and cost.",
    ))


def _versus(comparison: Comparison) -> str:
    words = {"indistinguishable": "tie", "inconclusive": "inconclusive", "worse": "worse"}
    if comparison.verdict in words:
        return f"{words[comparison.verdict]} (p {fmt.p_value(comparison.p_value)})"
    return {"best": "best", "untested": "untested"}.get(comparison.verdict, fmt.MISSING)


def _yes_no(flag: bool | None) -> str:
    return fmt.MISSING if flag is None else "yes" if flag else "no"


def _quality_table(task: TaskSummary) -> Table:
    # When a classical baseline is best, also show how topologies stand against the best topology.
    baseline_best = task.best is not None and task.best.kind == "baseline"
    rows = tuple(
        (
            row.label,
            "topology" if row.kind == "model" else "baseline",
            row.params,
            fmt.interval(row.interval),
            str(row.counts["ok"]),
            str(row.counts["diverged"]),
            str(row.counts["failed"]),
            str(row.counts["missing"]),
            fmt.number(row.rank) if row.rank else fmt.MISSING,
            _versus(row.versus_best),
            *((_versus(row.versus_pick),) if baseline_best else ()),
            _yes_no(row.front_latency),
        )
        for row in task.rows
    )
    direction = "lower" if task.goal == "min" else "higher"
    headers = ("row", "kind", "params", f"test {task.metric} (mean ± 95% CI)", "ok",
               "diverged", "failed", "ok without metric", "rank", "vs best",
               *(("vs best topology",) if baseline_best else ()), "Pareto (latency)")
    return Table(
        f"Quality on {task.label}: test {task.metric} ({direction} is better)",
        headers,
        rows,
        (False, False, True, True, True, True, True, True, True) + (False,) * (len(headers) - 9),
    )


def _cost_table(task: TaskSummary) -> Table | None:
    rows = [r for r in task.rows if r.kind == "model"]
    if not rows or all(value is None for r in rows for value in r.cost.values()):
        return None
    present = [v for r in rows if (v := r.cost.get(LATENCY_FIELD))]
    fastest = min(present) if present else None

    def cells(row: Row) -> tuple[str, ...]:
        values = [fmt.number(row.cost.get(field), 3) for field, _, _ in COST_FIELDS]
        latency = row.cost.get(LATENCY_FIELD)
        relative = fmt.ratio(latency / fastest) if latency and fastest else fmt.MISSING
        batch = str(row.batch_size) if row.batch_size else fmt.MISSING
        return (row.label, *values, batch, relative)

    headers = tuple(f"{title} ({unit})" for _, title, unit in COST_FIELDS)
    return Table(
        f"Cost on {task.label} (medians over ok runs)",
        ("topology", *headers, "batch size", "step latency vs fastest"),
        tuple(cells(r) for r in rows),
        (False,) + (True,) * (len(COST_FIELDS) + 2),
    )


def _reach_table(task: TaskSummary) -> Table | None:
    rows = [r for r in task.rows if r.kind == "model"]
    if not rows or all(v is None for r in rows for v in r.reach.values()):
        return None
    columns = [(f"{phase}_{factor}", f"÷{factor} {title}") for phase, title in REACH_PHASES
               for factor in REACH_FACTORS]
    return Table(
        f"Gradient reach on {task.label}: lag (steps) where ‖dL/dh‖ has fallen by 10x / 100x",
        ("topology", *(title for _, title in columns)),
        tuple((r.label, *(fmt.lag(r.reach.get(key)) for key, _ in columns)) for r in rows),
        (False,) + (True,) * len(columns),
    )


def _exposure_table(task: TaskSummary) -> Table | None:
    rows = [r for r in task.rows if r.exposure is not None]
    if not rows:
        return None
    return Table(
        f"Exposure bias on {task.label}: teacher-forced against free-running test {task.metric}",
        ("topology", "feedback (mode / schedule / fed back)", "teacher-forced", "free-running",
         "gap (free − forced)"),
        tuple(
            (
                r.label,
                "; ".join(r.exposure.settings) or fmt.MISSING,
                fmt.interval(r.exposure.teacher_forced),
                fmt.interval(r.exposure.free_running),
                fmt.interval(r.exposure.gap),
            )
            for r in rows
            if r.exposure is not None
        ),
        (False, False, True, True, True),
    )


def _task_section(task: TaskSummary, figures: list[Figure]) -> list[Block]:
    blocks: list[Block] = [Heading(2, f"Task: {task.label}", _anchor(task.label))]
    goal = "minimise" if task.goal == "min" else "maximise"
    blocks.append(Paragraph(f"Ranked on test {task.metric or 'metric (none recorded)'}; {goal}."))
    builders: tuple[Callable[[TaskSummary], Table | None], ...] = (
        _cost_table, _reach_table, _exposure_table
    )
    blocks.append(_quality_table(task))
    blocks.extend(table for build in builders if (table := build(task)) is not None)
    blocks.append(Heading(3, f"What is missing on {task.label}"))
    complete = "Nothing: every run finished ok with its metric, cost and gradient reach."
    blocks.append(Bullets(task.gaps) if task.gaps else Paragraph(complete))
    blocks.extend(figures)
    return blocks


def _overall_section(summary: Summary, figure: Figure | None) -> list[Block]:
    blocks: list[Block] = [Heading(2, "Across tasks", "across-tasks")]
    if not summary.overall:
        return [*blocks, Paragraph("No topology has results.")]
    blocks.append(Table(
        "Topologies over all tasks",
        ("topology", "tasks ranked", "mean rank", "step latency vs fastest (geometric mean)",
         "Pareto front"),
        tuple(
            (r.label, str(r.tasks_ranked), fmt.number(r.mean_rank, 3),
             fmt.ratio(r.relative_latency), _yes_no(r.on_front))
            for r in summary.overall
        ),
        (False, True, True, True, False),
    ))
    blocks.append(Paragraph(
        "Mean rank is taken among topologies only, per task, over the tasks where at least two "
        "topologies have results ('tasks ranked'); compare rows with equal counts. The latency "
        "ratio divides each topology's streaming-step latency by the fastest topology's on the "
        "same task; the front holds topologies that no other beats on both mean rank and "
        "latency ratio.",
        note=True,
    ))
    if figure is not None:
        blocks.append(figure)
    return blocks


def report_blocks(summary: Summary) -> list[Block]:
    """The whole report as document blocks, in reading order."""
    styles = styles_for(summary)
    entries = [("Verdicts", "verdicts")]
    entries += [(f"Task: {task.label}", _anchor(task.label)) for task in summary.tasks]
    entries.append(("Across tasks", "across-tasks"))
    if summary.skipped:
        entries.append(("Skipped files", "skipped"))
    blocks: list[Block] = [
        Heading(1, TITLE),
        Contents(tuple(entries)),
        _reading_guide(summary),
        Heading(2, "Verdicts", "verdicts"),
    ]
    for task in summary.tasks:
        blocks.append(Heading(3, task.label))
        blocks.append(Paragraph(" ".join(task_verdict(task, summary.alpha))))
    for task in summary.tasks:
        blocks.extend(_task_section(task, task_figures(task, styles)))
    blocks.extend(_overall_section(summary, overall_figure(summary, styles)))
    if summary.skipped:
        blocks.append(Heading(2, "Skipped files", "skipped"))
        blocks.append(Bullets(tuple(f"{s.source}: {s.reason}" for s in summary.skipped)))
    return blocks
