"""Report pictures as PNG bytes (Agg, fixed metadata, so reruns are byte-identical).

Rows are told apart by marker and line style as well as colour, so pages stay legible in grey.
"""

from __future__ import annotations

import io
import math
import statistics
from collections import defaultdict
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass

import matplotlib
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure as MplFigure
from matplotlib.ticker import ScalarFormatter

from loopzoo.report.budget import budget_curves
from loopzoo.report.document import Figure
from loopzoo.report.loading import finite_number
from loopzoo.report.reach import relative_norms
from loopzoo.report.results import LATENCY_FIELD, Row, TaskSummary
from loopzoo.report.summary import Summary

__all__ = ["Style", "styles_for", "task_figures", "overall_figure"]

# Okabe-Ito colours (colour-blind safe) with distinct lightness; markers and dashes carry the rest.
_COLOURS = ("#000000", "#0072B2", "#D55E00", "#009E73", "#CC79A7", "#56B4E9", "#E69F00", "#777777")
_MARKERS = ("o", "s", "^", "D", "v", "P", "X", "*")
_DASHES = ("-", "--", "-.", ":")
_REACH_FLOOR = 1e-4
_RC = {
    "font.size": 9,
    "axes.titlesize": 10,
    "axes.grid": True,
    "grid.alpha": 0.3,
    "legend.fontsize": 8,
    "figure.dpi": 100,
    "savefig.dpi": 100,
}


@dataclass(frozen=True)
class Style:
    """How one row is drawn in every picture."""

    colour: str
    marker: str
    dash: str


def styles_for(summary: Summary) -> dict[str, Style]:
    """A fixed style per topology label (sorted), the same in every picture of the report."""
    labels = sorted(
        {row.label for task in summary.tasks for row in task.rows if row.kind == "model"}
    )
    return {
        label: Style(
            _COLOURS[i % len(_COLOURS)],
            _MARKERS[i % len(_MARKERS)],
            _DASHES[(i // len(_COLOURS) + i) % len(_DASHES)],
        )
        for i, label in enumerate(labels)
    }


@contextmanager
def _figure(width: float, height: float, panels: int) -> Iterator[tuple[MplFigure, list[Axes]]]:
    with matplotlib.rc_context(_RC):
        # Fixed margins rather than constrained layout: cheaper to draw, see
        # benchmarks/bench_report.py; these pictures have a known, simple layout.
        figure = MplFigure(figsize=(width, height))
        figure.subplots_adjust(left=0.09, right=0.98, bottom=0.13, top=0.85, wspace=0.3)
        FigureCanvasAgg(figure)
        yield figure, list(figure.subplots(1, panels, squeeze=False)[0])


def _log_y_if_wide(axes: Axes, values: Sequence[float]) -> None:
    """A log y axis when positive values span more than 20x (curves that fall by decades)."""
    if values and min(values) > 0 and max(values) / min(values) > 20:
        axes.set_yscale("log")


def _png(figure: MplFigure) -> bytes:
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", metadata={"Software": None})
    return buffer.getvalue()


def _ok(row: Row) -> list:
    return [run for run in row.runs if run.status == "ok"]


def _finite_pairs(xs: object, ys: object) -> list[tuple[float, float]]:
    if not isinstance(xs, list) or not isinstance(ys, list):
        return []
    pairs = []
    for x, y in zip(xs, ys, strict=False):
        if finite_number(x) is not None and finite_number(y) is not None:
            pairs.append((float(x), float(y)))
    return pairs


def _learning_curves(task: TaskSummary, styles: dict[str, Style]) -> Figure | None:
    series = []
    for row in task.rows:
        if row.kind != "model":
            continue
        by_step: dict[float, list[float]] = defaultdict(list)
        for run in _ok(row):
            curves = run.curves or {}
            for step, value in _finite_pairs(curves.get("step"), curves.get("val")):
                by_step[step].append(value)
        if by_step:
            series.append((row, sorted(by_step.items())))
    if not series:
        return None
    with _figure(8.0, 4.0, 1) as (figure, (axes,)):
        all_values = []
        for row, points in series:
            style = styles[row.label]
            steps = [s for s, _ in points]
            means = [statistics.fmean(v) for _, v in points]
            lows = [min(v) for _, v in points]
            highs = [max(v) for _, v in points]
            all_values.extend(lows + highs)
            axes.fill_between(steps, lows, highs, color=style.colour, alpha=0.15, linewidth=0)
            axes.plot(steps, means, color=style.colour, linestyle=style.dash, marker=style.marker,
                      markersize=4, markevery=max(1, len(steps) // 8),
                      label=f"{row.label} ({len(_ok(row))} seeds)")
        _log_y_if_wide(axes, all_values)
        axes.set_xlabel("training step (optimiser updates)")
        axes.set_ylabel(f"validation {task.metric} (task units)")
        axes.set_title(f"{task.label}: learning curves, mean over seeds, band = min to max")
        axes.legend(loc="best")
        png = _png(figure)
    return Figure(
        png,
        f"Validation {task.metric} against training step for each topology on {task.label}.",
        f"{task.label}: learning curves (line: mean over ok seeds; band: range over seeds).",
    )


def _front_line(axes: Axes, points: list[tuple[float, float]]) -> None:
    points = sorted(points)
    xs, ys = [p[0] for p in points], [p[1] for p in points]
    axes.plot(xs, ys, color="#444444", linestyle=(0, (4, 2)), linewidth=1, drawstyle="steps-post",
              zorder=1, label="Pareto front")
    axes.scatter(xs, ys, s=160, facecolors="none", edgecolors="#444444", linewidths=1.2, zorder=2)


def _x_scale(axes: Axes, points: Sequence[tuple[float, float, str]]) -> bool:
    """Log scale when the x values span more than 10x, then label each point on the side with
    room (left of points in the right part of the axes); returns whether log scale was chosen."""
    xs = [x for x, _, _ in points]
    wide = bool(xs) and min(xs) > 0 and max(xs) / min(xs) > 10
    if wide:
        axes.set_xscale("log")
    axes.margins(x=0.12)
    low, high = axes.get_xlim()
    for x, y, label in points:
        if wide:
            fraction = math.log(x / low) / math.log(high / low)
        else:
            fraction = (x - low) / (high - low) if high > low else 0.5
        left = fraction > 0.6
        axes.annotate(label, (x, y), textcoords="offset points", xytext=(-6 if left else 6, 4),
                      ha="right" if left else "left", fontsize=7)
    return wide


def _quality_panel(axes: Axes, task: TaskSummary, rows: Sequence[Row], styles: dict[str, Style],
                   attribute: str) -> None:
    front, points = [], []
    for row in rows:
        x = row.cost.get(LATENCY_FIELD) if attribute == "latency" else row.params_value
        if not x or row.interval is None:
            continue
        points.append((x, row.interval.mean, row.label))
        style = styles[row.label]
        centre, low, high = row.interval.mean, row.interval.low, row.interval.high
        below, above = (0.0, 0.0) if low is None or high is None else (centre - low, high - centre)
        axes.errorbar([x], [centre], yerr=[[below], [above]], color=style.colour,
                      marker=style.marker, linestyle="none", capsize=3, label=row.label, zorder=3)
        flag = row.front_latency if attribute == "latency" else row.front_params
        if flag:
            front.append((x, row.interval.mean))
    if front:
        _front_line(axes, front)
    _bound_lines(axes, task)
    scale = ", log scale" if _x_scale(axes, points) else ""
    direction = "lower" if task.goal == "min" else "higher"
    axes.set_ylabel(f"test {task.metric} ({direction} is better; bar: 95% CI)")
    if attribute == "latency":
        axes.set_xlabel(f"inference latency per step, one stream (ms{scale})")
        axes.set_title("quality against latency")
    else:
        axes.set_xlabel(f"trainable parameters (count{scale})")
        axes.set_title("quality against size")


def _bound_lines(axes: Axes, task: TaskSummary) -> None:
    """A horizontal line per bound (never a point: bounds are not rows one could pick)."""
    for bound in task.bounds:
        assert bound.interval is not None
        axes.axhline(bound.interval.mean, color="#888888", linestyle=(0, (1, 1)), linewidth=1.2,
                     label=f"bound: {bound.label}")


def _quality_versus_cost(task: TaskSummary, styles: dict[str, Style]) -> Figure | None:
    rows = [r for r in task.rows if r.kind == "model" and r.interval]
    if not any(r.cost.get(LATENCY_FIELD) or r.params_value for r in rows):
        return None
    with _figure(9.0, 4.0, 2) as (figure, panels):
        _quality_panel(panels[0], task, rows, styles, "latency")
        _quality_panel(panels[1], task, rows, styles, "params")
        handles, labels = panels[0].get_legend_handles_labels()
        if handles:
            panels[0].legend(handles, labels, loc="best")
        figure.suptitle(f"{task.label}: quality against cost (circled points: Pareto front)")
        png = _png(figure)
    return Figure(
        png,
        f"Test {task.metric} against step latency and against parameter count on {task.label}, "
        "with the Pareto front marked.",
        f"{task.label}: quality against inference latency and against size; circled points and "
        "the dashed line form the Pareto front (no topology is both cheaper and better).",
    )


def _median_norms(row: Row, phase: str) -> list[tuple[float, float]]:
    by_lag: dict[float, list[float]] = defaultdict(list)
    for run in _ok(row):
        reach = run.gradient_reach or {}
        relative = relative_norms(reach.get(phase))
        if relative is None:
            continue
        for lag, value in _finite_pairs(reach.get("lags"), relative):
            if value > 0.0:
                by_lag[lag].append(value)
    return [(lag, statistics.median(values)) for lag, values in sorted(by_lag.items())]


def _gradient_by_lag(task: TaskSummary, styles: dict[str, Style]) -> Figure | None:
    rows = [r for r in task.rows if r.kind == "model"]
    phases = (("init", "at initialisation"), ("final", "after training"))
    curves = {(r.label, phase): _median_norms(r, phase) for r in rows for phase, _ in phases}
    if not any(curves.values()):
        return None
    # Norms can grow with the lag (an exploding gradient); keep those in view too.
    top = max([2.0] + [1.5 * v for points in curves.values() for _, v in points])
    with _figure(9.0, 4.0, 2) as (figure, panels):
        for axes, (phase, title) in zip(panels, phases, strict=True):
            for row in rows:
                points = curves[(row.label, phase)]
                if not points:
                    continue
                style = styles[row.label]
                axes.plot([p[0] for p in points], [p[1] for p in points], color=style.colour,
                          linestyle=style.dash, marker=style.marker, markersize=4,
                          markevery=max(1, len(points) // 8), label=row.label)
            for level, text in ((0.1, "fallen 10x"), (0.01, "fallen 100x")):
                axes.axhline(level, color="#888888", linestyle=":", linewidth=1)
                axes.annotate(text, (1, level), xycoords=("axes fraction", "data"), ha="right",
                              xytext=(-3, 2), textcoords="offset points", fontsize=7)
            axes.set_yscale("log")
            # The thresholds matter, not how far below them a norm falls: cut the axis there.
            axes.set_ylim(_REACH_FLOOR, top)
            axes.set_xlabel("time lag (steps back from the loss)")
            axes.set_ylabel("‖dL/dh‖ relative to lag 0 (log scale, cut at 1e-4)")
            axes.set_title(title)
        panels[0].legend(loc="best")
        figure.suptitle(f"{task.label}: how far back the gradient reaches (median over seeds)")
        png = _png(figure)
    return Figure(
        png,
        f"Gradient norm against time lag per topology on {task.label}, at initialisation and "
        "after training.",
        f"{task.label}: gradient norm against time lag; dotted lines mark a fall by 10x and 100x.",
    )


def _budget_figure(task: TaskSummary, styles: dict[str, Style]) -> Figure | None:
    curves = budget_curves(task)
    if not curves:
        return None
    with _figure(8.0, 4.0, 1) as (figure, (axes,)):
        values = []
        for curve in curves:
            style = styles[curve.label]
            budgets = list(range(1, curve.trials + 1))
            values.extend(curve.expected)
            axes.plot(budgets, curve.expected, color=style.colour, linestyle=style.dash,
                      marker=style.marker, markersize=4, markevery=max(1, curve.trials // 8),
                      label=f"{curve.label} ({curve.trials} trials)")
        _log_y_if_wide(axes, values)
        axes.set_xscale("log", base=2)
        axes.xaxis.set_major_formatter(ScalarFormatter())
        axes.set_xlabel("tuning budget (trials, log scale)")
        axes.set_ylabel(f"expected best validation {task.metric}")
        axes.set_title(f"{task.label}: expected best validation score against tuning budget")
        axes.legend(loc="best")
        png = _png(figure)
    return Figure(
        png,
        f"Expected best validation {task.metric} against the number of tuning trials per topology "
        f"on {task.label}.",
        f"{task.label}: expected best validation {task.metric} after n trials, from each "
        "topology's observed trial scores (Dodge et al. 2019, 'Show Your Work').",
    )


def task_figures(task: TaskSummary, styles: dict[str, Style]) -> list[Figure]:
    """The pictures of one task that its records allow (learning curves, quality against cost,
    gradient reach, expected best score against tuning budget); a picture with no data is left
    out rather than drawn empty."""
    candidates = (
        _learning_curves(task, styles),
        _quality_versus_cost(task, styles),
        _gradient_by_lag(task, styles),
        _budget_figure(task, styles),
    )
    return [figure for figure in candidates if figure is not None]


def overall_figure(summary: Summary, styles: dict[str, Style]) -> Figure | None:
    """Mean rank against relative step latency across tasks, with the Pareto front marked."""
    rows = [r for r in summary.overall if r.mean_rank is not None and r.relative_latency]
    if not rows:
        return None
    with _figure(7.0, 4.0, 1) as (figure, (axes,)):
        for row in rows:
            style = styles[row.label]
            axes.plot([row.relative_latency], [row.mean_rank], color=style.colour,
                      marker=style.marker, linestyle="none", markersize=7, label=row.label)
        front = [(r.relative_latency, r.mean_rank) for r in rows if r.on_front]
        if front:
            _front_line(axes, front)
        points = [(r.relative_latency, r.mean_rank, r.label) for r in rows]
        scale = ", log scale" if _x_scale(axes, points) else ""
        axes.invert_yaxis()
        axes.set_xlabel(f"step latency relative to the fastest topology per task (x{scale})")
        axes.set_ylabel("mean rank over tasks (1 = best)")
        axes.set_title("all tasks: quality against cost (circled points: Pareto front)")
        axes.legend(loc="best")
        png = _png(figure)
    return Figure(
        png,
        "Mean rank over tasks against relative step latency per topology, Pareto front marked.",
        "All tasks: mean rank against relative step latency; circled points form the Pareto front.",
    )
