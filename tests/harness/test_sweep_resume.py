"""A sweep killed with SIGKILL (the whole process group) and started again records every run
exactly once and leaves no unreadable file (issue 4). Slow: it launches real sweeps."""

import json
import subprocess
import sys
import time
from pathlib import Path

import pytest
from support.processes import kill_when, start_sweep

from loopzoo.harness.sweep import plan_sweep

SWEEP = ["model=gru,lstm,hidden-feedback", "seed=0,1", "task=adding", "task.options.length=8",
         "task.options.train_size=64", "task.options.val_size=16", "task.options.test_size=16",
         "task.batch_size=16", "task.budget=400", "trainer.max_steps=30", "protocol.val_every=10",
         "protocol.trials=null", "hydra.launcher.n_jobs=2"]


def model_records(out: Path) -> list[Path]:
    folder = out / "records"
    return [p for p in folder.glob("adding-*.json") if "memoryless" not in p.name] \
        if folder.exists() else []


@pytest.mark.slow
def test_a_killed_sweep_restarted_records_every_run_exactly_once(tmp_path):
    out = tmp_path / "out"
    expected = set(plan_sweep([*SWEEP, f"out={out}"]).run_ids)
    assert len(expected) == 6
    begun = time.monotonic()
    kill_points = [
        lambda: time.monotonic() - begun > 4.0,  # while starting up and composing
        lambda: len(model_records(out)) >= 1,  # right after a first record
        lambda: any(p.name.endswith(".tmp") for p in (out / "records").glob(".*"))
        or len(model_records(out)) >= 3,  # mid-write if caught, else half-way
    ]
    killed = 0
    for point in kill_points:
        begun = time.monotonic()
        killed += kill_when(start_sweep(SWEEP, out), point, timeout=300.0)
    assert killed >= 2, "the sweep finished before it could be killed; make the runs longer"

    final = subprocess.run([sys.executable, "-m", "loopzoo.cli", "sweep", *SWEEP, f"out={out}"],
                           capture_output=True, text=True, timeout=600)
    assert final.returncode == 0, final.stderr
    assert "sweep done in " in final.stdout

    files = sorted((out / "records").iterdir())
    assert not [p for p in files if p.name.startswith(".")], "a temporary file was left behind"
    loaded = [json.loads(p.read_text()) for p in files]  # every file parses
    assert all(r["run_id"] == p.stem for r, p in zip(loaded, files, strict=True))
    runs = [r for r in loaded if r["kind"] == "model"]
    assert sorted(r["run_id"] for r in runs) == sorted(expected)  # each exactly once
    assert all(r["status"] == "ok" for r in runs)
    baselines = [(r["model"], r["seed"]) for r in loaded if r["kind"] == "baseline"]
    assert len(baselines) == len(set(baselines)) and {s for _, s in baselines} == {0, 1}
