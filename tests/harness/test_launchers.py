"""Hydra launchers: joblib with two local processes, submitit's local executor, thread split.
Slow: each launches a real sweep in a subprocess."""

import json
import subprocess
import sys

import pytest
from support.tiny import tiny

from loopzoo.harness.config import cores

TINY = tiny("task.options.train_size=32", "trainer.max_steps=4", "protocol.val_every=2")


def sweep(out, *overrides):
    run = subprocess.run(
        [sys.executable, "-m", "loopzoo.cli", "sweep", "model=gru,lstm", "seed=0", *TINY,
         *overrides, f"out={out}"], capture_output=True, text=True, timeout=900)
    assert run.returncode == 0, run.stderr[-3000:]
    found = [json.loads(p.read_text()) for p in (out / "records").glob("*.json")]
    return run.stdout, {r["model"]: r for r in found if r["kind"] == "model"}


@pytest.mark.slow
def test_joblib_runs_two_jobs_with_cores_split_between_them(tmp_path):
    stdout, found = sweep(tmp_path, "hydra.launcher.n_jobs=2")
    assert set(found) == {"gru", "lstm"}
    assert all(r["status"] == "ok" for r in found.values()), [r["reason"] for r in found.values()]
    # threads per job = cores / n_jobs, so parallel jobs never oversubscribe the cores (common
    # practice for process pools running multi-threaded torch).
    assert {r["versions"]["torch_threads"] for r in found.values()} == {max(1, cores() // 2)}
    assert "[  2/2]" in stdout


@pytest.mark.slow
def test_submitit_local_executor_runs_the_sweep(tmp_path):
    stdout, found = sweep(tmp_path, "hydra/launcher=slurm-local")
    assert set(found) == {"gru", "lstm"}
    assert all(r["status"] == "ok" for r in found.values()), [r["reason"] for r in found.values()]
    # Each job gets cpus_per_task threads (1 in the slurm-local preset).
    assert {r["versions"]["torch_threads"] for r in found.values()} == {1}
    # submitit's own job folders stay inside the output directory.
    assert list((tmp_path / ".hydra-runs").glob("*/.submitit"))
