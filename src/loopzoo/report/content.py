"""Lay out the report: verdicts, one section per task, the cross-task view, skipped files."""

from __future__ import annotations

import re
from collections.abc import Callable

from loopzoo.report import formatting as fmt
from loopzoo.report.budget import budget_curves, budgets
from loopzoo.report.document import (
    Block,
    Bullets,
    Column,
    Figure,
    Heading,
    Paragraph,
    Table,
    contents_of,
    table,
)
from loopzoo.report.figures import overall_figure, styles_for, task_figures
from loopzoo.report.loading import UNRANKED
from loopzoo.report.results import (
    COST_FIELDS,
    LATENCY_FIELD,
    REACH_FACTORS,
    REACH_PHASES,
    Comparison,
    Row,
    TaskSummary,
)
from loopzoo.report.stats import SEEDS_LIMIT
from loopzoo.report.summary import Summary
from loopzoo.report.verdict import shipped_row, task_verdict

__all__ = ["TITLE", "report_blocks"]

TITLE = "loopzoo: which recurrent topology to pick"


def _anchor(text: str) -> str:
    return "task-" + re.sub(r"[^a-z0-9]+", "-", text.lower()).strip("-")


def _reading_guide(summary: Summary) -> Bullets:
    confidence = f"{summary.confidence:.0%}"
    return Bullets((
        f"Quality is the task's primary test metric over the seeds that finished ok, with its "
        f"{confidence} Student-t interval. Error metrics (mse, mae, cross-entropy, bits per "
        "character) are summarised on the log scale: the geometric mean ×/÷ a factor, so the "
        "interval stays above 0; other metrics show mean ± half width, cut to the metric's range "
        "where it would leave it ([low, high]). Diverged, failed and skipped runs are counted, "
        "not averaged in; a row whose value does not depend on the seed shows that one value.",
        f"'vs best' is Welch's two-sided t-test (unequal variances) against the rank-1 row, on the "
        f"log values for error metrics (a ratio of geometric means), with Holm's correction over "
        f"all comparisons with that row at alpha = {summary.alpha:g}: 'worse' is significant "
        f"after the correction; 'equivalent' means two one-sided tests put the pair within "
        f"±{summary.margin:.0%} of the best (a ratio on the log scale) at alpha; 'n.s.' is "
        "neither, which is no evidence of equal quality, and gives the seeds per row a t-test "
        "would need to separate the pair at the observed spread (power 80%); 'untested' means a "
        "side has fewer than 2 usable seeds; two seed-independent rows are compared by value "
        "only (nothing is sampled to test).",
        "Output-feedback rows are ranked on what a deployed model scores: free running (its own "
        "outputs fed back), or where selected so, with only measured outputs fed back once they "
        "are observed. A one-step figure with measured outputs fed back is shown only where the "
        "task's targets are observed later (next-step prediction, forecasts), in the "
        "exposure-bias table; on tasks whose targets are never observed (sequence labels) there "
        "is none.",
        "Rank 1 is best; equal values share a rank. Classical rows are ranked with the "
        "topologies; bounds (exact optima, noise floors) are shown apart with the gap to them, "
        "never ranked or recommended. The cross-task mean rank counts topologies only.",
        "Flags mark rows that may be unconverged: runs stopped at the step cap, or a tuned value "
        "at a bound of its searched range. The run to ship is chosen on validation, never on "
        "test.",
        "A row's label shows every option that differs from its topology's defaults "
        "(name[option=value,...]).",
        "Costs are medians over ok runs: training wall time, time per training step, inference "
        "latency of one streaming step for one stream and for a batch of streams, peak memory.",
        "Gradient reach: the time lag at which the norm of dL/dh has fallen to 1/10 and 1/100 of "
        "its lag-0 value (median over seeds); 'beyond T' means it never fell that far.",
        "Pareto front: topologies that no other topology beats on both quality and cost.",
    ))


def _versus(comparison: Comparison) -> str:
    verdict = comparison.verdict
    if verdict == "worse":
        return f"worse (Holm p {fmt.p_value(comparison.adjusted_p)})"
    if verdict == "equivalent":
        return f"equivalent (TOST p {fmt.p_value(comparison.equivalence_p)})"
    if verdict == "not significant":
        seeds, observed = comparison.seeds_needed, comparison.difference
        need = f"; >{SEEDS_LIMIT:,} seeds" if seeds is None else f"; ~{seeds} seeds"
        if observed is not None and observed.statistic == 0.0:
            need = "; no difference"
        return f"n.s. (Holm p {fmt.p_value(comparison.adjusted_p)}{need})"
    return {"best": "best", "untested": "untested",
            "exact": "both seed-independent: no test"}.get(verdict, fmt.MISSING)


def _yes_no(flag: bool | None) -> str:
    return fmt.MISSING if flag is None else "yes" if flag else "no"


KIND_WORDS = {"model": "topology", "baseline": "classical", "bound": "bound",
              "reference": "reference"}


def _value(row: Row) -> str:
    if row.interval is None and row.counts["skipped"] and not row.counts["ok"]:
        reasons = sorted({r.reason or "no reason recorded" for r in row.runs
                          if r.status == "skipped"})
        return "skipped: " + "; ".join(reasons)
    return fmt.interval(row.interval)


def _quality_table(task: TaskSummary) -> Table:
    # When a classical row is best, also show how topologies stand against the best topology.
    baseline_best = task.best is not None and task.best.kind == "baseline"
    bound = task.bounds[0] if task.bounds else None
    columns = [
        Column("row", lambda r: r.label),
        Column("kind", lambda r: KIND_WORDS[r.kind]),
        Column("params", lambda r: r.params, numeric=True),
        Column(f"test {task.metric} ({_centre_words(task)})", _value, numeric=True),
        *(Column(title, lambda r, s=status: str(r.counts[s]), numeric=True)
          for status, title in (("ok", "ok"), ("diverged", "diverged"), ("failed", "failed"),
                                ("skipped", "skipped"), ("missing", "ok without metric"))),
        Column("rank", lambda r: fmt.number(r.rank) if r.rank else fmt.MISSING, numeric=True),
        Column("vs best",
               lambda r: (f"{r.kind} (not ranked)" if r.kind in UNRANKED
                          else _versus(r.versus_best))),
    ]
    if baseline_best:
        columns.append(Column(
            "vs best topology",
            lambda r: _versus(r.versus_pick) if r.kind == "model" else fmt.MISSING))
    if bound is not None:
        columns.append(Column(f"gap to bound {bound.label}",
                              lambda r: _bound_gap(r, bound, task), numeric=True))
    columns += [
        Column("flags", lambda r: "; ".join(r.flags) or fmt.MISSING),
        Column("Pareto (latency)", lambda r: _yes_no(r.front_latency)),
    ]
    direction = "lower" if task.goal == "min" else "higher"
    return table(f"Quality on {task.label}: test {task.metric} ({direction} is better)", columns,
                 task.rows)


def _centre_words(task: TaskSummary) -> str:
    return "geometric mean ×/÷ 95% CI factor" if task.scale == "log" else "mean ± 95% CI"


def _bound_gap(row: Row, bound: Row, task: TaskSummary) -> str:
    if row.kind in UNRANKED or row.interval is None or bound.interval is None:
        return fmt.MISSING
    return fmt.gap(row.interval.mean, bound.interval.mean, task.scale)


def _cost_table(task: TaskSummary) -> Table | None:
    rows = [r for r in task.rows if r.kind == "model"]
    if not rows or all(value is None for r in rows for value in r.cost.values()):
        return None
    present = [v for r in rows if (v := r.cost.get(LATENCY_FIELD))]
    fastest = min(present) if present else None

    def relative(row: Row) -> str:
        latency = row.cost.get(LATENCY_FIELD)
        return fmt.ratio(latency / fastest) if latency and fastest else fmt.MISSING

    columns = [
        Column("topology", lambda r: r.label),
        *(Column(f"{title} ({unit})", lambda r, f=field: fmt.number(r.cost.get(f), 3),
                 numeric=True) for field, title, unit in COST_FIELDS),
        Column("batch size", lambda r: str(r.batch_size) if r.batch_size else fmt.MISSING,
               numeric=True),
        Column("step latency vs fastest", relative, numeric=True),
    ]
    return table(f"Cost on {task.label} (medians over ok runs)", columns, rows)


def _reach_table(task: TaskSummary) -> Table | None:
    rows = [r for r in task.rows if r.kind == "model"]
    if not rows or all(v is None for r in rows for v in r.reach.values()):
        return None
    columns = [
        Column("topology", lambda r: r.label),
        *(Column(f"÷{factor} {title}", lambda r, k=f"{phase}_{factor}": fmt.lag(r.reach.get(k)),
                 numeric=True)
          for phase, title in REACH_PHASES for factor in REACH_FACTORS),
    ]
    return table(
        f"Gradient reach on {task.label}: lag (steps) where ‖dL/dh‖ has fallen by 10x / 100x",
        columns, rows)


def _exposure_table(task: TaskSummary) -> Table | None:
    rows = [r for r in task.rows if r.exposure is not None]
    if not rows:
        return None
    columns = [
        Column("topology", lambda r: r.label),
        Column("feedback (mode / schedule / fed back)",
               lambda r: "; ".join(r.exposure.settings) or fmt.MISSING),
        Column("one-step, measured outputs", lambda r: fmt.interval(r.exposure.teacher_forced),
               numeric=True),
        Column("free-running", lambda r: fmt.interval(r.exposure.free_running), numeric=True),
        Column("gap (free − measured)", lambda r: fmt.interval(r.exposure.gap), numeric=True),
    ]
    return table(
        f"Exposure bias on {task.label}: one-step with measured outputs against free-running "
        f"test {task.metric}", columns, rows)


def _budget_table(task: TaskSummary) -> Table | None:
    curves = budget_curves(task)
    if not curves:
        return None
    columns = [
        Column("topology", lambda c: c.label),
        Column("trials", lambda c: str(c.trials), numeric=True),
        *(Column(f"n = {n}",
                 lambda c, n=n: fmt.number(c.expected[n - 1]) if n <= c.trials else fmt.MISSING,
                 numeric=True)
          for n in budgets(max(c.trials for c in curves))),
    ]
    return table(f"Tuning budget on {task.label}: expected best validation {task.metric} after n "
                 "trials (Dodge et al. 2019)", columns, curves)


def _task_section(task: TaskSummary, figures: list[Figure]) -> list[Block]:
    blocks: list[Block] = [Heading(2, f"Task: {task.label}", _anchor(task.label))]
    goal = "minimise" if task.goal == "min" else "maximise"
    blocks.append(Paragraph(f"Ranked on test {task.metric or 'metric (none recorded)'}; {goal}."))
    builders: tuple[Callable[[TaskSummary], Table | None], ...] = (
        _budget_table, _cost_table, _reach_table, _exposure_table
    )
    blocks.append(_quality_table(task))
    blocks.extend(table for build in builders if (table := build(task)) is not None)
    blocks.append(Heading(3, f"What is missing on {task.label}"))
    complete = "Nothing: every run finished ok with its metric, cost and gradient reach."
    blocks.append(Bullets(task.gaps) if task.gaps else Paragraph(complete))
    blocks.extend(figures)
    return blocks


def _classical_wins(summary: Summary) -> Paragraph:
    shipped = [(task, shipped_row(task, summary.alpha)) for task in summary.tasks]
    decided = [(task, row) for task, row in shipped if row is not None and task.metric]
    classical = [(task, row) for task, row in decided if row.kind == "baseline"]
    listed = "; ".join(f"{task.label}: {row.label}" for task, row in classical)
    return Paragraph(
        f"A classical row is the one to ship on {len(classical)} of {len(decided)} task(s) with a "
        f"verdict (it had the best value, or no topology was significantly better than it)"
        + (f": {listed}." if classical else ".")
    )


OVERALL_COLUMNS = (
    Column("topology", lambda r: r.label),
    Column("tasks ranked", lambda r: str(r.tasks_ranked), numeric=True),
    Column("mean rank", lambda r: fmt.number(r.mean_rank, 3), numeric=True),
    Column("step latency vs fastest (geometric mean)", lambda r: fmt.ratio(r.relative_latency),
           numeric=True),
    Column("Pareto front", lambda r: _yes_no(r.on_front)),
)


def _overall_section(summary: Summary, figure: Figure | None) -> list[Block]:
    blocks: list[Block] = [Heading(2, "Across tasks", "across-tasks"), _classical_wins(summary)]
    if not summary.overall:
        return [*blocks, Paragraph("No topology has results.")]
    blocks.append(table("Topologies over all tasks", OVERALL_COLUMNS, summary.overall))
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
    blocks: list[Block] = [Heading(2, "Verdicts", "verdicts")]
    for task in summary.tasks:
        blocks.append(Heading(3, task.label))
        blocks.append(Paragraph(" ".join(task_verdict(task, summary.alpha, summary.margin))))
    for task in summary.tasks:
        blocks.extend(_task_section(task, task_figures(task, styles)))
    blocks.extend(_overall_section(summary, overall_figure(summary, styles)))
    if summary.skipped:
        blocks.append(Heading(2, "Skipped files", "skipped"))
        blocks.append(Bullets(tuple(f"{s.source}: {s.reason}" for s in summary.skipped)))
    # The contents follow from the section headings, so a new section needs no other edit.
    return [Heading(1, TITLE), contents_of(blocks), _reading_guide(summary), *blocks]
