"""Per-task rows, ranks, comparisons (Welch, Holm, two one-sided tests), gaps, exposure bias,
cross-task view and verdicts, built from the demo records (invented numbers) and checked against
scipy.stats and statsmodels where statistics are involved.
"""

import math

import pytest
from scipy import stats
from statsmodels.stats.multitest import multipletests
from statsmodels.stats.weightstats import ttost_ind

from loopzoo.report.loading import load_runs
from loopzoo.report.summary import summarise
from loopzoo.report.verdict import task_verdict


@pytest.fixture
def summary(demo_dir):
    runs, skipped = load_runs(demo_dir)
    return summarise(runs, skipped)


def _task(summary, label):
    return next(t for t in summary.tasks if t.label == label)


def _row(task, label):
    return next(r for r in task.rows if r.label == label)


def test_tasks_and_rows_are_in_a_fixed_order(summary):
    assert [t.label for t in summary.tasks] == ["flaky-rig", "pump-vibration", "valve-codes"]
    pump = _task(summary, "pump-vibration")
    assert [r.rank for r in pump.rows] == [1, 2, 3, 4, 5, 6]
    assert pump.rows[-1].kind == "baseline"


def _logs(values):
    return [math.log(v) for v in values]


def test_quality_interval_and_tests_match_scipy_and_statsmodels(summary, demo):
    pump = _task(summary, "pump-vibration")
    best = _row(pump, "stacked")
    assert pump.best.label == "stacked" and pump.scale == "log"
    # Source: scipy.stats.t.interval on the log values (mse is compared on the log scale).
    logs = _logs(best.values)
    low, high = stats.t.interval(0.95, 3, loc=stats.tmean(logs), scale=stats.sem(logs))
    assert (best.interval.low, best.interval.high) == pytest.approx(
        (math.exp(low), math.exp(high)), rel=1e-10)
    # Source: scipy.stats.ttest_ind(equal_var=False) on the logs of every row against the best,
    # then statsmodels' multipletests(method="holm") over that family (Holm 1979).
    others = [r for r in pump.rows if r.key != best.key]
    raw = [stats.ttest_ind(_logs(r.values), logs, equal_var=False).pvalue for r in others]
    adjusted = multipletests(raw, method="holm")[1]
    for row, p, holm_p in zip(others, raw, adjusted, strict=True):
        assert row.versus_best.p_value == pytest.approx(p, rel=1e-8)
        assert row.versus_best.adjusted_p == pytest.approx(holm_p, rel=1e-8)
        assert (row.versus_best.verdict == "worse") == (holm_p < 0.05)
    assert _row(pump, "gru").versus_best.verdict == "worse"
    lstm = _row(pump, "lstm").versus_best
    assert lstm.verdict == "not significant" and lstm.seeds_needed > 4


def test_higher_is_better_task_ranks_descending(summary):
    valve = _task(summary, "valve-codes")
    means = [r.interval.mean for r in valve.rows]
    assert means == sorted(means, reverse=True)
    assert valve.best.label == "lstm" and valve.goal == "max"


def test_every_status_is_counted_and_gaps_say_what_is_missing(summary):
    flaky = _task(summary, "flaky-rig")
    stacked, gru, lstm = (_row(flaky, n) for n in ("stacked", "gru", "lstm"))
    assert stacked.counts == {"ok": 2, "diverged": 1, "failed": 0, "skipped": 0, "missing": 0}
    assert gru.counts == {"ok": 1, "diverged": 0, "failed": 1, "skipped": 0, "missing": 1}
    assert gru.interval is None and gru.rank is None and gru.versus_best.verdict == "no data"
    assert lstm.interval.n == 1 and lstm.interval.half_width is None
    gaps = "\n".join(flaky.gaps)
    assert "stacked: seed 2 diverged at step 120: loss became NaN" in gaps
    assert "gru: seed 0 failed: out of memory" in gaps
    assert "gru: seed 1 is ok but has no finite test mse" in gaps
    assert "lstm: no record for seed(s) 1, 2" in gaps
    assert "gru: cost figures missing" in gaps
    assert "lstm: only one usable seed" in gaps


def test_one_seed_rows_are_untested_and_ties_prefer_more_seeds(summary, tmp_path, demo):
    flaky = _task(summary, "flaky-rig")
    # stacked (0.02, 0.03) has geometric mean sqrt(0.0006) = 0.0245, below lstm's single 0.025.
    assert flaky.best.label == "stacked"
    assert _row(flaky, "lstm").rank == 2 and _row(flaky, "lstm").versus_best.verdict == "untested"
    # Equal centres share a rank and the row with more seeds leads (accuracy: raw scale).
    accuracy = {"primary": {"name": "accuracy", "goal": "max"}}
    records = [demo.record(run_id=f"g{s}", seed=s, model="gru", metrics={"test": {"accuracy": v}},
                           **accuracy) for s, v in ((0, 0.25), (1, 0.75))]
    records.append(demo.record(run_id="l0", model="lstm", metrics={"test": {"accuracy": 0.5}},
                               **accuracy))
    demo.write_records(tmp_path, records)
    task = summarise(load_runs(tmp_path)[0]).tasks[0]
    assert [(r.label, r.rank) for r in task.rows] == [("gru", 1), ("lstm", 1)]


def test_exposure_bias_and_ranking_on_free_running(summary, demo, tmp_path):
    pump = _task(summary, "pump-vibration")
    exposure = _row(pump, "output-feedback").exposure
    assert exposure.settings == (
        "scheduled / inverse_sigmoid / distribution, selected on measured_feedback",)
    assert exposure.gap.mean == pytest.approx(0.6 * exposure.teacher_forced.mean)
    measured = demo.record(model="output-feedback", metrics={
        "test": {"mse": 0.04}, "test_free_running": {"mse": 0.04},
        "test_measured_feedback": {"mse": 0.01}},
        feedback={"mode": "scheduled", "schedule": "linear", "selected_on": "free_running"})
    demo.write_records(tmp_path, [measured])
    row = summarise(load_runs(tmp_path)[0]).tasks[0].rows[0]
    assert row.values == (0.04,)
    assert row.exposure.settings == ("scheduled / linear, selected on free_running",)


@pytest.mark.parametrize("selected_on", ["free_running", "teacher_forced"])
def test_no_exposure_figure_where_targets_are_never_observed(demo, tmp_path, selected_on):
    """A sequence label is never observed: no measured-feedback figure, no exposure row, and a
    record's teacher-forced ``test`` of an older format is never what the row is ranked on."""
    label_task = demo.record(model="output-feedback", metrics={
        "test": {"mse": 0.001}, "test_free_running": {"mse": 0.3}},
        feedback={"mode": "free_running", "selected_on": selected_on, "observable": "never"})
    demo.write_records(tmp_path, [label_task])
    row = summarise(load_runs(tmp_path)[0]).tasks[0].rows[0]
    assert row.values == (0.3,)
    assert row.exposure is None


def test_reach_and_cost_medians(summary):
    pump = _task(summary, "pump-vibration")
    lstm = _row(pump, "lstm")
    # Demo decay rate 0.92 after training: 0.92**k <= 0.1 first at k = 28; 1/100 not within 30.
    assert lstm.reach["final_10"] == 28 and lstm.reach["final_100"] == float("inf")
    assert lstm.cost["step_latency_ms"] == pytest.approx(0.12)
    assert lstm.batch_size == 64


def test_pareto_and_cross_task_ranks(summary):
    pump = _task(summary, "pump-vibration")
    front = {r.label for r in pump.rows if r.front_latency}
    assert front == {"stacked", "output-feedback"}
    overall = {r.label: r for r in summary.overall}
    assert overall["lstm"].tasks_ranked == 3
    assert overall["output-feedback"].relative_latency == pytest.approx(1.0)
    assert overall["hidden-feedback"].mean_rank == pytest.approx((5 + 4) / 2)


def test_variants_get_distinct_labels(tmp_path, demo):
    two = demo.record(run_id="x", config={"task": {"options": {"length": 50}},
                                          "model": {"options": {"num_layers": 2}}})
    three = demo.record(run_id="y", config={"task": {"options": {"length": 50}},
                                            "model": {"options": {"num_layers": 3}}})
    demo.write_records(tmp_path, [two, three])
    labels = [r.label for r in summarise(load_runs(tmp_path)[0]).tasks[0].rows]
    # stacked's default is two layers: only the non-default option enters the label.
    assert sorted(labels) == ["stacked", "stacked[num_layers=3]"]


def test_duplicate_seed_keeps_latest_and_says_so(tmp_path, demo):
    old = demo.record(run_id="old", finished="2026-12-01T10:00:00Z", metrics={"test": {"mse": 9.0}})
    new = demo.record(run_id="new", finished="2026-12-01T11:00:00Z", metrics={"test": {"mse": 1.0}})
    demo.write_records(tmp_path, [old, new])
    task = summarise(load_runs(tmp_path)[0]).tasks[0]
    assert task.rows[0].values == (1.0,)
    assert any("ignoring records/old.json" in gap for gap in task.gaps)


def test_verdicts_name_ship_equivalents_cost_and_classical(summary):
    valve = _task(summary, "valve-codes")
    text = " ".join(task_verdict(valve, summary.alpha))
    assert text.startswith("Ship lstm: accuracy 0.86")
    # Source: statsmodels ttost_ind(usevar="unequal") with the stated 5% margin of lstm's mean.
    gru, lstm = _row(valve, "gru"), _row(valve, "lstm")
    bound = 0.05 * stats.tmean(lstm.values)
    assert ttost_ind(list(gru.values), list(lstm.values), -bound, bound,
                     usevar="unequal")[0] < 0.05
    assert "gru is equivalent to it within ±5% (two one-sided tests" in text
    assert "take gru" in text and "faster per streaming step" in text
    assert "significantly better than the best classical row, majority-code" in text
    assert "run to ship: seed 2 (valve-codes-lstm-s2-demo), best validation accuracy" in text
    assert "artifact not recorded" in text and "reproduce command not recorded" in text
    pump = " ".join(task_verdict(_task(summary, "pump-vibration"), summary.alpha))
    assert "2.3x the step latency of the fastest, output-feedback" in pump
    assert "lstm is not significantly different (ratio 1.03" in pump
    assert "which is no evidence of equal quality" in pump and "seeds per row" in pump
    flaky = " ".join(task_verdict(_task(summary, "flaky-rig"), summary.alpha))
    assert "Caution: 1 of its 3 runs gave no usable result" in flaky


def test_verdict_when_a_classical_row_wins(tmp_path, demo):
    records = [demo.record(run_id=f"m{s}", seed=s, metrics={"test": {"mse": 0.5 + s / 100}})
               for s in range(3)]
    records += [demo.record(run_id=f"b{s}", seed=s, kind="baseline", model="persistence",
                            metrics={"test": {"mse": 0.1 + s / 100}}) for s in range(3)]
    demo.write_records(tmp_path, records)
    task = summarise(load_runs(tmp_path)[0]).tasks[0]
    text = " ".join(task_verdict(task, 0.05))
    # Source: scipy.stats.ttest_ind(equal_var=False) on the log values (mse: log scale).
    p = stats.ttest_ind(_logs([0.5, 0.51, 0.52]), _logs([0.1, 0.11, 0.12]),
                        equal_var=False).pvalue
    assert text.startswith("Ship the classical row persistence: mse 0.1097")
    assert "no recurrent topology beat it here" in text
    assert p < 0.001 and "is significantly worse (Welch p < 0.001)" in text


def test_task_without_primary_has_no_verdict(tmp_path, demo):
    demo.write_records(tmp_path, [demo.record(primary=None)])
    task = summarise(load_runs(tmp_path)[0]).tasks[0]
    assert task.metric is None and task_verdict(task, 0.05)[0].startswith("No verdict")
    assert any("no record names its primary metric" in gap for gap in task.gaps)


def test_bad_alpha_is_refused():
    with pytest.raises(ValueError, match="alpha"):
        summarise([], alpha=5)


def test_classical_row_is_shipped_when_no_topology_is_significantly_better(tmp_path, demo):
    model = [0.170, 0.175, 0.168]
    base = [0.172, 0.171, 0.176]
    records = [demo.record(run_id=f"m{s}", seed=s, metrics={"test": {"mse": v}})
               for s, v in enumerate(model)]
    records += [demo.record(run_id=f"b{s}", seed=s, kind="baseline", model="memoryless",
                            metrics={"test": {"mse": v}}) for s, v in enumerate(base)]
    demo.write_records(tmp_path, records)
    text = " ".join(task_verdict(summarise(load_runs(tmp_path)[0]).tasks[0], 0.05))
    # Source for the p-value: scipy.stats.ttest_ind(equal_var=False) on the log values.
    p = stats.ttest_ind(_logs(model), _logs(base), equal_var=False).pvalue
    assert p >= 0.05
    assert text.startswith("Ship the classical row memoryless")
    assert "the best topology, stacked" in text and "has a better value but is not " \
        "significantly better" in text
    assert f"Welch p = {p:.2g}" in text


def test_wide_spread_is_not_called_as_good(tmp_path, demo):
    # Invented: "steady" is tight; "erratic" has one bad seed, so Welch cannot separate them.
    steady, erratic = [0.010, 0.011, 0.012], [0.011, 0.012, 0.300]
    records = [demo.record(run_id=f"s{i}", seed=i, model="gru", metrics={"test": {"mse": v}},
                           cost={"step_latency_ms": 0.2}) for i, v in enumerate(steady)]
    records += [demo.record(run_id=f"e{i}", seed=i, model="residual-skip",
                            metrics={"test": {"mse": v}}, cost={"step_latency_ms": 0.1})
                for i, v in enumerate(erratic)]
    demo.write_records(tmp_path, records)
    task = summarise(load_runs(tmp_path)[0]).tasks[0]
    assert stats.ttest_ind(_logs(steady), _logs(erratic), equal_var=False).pvalue >= 0.05
    erratic_row = next(r for r in task.rows if r.label == "residual-skip")
    assert erratic_row.versus_best.verdict == "not significant"
    text = " ".join(task_verdict(task, 0.05))
    assert "residual-skip is not significantly different (ratio" in text
    assert "no evidence of equal quality" in text
    assert "take residual-skip" not in text and "equivalent" not in text


def test_cross_task_view_ignores_single_topology_tasks(tmp_path, demo):
    records = [demo.record(run_id=f"a{s}", seed=s, task="solo", model="gru") for s in range(2)]
    records += [demo.record(run_id=f"b-{m}-{s}", seed=s, task="pair", model=m,
                            metrics={"test": {"mse": v + s / 1000}})
                for s in range(2) for m, v in (("gru", 0.2), ("lstm", 0.1))]
    demo.write_records(tmp_path, records)
    overall = {r.label: r for r in summarise(load_runs(tmp_path)[0]).overall}
    assert overall["gru"].tasks_ranked == 1 and overall["gru"].mean_rank == 2
    assert overall["lstm"].mean_rank == 1
