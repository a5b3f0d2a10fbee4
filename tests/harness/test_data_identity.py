"""A run's identity includes the content of the user's files: a changed file means new runs, and
every record says which file version it used and what the evaluation looked like."""

import hashlib

import numpy as np
import pytest

from loopzoo import cli
from loopzoo.harness import app, records, runids
from loopzoo.harness.sweep import run_sweep


def greenhouse_csv(path, scale=1.0):
    """Demo: an invented greenhouse's hourly humidity and heater power."""
    hours = np.arange(80)
    humidity = np.round(60 + 10 * np.sin(hours / 5), 3)
    power = np.round(3 + 0.1 * humidity, 3)  # scaled by 2 below, these stay exact
    rows = [f"{h},{scale * u:.4f},{scale * p:.4f}" for h, u, p in zip(hours, humidity, power,
                                                                      strict=True)]
    path.write_text("hour,humidity,heater_kw\n" + "\n".join(rows) + "\n", encoding="utf-8")
    return path


def csv_job(path, out):
    return ["task=csv", f"task.options.path={path}", "task.options.target=humidity",
            "task.options.features=[heater_kw]", "task.options.time=hour",
            "task.options.window=4", "task.batch_size=8", "task.budget=300",
            "trainer.max_steps=2", "protocol.val_every=1", "protocol.trials=null",
            "trainer.enable_progress_bar=false", f"out={out}"]


def by_kind(out):
    found = records.load_records(out)
    return ([r for r in found if r["kind"] == "model"],
            [r for r in found if r["kind"] == "baseline"])


def test_a_changed_file_means_new_runs_and_old_numbers_are_not_reused(tmp_path, capsys):
    data = greenhouse_csv(tmp_path / "greenhouse.csv")
    out = tmp_path / "out"
    sweep = ["model=gru,lstm", "seed=0", *csv_job(data, out)]
    assert run_sweep(sweep) == 0
    first_models, first_baselines = by_kind(out)
    digest = hashlib.sha256(data.read_bytes()).hexdigest()
    for record in first_models + first_baselines:
        assert record["data"]["files"] == [{"role": "path", "path": str(data), "sha256": digest,
                                            "bytes": data.stat().st_size, "rows": 80}]
    facts = first_models[0]["data"]["facts"]
    assert facts["options"]["window"] == 4 and facts["time"]["regular"] is True
    assert facts["parts"]["test"]["first_time"] == facts["parts"]["test"]["first_row"]  # hours
    assert facts["splits"]["test"]["scored_positions"] == facts["parts"]["test"]["forecasts"]

    assert run_sweep(sweep) == 0  # unchanged file: nothing runs again
    assert "2 already recorded" in capsys.readouterr().out

    greenhouse_csv(data, scale=2.0)  # every value doubled
    assert run_sweep(sweep) == 0
    assert "0 already recorded" in capsys.readouterr().out
    models, baselines = by_kind(out)
    assert len(models) == 4 and len(baselines) == 2 * len(first_baselines)
    new = [r for r in models if r["run_id"] not in {f["run_id"] for f in first_models}]
    assert len(new) == 2
    doubled = hashlib.sha256(data.read_bytes()).hexdigest()
    assert {r["data"]["files"][0]["sha256"] for r in new} == {doubled}
    # The persistence baseline's MSE scales with the square of the values: recomputed, not reused.
    old_mse = {r["model"]: r["metrics"]["test"]["mse"] for r in first_baselines}
    new_mse = {r["model"]: r["metrics"]["test"]["mse"] for r in baselines
               if r["data"]["files"][0]["sha256"] == doubled}
    assert new_mse["persistence"] == pytest.approx(4 * old_mse["persistence"], rel=1e-6)


def test_a_missing_file_is_refused_before_anything_is_recorded(tmp_path, capsys):
    out = tmp_path / "out"
    job = csv_job(tmp_path / "nowhere.csv", out)
    assert cli.main(["train", "model=gru", *job]) == 2
    err = capsys.readouterr().err
    assert "task.options.path" in err and "nowhere.csv' does not exist" in err
    assert "Traceback" not in err
    assert not (out / "records").exists()
    with pytest.raises(ValueError, match="nowhere.csv' does not exist"):
        run_sweep(["model=gru,lstm", *job])
    assert not (out / "records").exists()
    folder = tmp_path / "a-folder.csv"
    folder.mkdir()
    assert cli.main(["train", "model=gru", *csv_job(folder, out)]) == 2
    assert "is not a file" in capsys.readouterr().err


def test_a_file_changed_while_a_run_starts_fails_that_run(tmp_path):
    data = greenhouse_csv(tmp_path / "greenhouse.csv")
    content = {"task": {"name": "csv", "options": {"path": str(data)}}}
    expected = runids.identity(content)
    greenhouse_csv(data, scale=3.0)
    read = {"status": "ok", "metrics": {"test": {"mse": 1.0}},
            "data": {"files": runids.data_files(content)}}
    body = app._changed_files(read, expected)
    assert body["status"] == "failed" and "task.options.path changed" in body["reason"]
    assert app._changed_files(read, runids.identity(content)) is read
