"""Malformed but schema-valid records (NaN, infinities, wrong types inside the nested fields)
never crash the report: the damage shows up as missing values and gaps instead.

Property-based (hypothesis); the records are generated, not measured.
"""

import math

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from loopzoo.report.csv_table import render_csv
from loopzoo.report.figures import styles_for, task_figures
from loopzoo.report.loading import parse_run
from loopzoo.report.summary import summarise
from loopzoo.report.verdict import task_verdict

SCALARS = (
    st.none()
    | st.booleans()
    | st.integers(-5, 100)
    | st.floats(-1e6, 1e6)
    | st.sampled_from([math.nan, math.inf, -math.inf])
    | st.text(max_size=3)
)
JSON = st.recursive(
    SCALARS,
    lambda inner: st.lists(inner, max_size=5) | st.dictionaries(st.text(max_size=3), inner,
                                                                 max_size=3),
    max_leaves=12,
)
NUMBERS = st.lists(SCALARS, max_size=6) | JSON


def _record(draw, seed):
    metric = draw(st.sampled_from(["mse", "accuracy"]))
    return {
        "schema": "loopzoo.run/1",
        "run_id": f"r{seed}-{draw(st.integers(0, 3))}",
        "kind": draw(st.sampled_from(["model", "baseline"])),
        "status": draw(st.sampled_from(["ok", "ok", "diverged", "failed"])),
        "reason": draw(st.none() | st.text(max_size=5)),
        "model": draw(st.sampled_from(["stacked", "gru", "output-feedback"])),
        "task": draw(st.sampled_from(["pump", "valve"])),
        "seed": seed,
        "params": draw(st.none() | st.integers(0, 10_000)),
        "primary": draw(st.none() | st.just({"name": metric, "goal": "min"})),
        "metrics": draw(st.dictionaries(
            st.sampled_from(["test", "val", "test_free_running"]),
            st.dictionaries(st.sampled_from(["mse", "accuracy"]), SCALARS) | JSON,
            max_size=3,
        )),
        "curves": draw(st.none() | st.fixed_dictionaries({"step": NUMBERS, "val": NUMBERS})),
        "cost": draw(st.none() | st.dictionaries(
            st.sampled_from(["train_seconds", "step_latency_ms", "batched_batch_size",
                             "peak_memory_mb"]), SCALARS)),
        "gradient_reach": draw(st.none() | st.fixed_dictionaries(
            {"lags": NUMBERS, "init": NUMBERS, "final": NUMBERS})),
        "feedback": draw(st.none() | st.dictionaries(
            st.sampled_from(["mode", "schedule", "selected_on"]),
            st.sampled_from(["scheduled", "free_running", 3, None]))),
        "config": draw(JSON),
        "finished": draw(st.text(max_size=3)),
    }


@st.composite
def record_sets(draw):
    seeds = draw(st.lists(st.integers(0, 4), min_size=1, max_size=8))
    return [parse_run(_record(draw, seed), f"records/{i}.json") for i, seed in enumerate(seeds)]


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(record_sets())
def test_text_parts_never_crash(runs):
    summary = summarise(runs)
    render_csv(summary)
    for task in summary.tasks:
        assert task_verdict(task, summary.alpha)
        for row in task.rows:
            assert sum(row.counts.values()) >= len(row.values)
            assert all(math.isfinite(v) for v in row.values)


@settings(max_examples=5, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(record_sets())
def test_figures_never_crash(runs):
    summary = summarise(runs)
    styles = styles_for(summary)
    for task in summary.tasks:
        for figure in task_figures(task, styles):
            assert figure.png.startswith(b"\x89PNG")
