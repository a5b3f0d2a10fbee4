"""A tuning sweep killed with SIGKILL (its whole process group) mid-study and started again loses
only the trials that were running, never repeats a finished trial, and ends with exactly the
budgeted number of finished trials (issue 9). Slow: it launches real sweeps."""

import json
import sqlite3
import subprocess
import sys
from pathlib import Path

import pytest
from support.processes import kill_when, start_sweep

TRIALS = 8
SWEEP = ["model=gru", "seed=0,1", "task=adding", "task.options.length=8",
         "+task.options.train_size=64", "+task.options.val_size=16", "+task.options.test_size=16",
         "task.batch_size=16", "task.budget=400", "trainer.max_steps=60", "protocol.val_every=10",
         "protocol.patience=null", "protocol.pruner=none", f"protocol.trials={TRIALS}",
         "hydra.launcher.n_jobs=2"]


def trials(out: Path) -> dict[int, tuple[str, str | None, float | None]]:
    """Trial number -> (state, params as JSON, value), read while the sweep may be writing."""
    path = out / "studies.sqlite3"
    if not path.exists():
        return {}
    try:
        with sqlite3.connect(path, timeout=30) as db:
            rows = db.execute("SELECT number, state, trial_id FROM trials").fetchall()
            found = {}
            for number, state, trial_id in rows:
                params = db.execute("SELECT param_name, param_value FROM trial_params WHERE "
                                    "trial_id = ? ORDER BY param_name", (trial_id,)).fetchall()
                value = db.execute("SELECT value FROM trial_values WHERE trial_id = ?",
                                   (trial_id,)).fetchone()
                found[number] = (state, json.dumps(params), value[0] if value else None)
            return found
    except sqlite3.OperationalError:  # tables not created yet
        return {}


def finished(found):
    return {n: t for n, t in found.items() if t[0] in ("COMPLETE", "PRUNED")}


@pytest.mark.slow
def test_a_killed_study_continues_without_repeating_a_finished_trial(tmp_path):
    out = tmp_path / "out"

    def running_after(count):
        def ready():
            found = trials(out)
            return (len(finished(found)) >= count
                    and any(t[0] == "RUNNING" for t in found.values()))
        return ready

    snapshots = []
    for count in (2, 5):
        killed = kill_when(start_sweep(SWEEP, out), running_after(count), timeout=600.0, poll=0.1)
        assert killed, "the sweep ended before the kill"
        snapshots.append(trials(out))
    lost = {n for n, t in snapshots[-1].items() if t[0] == "RUNNING"}
    assert lost, "no trial was running at the kill"

    final = subprocess.run([sys.executable, "-m", "loopzoo.cli", "sweep", *SWEEP, f"out={out}"],
                           capture_output=True, text=True, timeout=900)
    assert final.returncode == 0, final.stderr
    after = trials(out)
    # Finished trials are kept as they were; none was run again.
    for snapshot in snapshots:
        for number, trial in finished(snapshot).items():
            assert after[number] == trial
    assert len(finished(after)) == TRIALS
    # Trials running at a kill were marked failed and replaced by new ones.
    assert {n for n, t in after.items() if t[0] == "FAIL"} >= lost
    assert not [n for n, t in after.items() if t[0] == "RUNNING"]

    runs = [json.loads(p.read_text()) for p in (out / "records").glob("adding-gru-*.json")]
    assert sorted(r["seed"] for r in runs) == [0, 1]
    assert all(r["status"] == "ok" for r in runs)
    complete = [after[n][2] for n in sorted(after) if after[n][0] == "COMPLETE"]
    for run in runs:
        assert run["tuning"]["trials"] == TRIALS
        assert run["tuning"]["values"] == pytest.approx(complete)
