"""Sweeps: expansion like Hydra's multirun, one record per run, progress lines, reruns, refusals.

These run Hydra's basic (in-process) launcher on tiny jobs; the parallel launchers and a real
SIGKILL are in the slow tests (test_launchers.py, test_sweep_resume.py).
"""

import json

import pytest
from support.tiny import tiny

import loopzoo.engine.training as training
import loopzoo.harness.baselines as baselines
import loopzoo.harness.sweep as sweep
from loopzoo.harness import records, running, state
from loopzoo.harness.config import compose_job, composer
from loopzoo.harness.errors import ConfigError, OutDirError
from loopzoo.harness.sweep import plan_sweep, run_sweep

TINY = tiny("hydra/launcher=basic")


def model_records(out):
    return {r["model"]: r for r in records.load_records(out) if r["kind"] == "model"}


def test_comma_lists_expand_to_their_product(tmp_path):
    plan = plan_sweep(["model=gru,lstm", "task=adding,copy", "seed=1,2,3", f"out={tmp_path}"])
    assert len(plan.jobs) == 12
    assert {(j.model.name, j.task.name, j.seed) for j in plan.jobs} == {
        (m, t, s) for m in ("gru", "lstm") for t in ("adding", "copy") for s in (1, 2, 3)}
    assert len(set(plan.run_ids)) == 12
    # Jobs that differ only in their seed are composed once: the same configs as one by one.
    with composer():
        for overrides, job in zip(plan.overrides, plan.jobs, strict=True):
            assert job == compose_job(overrides)


def test_a_config_that_reads_the_seed_is_composed_per_seed(tmp_path):
    plan = plan_sweep(["model=gru", "seed=1,2", f"out={tmp_path}",
                       "+trainer.default_root_dir=" + str(tmp_path) + "/s${seed}"])
    assert [job.trainer.default_root_dir for job in plan.jobs] == [f"{tmp_path}/s1",
                                                                   f"{tmp_path}/s2"]


def test_the_command_line_narrows_a_suite(tmp_path):
    plan = plan_sweep(["suite=quick", "model=gru", "seed=5", f"out={tmp_path}"])
    assert {j.model.name for j in plan.jobs} == {"gru"} and {j.seed for j in plan.jobs} == {5}
    assert len(plan.jobs) == len({j.task.name for j in plan.jobs})
    assert plan.suite == "quick"


def test_a_bad_value_anywhere_in_the_sweep_is_refused_before_anything_runs(tmp_path):
    with pytest.raises(ConfigError, match="job model=gru task=nope"):
        plan_sweep(["model=gru", "task=adding,nope", f"out={tmp_path}"])
    assert not tmp_path.joinpath("records").exists()


def test_a_sweep_records_each_run_once_with_a_progress_line_each(tmp_path, capsys):
    assert run_sweep(["model=gru,lstm", "seed=0", f"out={tmp_path}", *TINY]) == 0
    out = capsys.readouterr().out
    assert "sweep: 2 runs (2 distinct), 0 already recorded" in out
    lines = [line for line in out.splitlines() if line.startswith("[")]
    assert [line.split("]")[0] for line in lines] == ["[  1/2", "[  2/2"]
    assert {line.split()[2] for line in lines} == {"gru", "lstm"}
    assert all(" ok " in line and line.endswith(" s") for line in lines)
    found = model_records(tmp_path)
    assert set(found) == {"gru", "lstm"} and all(r["status"] == "ok" for r in found.values())
    # The baselines of the shared (task, seed) are recorded once, not once per model.
    baselines = [r for r in records.load_records(tmp_path) if r["kind"] == "baseline"]
    assert len(baselines) == len({r["model"] for r in baselines}) > 0
    assert not (tmp_path / ".state" / "plan.json").exists()
    # Finished jobs leave no progress file behind.
    assert not list((tmp_path / ".state" / "progress").glob("*"))

    assert run_sweep(["model=gru,lstm", "seed=0", f"out={tmp_path}", *TINY]) == 0
    out = capsys.readouterr().out
    assert "2 already recorded" in out and "s: 2 skipped;" in out


def test_only_missing_runs_are_launched_and_a_finished_sweep_launches_nothing(tmp_path, capsys,
                                                                              monkeypatch):
    launched: list[list[str]] = []
    real = sweep.run_multirun

    def counting(entry, overrides):
        launched.append(overrides)
        real(entry, overrides)

    monkeypatch.setattr(sweep, "run_multirun", counting)
    assert run_sweep(["model=gru", "seed=0", f"out={tmp_path}", *TINY]) == 0
    capsys.readouterr()
    # gru is recorded: of the two jobs only lstm's is launched, as one job of the launcher.
    assert run_sweep(["model=gru,lstm", "seed=0", f"out={tmp_path}", *TINY]) == 0
    out = capsys.readouterr().out
    assert "1 already recorded, 1 to run" in out and "1 ok, 1 skipped" in out
    assert [line.split()[2] for line in out.splitlines() if line.startswith("[")] == ["lstm"]
    assert f"+{state.JOB_INDEX}=0" in launched[-1]
    # Everything recorded: no launcher, no worker started; the same summary as before.
    assert run_sweep(["model=gru,lstm", "seed=0", f"out={tmp_path}", *TINY]) == 0
    assert len(launched) == 2
    assert "2 skipped" in capsys.readouterr().out


def test_failed_and_diverged_runs_are_recorded_and_the_sweep_goes_on(tmp_path, monkeypatch,
                                                                      capsys):
    real = training.train_and_evaluate

    def flaky(cfg, run_dir, **options):
        if cfg.model.name == "lstm":
            raise RuntimeError("the node ran out of memory")
        body = real(cfg, run_dir, **options)
        if cfg.model.name == "gru":
            body.update(status="diverged", reason="loss is nan", diverged_at_step=1)
        return body

    monkeypatch.setattr(training, "train_and_evaluate", flaky)
    sweep = ["model=lstm,gru,hidden-feedback", "seed=0", f"out={tmp_path}", *TINY]
    assert run_sweep(sweep) == 0
    out = capsys.readouterr().out
    assert "s: 1 diverged, 1 failed, 1 ok;" in out
    found = model_records(tmp_path)
    assert found["lstm"]["status"] == "failed"
    assert found["lstm"]["reason"] == "RuntimeError: the node ran out of memory"
    error_file = tmp_path / "runs" / found["lstm"]["run_id"] / "error.txt"
    assert "the node ran out of memory" in error_file.read_text()
    assert (found["gru"]["status"], found["gru"]["diverged_at_step"]) == ("diverged", 1)
    assert found["hidden-feedback"]["status"] == "ok"

    # A rerun redoes the failed run only: diverged is a result of config and seed, kept.
    monkeypatch.setattr(training, "train_and_evaluate", real)
    assert run_sweep(sweep) == 0
    assert "s: 1 ok, 2 skipped;" in capsys.readouterr().out
    again = model_records(tmp_path)
    assert again["lstm"]["status"] == "ok"
    assert again["gru"] == found["gru"] and again["hidden-feedback"] == found["hidden-feedback"]


def test_while_jobs_run_the_sweep_shows_their_progress(tmp_path, capsys, monkeypatch):
    monkeypatch.setattr(running, "SHOW_EVERY", 0.05)
    monkeypatch.setattr(running, "WRITE_EVERY", 0.0)
    long_enough = ["trainer.max_steps=60", "protocol.val_every=5", "protocol.patience=null"]
    assert run_sweep(["model=gru", f"out={tmp_path}", *TINY, *long_enough]) == 0
    lines = capsys.readouterr().out.splitlines()
    shown = [line for line in lines if line.startswith("  gru adding seed=0 final run")]
    assert lines.count("running: 1 of 1 jobs, 0 finished") >= 1 and shown
    assert all(" step " in line and " loss " in line and " val mse " in line for line in shown)
    # Printed while the job ran, before its finished line.
    assert lines.index(shown[0]) < next(i for i, line in enumerate(lines) if line.startswith("["))
    # Switched off with the same key as a single run's display.
    monkeypatch.setattr(running, "RunningDisplay", None)  # calling it would fail the sweep
    assert run_sweep(["model=lstm", f"out={tmp_path}", *TINY,
                      "trainer.enable_progress_bar=false"]) == 0


def test_jobs_refused_inside_the_sweep_exit_2_with_the_reason(tmp_path, capsys):
    # The smallest lstm here has 22 parameters; hidden-feedback fits in 20; the sweep finishes.
    code = run_sweep(["model=lstm,hidden-feedback", f"out={tmp_path}", *TINY, "task.budget=20"])
    captured = capsys.readouterr()
    assert code == 2
    assert "refused: lstm adding seed=0: task.budget = 20 cannot be met" in captured.err
    assert set(model_records(tmp_path)) <= {"hidden-feedback"}


def test_a_second_sweep_into_the_same_out_is_refused(tmp_path):
    with state.sweep_lock(tmp_path), pytest.raises(OutDirError, match="in use by another"):
        run_sweep(["model=gru", f"out={tmp_path}", *TINY])


def test_temporary_files_of_a_killed_write_are_cleared(tmp_path):
    records.claim_out_dir(tmp_path, None)
    stale = tmp_path / "records" / ".adding-gru-s0-0000000000.json.abc.tmp"
    stale.parent.mkdir(parents=True)
    stale.write_text('{"schema": "loopzo')
    assert run_sweep(["model=gru", f"out={tmp_path}", *TINY]) == 0
    assert not stale.exists()
    for path in (tmp_path / "records").iterdir():
        json.loads(path.read_text())


def test_a_baseline_failure_keeps_the_run_record_and_is_retried(tmp_path, monkeypatch, caplog):
    real = baselines.baseline_records

    def broken(cfg):
        raise RuntimeError("statsmodels is missing")

    monkeypatch.setattr(baselines, "baseline_records", broken)
    assert run_sweep(["model=gru", f"out={tmp_path}", *TINY]) == 0
    assert "statsmodels is missing" in caplog.text
    assert [r["kind"] for r in records.load_records(tmp_path)] == ["model"]
    monkeypatch.setattr(baselines, "baseline_records", real)
    assert run_sweep(["model=gru,lstm", f"out={tmp_path}", *TINY]) == 0
    assert {r["kind"] for r in records.load_records(tmp_path)} == {"model", "baseline"}


def test_a_damaged_record_is_set_aside_and_only_that_run_is_redone(tmp_path, capsys):
    assert run_sweep(["model=gru,lstm", f"out={tmp_path}", *TINY]) == 0
    gru = next(p for p in (tmp_path / "records").glob("adding-gru-*.json"))
    kept = records.read_record(next((tmp_path / "records").glob("adding-lstm-*.json")))
    gru.write_text(gru.read_text()[:40])  # a truncated record
    capsys.readouterr()
    assert run_sweep(["model=gru,lstm", f"out={tmp_path}", *TINY]) == 0
    captured = capsys.readouterr()
    aside = list((tmp_path / records.DAMAGED_DIR).iterdir())
    assert len(aside) == 1 and len(aside[0].read_text()) == 40
    assert f"moved to {aside[0]}" in captured.err and str(gru) in captured.err
    assert "1 already recorded" in captured.out and "1 ok, 1 skipped" in captured.out
    assert records.read_record(gru)["status"] == "ok"
    assert records.read_record(next((tmp_path / "records").glob("adding-lstm-*.json"))) == kept


def test_jobs_of_an_earlier_killed_sweep_are_not_counted_in_the_next(tmp_path, capsys,
                                                                       monkeypatch):
    # An orphaned worker of a killed sweep finishes its job after a new sweep has started:
    # it carries the old sweep's token, so the new plan's count stays right.
    records.claim_out_dir(tmp_path, None)
    state.write_plan(tmp_path, [{}])
    monkeypatch.setenv(state.SWEEP_TOKEN, "token-of-a-killed-sweep")
    assert state.count_finished(tmp_path, {"status": "ok"}) is None
    monkeypatch.delenv(state.SWEEP_TOKEN)
    assert state.read_plan(tmp_path)["finished"] == []
    assert run_sweep(["model=gru", f"out={tmp_path}", *TINY]) == 0
    lines = [line for line in capsys.readouterr().out.splitlines() if line.startswith("[")]
    assert [line.split("]")[0] for line in lines] == ["[  1/1"]
