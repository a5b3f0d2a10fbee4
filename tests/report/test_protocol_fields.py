"""The report on records of the tuned protocol and the classical rows (invented kiln scenario in
conftest.py): bounds apart, skipped and seed-independent rows, unconverged flags, the run to ship,
the tuning-budget view, labels with non-default options, data versions never pooled, and old
records still loading. Statistics are checked against scipy.stats where they appear."""

import csv
import io
import math

import pytest
from scipy import stats

from loopzoo.report import build_report
from loopzoo.report.budget import expected_best
from loopzoo.report.loading import load_runs
from loopzoo.report.summary import summarise
from loopzoo.report.verdict import task_verdict


@pytest.fixture
def kiln(tmp_path, demo):
    demo.write_records(tmp_path, demo.kiln_records())
    return tmp_path


@pytest.fixture
def task(kiln):
    (only,) = summarise(load_runs(kiln)[0]).tasks
    return only


def _row(task, label):
    return next(r for r in task.rows if r.label == label)


def _verdict(task):
    return " ".join(task_verdict(task, 0.05))


def test_bound_is_shown_apart_never_ranked_or_shipped(task):
    bound = _row(task, "noise-floor")
    assert bound.kind == "bound" and bound.rank is None and bound.exact
    assert task.bounds == (bound,) and task.best.label == "gru"
    text = _verdict(task)
    assert text.startswith("Drawn from unconverged rows")
    assert "Ship gru:" in text and "Ship noise-floor" not in text
    # The gap is a ratio on the log scale: geometric mean of gru over the bound's 0.004.
    ratio = stats.gmean([0.020, 0.022, 0.021]) / 0.004
    assert f"noise-floor at mse 0.004; gap of the shipped row to it: {ratio:.3g}x" in text


def test_skipped_row_shows_its_reason(task):
    ridge = _row(task, "ridge-lags")
    assert ridge.counts["skipped"] == 3 and ridge.interval is None and ridge.rank is None
    assert any("ridge-lags: seed 0 skipped: series too short for 48 lags" in g for g in task.gaps)


def test_seed_independent_row_is_one_value_and_tested_as_exact(task):
    arima = _row(task, "seasonal-arima")
    assert arima.exact and arima.interval.n == 1 and arima.interval.mean == 0.05
    # Source: scipy.stats.ttest_1samp on the log values of the gru seeds against log(0.05):
    # a value without seed noise is a known constant, not a sample of three equal draws.
    logs = [math.log(v) for v in (0.020, 0.022, 0.021)]
    p = stats.ttest_1samp(logs, math.log(0.05)).pvalue
    assert arima.versus_best.p_value == pytest.approx(p, rel=1e-8)
    assert "significantly better than the best classical row, seasonal-arima" in _verdict(task)


def test_unconverged_rows_are_flagged_and_named_first(task):
    lstm = _row(task, "lstm")
    assert lstm.flags == ("2 of 3 runs stopped at the step cap", "tuned lr at a bound of its range")
    first = task_verdict(task, 0.05)[0]
    assert first.startswith("Drawn from unconverged rows, so treat it as provisional: lstm (2 of 3")


def test_verdict_names_configuration_run_artifact_and_command(task):
    text = _verdict(task)
    # gru's validation mse is lowest on seed 1 (0.018), though its test mse is lowest on seed 0.
    assert "tuned values lr=0.004 (best of 8 trials on validation)" in text
    assert "run to ship: seed 1 (kiln-heat-gru-s1-demo), best validation mse 0.018" in text
    assert "artifact runs/kiln-heat-gru-s1-demo/artifact" in text
    assert "reproduce with `loopzoo train model=gru task=kiln-heat seed=1 out=OUT`" in text


def test_labels_show_options_that_differ_from_defaults(task, kiln):
    labels = {r.label for r in task.rows if r.kind == "model"}
    assert labels == {"gru", "lstm", "hidden-feedback[nonlinearity=relu]"}
    markdown, table = (path.read_text() for path in build_report(kiln)[:2])
    assert "| hidden-feedback[nonlinearity=relu] | topology |" in markdown
    assert ",hidden-feedback[nonlinearity=relu]," in table


def test_budget_sentence_and_the_winner_at_every_budget(task, tmp_path, demo):
    assert "gru has the best expected validation mse at every budget from 1 to 8 trials" \
        in _verdict(task)
    # Hand-made trial scores where the leader changes: "steady" is good on average, "lucky" has
    # excellent trials, which win once enough trials are drawn.
    steady, lucky = [0.10, 0.11, 0.12, 0.10], [0.01, 0.5, 0.01, 0.5]
    records = []
    for model, trials in (("gru", steady), ("lstm", lucky)):
        records += [demo.record(run_id=f"{model}{s}", seed=s, model=model,
                                tuning={"trials": 4, "values": trials, "chosen": {}})
                    for s in range(2)]
    other = demo.write_records(tmp_path / "other", records)
    (changing,) = summarise(load_runs(other)[0]).tasks
    assert expected_best(lucky, "min", 1) > expected_best(steady, "min", 1)
    assert expected_best(lucky, "min", 4) < expected_best(steady, "min", 4)
    assert "the winner depends on it" in _verdict(changing)


def test_report_files_carry_the_new_views(kiln):
    md_path, csv_path, html_path = build_report(kiln)
    markdown = md_path.read_text()
    assert "Tuning budget on kiln-heat: expected best validation mse after n trials" in markdown
    assert "| noise-floor | bound |" in markdown and "bound (not ranked)" in markdown
    assert "skipped: series too short for 48 lags" in markdown
    assert "0.05 (same for every seed)" in markdown
    assert "A classical row is the one to ship on 0 of 1 task(s)" in markdown
    lines = list(csv.DictReader(io.StringIO(csv_path.read_text())))
    gru = next(line for line in lines if line["row"] == "gru")
    assert gru["ship_artifact"] == "runs/kiln-heat-gru-s1-demo/artifact"
    assert gru["scale"] == "log" and gru["tuning_trials"] == "8"
    arima = next(line for line in lines if line["row"] == "seasonal-arima")
    assert arima["seed_dependent"] == "no"


def test_classical_wins_are_counted(tmp_path, demo):
    records = [r for r in demo.kiln_records() if r["model"] not in ("gru", "lstm")]
    demo.write_records(tmp_path, records)
    markdown = build_report(tmp_path)[0].read_text()
    assert "A classical row is the one to ship on 1 of 1 task(s)" in markdown
    assert "kiln-heat: seasonal-arima" in markdown
    assert "Ship the classical row seasonal-arima" in markdown


def test_runs_of_different_data_versions_are_never_pooled(tmp_path, demo):
    changed = "9" * 64
    records = demo.kiln_records()
    for rec in demo.kiln_records(sha=changed):
        rec["run_id"] += "-v2"
        records.append(rec)
    demo.write_records(tmp_path, records)
    tasks = summarise(load_runs(tmp_path)[0]).tasks
    assert [t.label for t in tasks] == ["kiln-heat (data 3f1c9a7e5b2d)",
                                        "kiln-heat (data 999999999999)"]
    note = tasks[0].gaps[0]
    assert note.startswith("kiln-heat: not pooled: its runs read different versions of kiln.csv")
    assert all(len(r.runs) == 3 for t in tasks for r in t.rows)


def test_old_records_without_the_new_fields_still_load(built_demo):
    markdown = (built_demo / "report.md").read_text()
    assert "tuning not recorded" in markdown and "artifact not recorded" in markdown
    assert "Tuning budget on" not in markdown


def test_a_reference_line_is_shown_apart_never_ranked_or_shipped(tmp_path, demo):
    # A general-purpose compressor's rate is a reference line, not a model one could ship.
    records = demo.kiln_records()
    floor = next(r for r in records if r["model"] == "noise-floor")
    records.append({**floor, "run_id": "kiln-lzma-s0", "model": "lzma-rate", "kind": "reference",
                    "metrics": {"test": {"mse": 0.001}}})
    demo.write_records(tmp_path, records)
    runs, skipped = load_runs(tmp_path)
    assert not skipped
    (task,) = summarise(runs).tasks
    lzma = _row(task, "lzma-rate")
    assert lzma.kind == "reference" and lzma.rank is None
    assert task.best.label == "gru" and "Ship lzma-rate" not in _verdict(task)
    markdown = build_report(tmp_path)[0].read_text()
    assert "reference (not ranked)" in markdown
