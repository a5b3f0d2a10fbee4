"""The running jobs of a sweep: progress files, what the sweep's display makes of them, and
files of dead, stale or other sweeps' jobs left out."""

import io
import json
import os
import socket
import subprocess
import sys
import time
from dataclasses import asdict

import pytest
from omegaconf import OmegaConf

from loopzoo.engine.progress import Snapshot
from loopzoo.harness import running, state

TOKEN = "this-sweep"


def job(model="gru", seed=0):
    return OmegaConf.create({"model": {"name": model}, "task": {"name": "adding"}, "seed": seed})


def snapshot(step=120, val=0.25):
    return Snapshot(step=step, max_steps=600, loss=0.5, val=val, best=0.2, metric="mse",
                    seconds=41.0)


@pytest.fixture
def this_sweep(monkeypatch):
    monkeypatch.setenv(state.SWEEP_TOKEN, TOKEN)


def test_a_job_keeps_its_latest_progress_in_one_file_removed_when_it_ends(tmp_path, this_sweep):
    with running.job_progress(tmp_path, "adding-gru-s0-abc", job()) as views:
        view = views((3, 12))
        view.start(snapshot(step=0, val=None))
        path = tmp_path / ".state" / "progress" / "adding-gru-s0-abc.json"
        assert json.loads(path.read_text())["phase"] == "trial #3 of 12"
        view.update(snapshot(step=50), validated=True)  # within WRITE_EVERY: not written
        assert json.loads(path.read_text())["snapshot"]["step"] == 0
        view.finish(snapshot(step=60), "early_stop")
        entry = json.loads(path.read_text())
        assert entry["stopped"] == "early_stop" and entry["snapshot"]["step"] == 60
        assert not list(path.parent.glob(".*.tmp"))  # written atomically
        views(None).start(snapshot(step=0))
        assert json.loads(path.read_text())["phase"] == "final run"
    assert not path.exists()
    with pytest.raises(RuntimeError), running.job_progress(tmp_path, "r", job()) as views:
        views(None).start(snapshot())
        raise RuntimeError("the run failed")
    assert not list(path.parent.glob("*.json"))


def test_the_display_lists_each_running_job_with_its_phase_step_loss_and_validation(
        tmp_path, this_sweep):
    with running.job_progress(tmp_path, "a", job("gru")) as gru, \
            running.job_progress(tmp_path, "b", job("lstm", seed=1)) as lstm:
        gru((3, 12)).start(snapshot())
        lstm(None).finish(snapshot(step=600), "step_cap")
        entries = running.running_jobs(tmp_path, TOKEN)
        assert [running.summary_line(e) for e in entries] == [
            "gru adding seed=0 trial #3 of 12: step 120/600, loss 0.5, val mse 0.25 "
            "(best 0.2), 41 s",
            "lstm adding seed=1 final run step_cap: step 600/600, loss 0.5, val mse 0.25 "
            "(best 0.2), 41 s",
        ]


def test_files_of_dead_processes_old_files_and_other_sweeps_are_ignored(tmp_path, this_sweep):
    folder = tmp_path / ".state" / "progress"
    folder.mkdir(parents=True)
    dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"],
                          capture_output=True, text=True, check=True)
    now = time.time()
    base = {"model": "gru", "task": "adding", "seed": 0, "phase": "final run", "stopped": None,
            "snapshot": asdict(snapshot()), "host": socket.gethostname(), "token": TOKEN}
    entries = {
        "alive": {"pid": os.getpid(), "updated": now},
        "dead-pid": {"pid": int(dead.stdout), "updated": now},
        "stale": {"pid": os.getpid(), "updated": now - running.STALE_AFTER - 1},
        "killed-sweep": {"pid": os.getpid(), "updated": now, "token": "earlier"},
        # On another node its pid cannot be checked here; its updates say it is alive.
        "other-node": {"pid": int(dead.stdout), "updated": now, "host": "node-17"},
    }
    for name, fields in entries.items():
        (folder / f"{name}.json").write_text(json.dumps({**base, "run_id": name, **fields}))
    (folder / "half.json").write_text('{"model": "gr')  # never left by an atomic write
    found = [e["run_id"] for e in running.running_jobs(tmp_path, TOKEN, now=now)]
    assert found == ["alive", "other-node"]
    running.clear(tmp_path)
    assert not list(folder.iterdir())


def test_off_a_terminal_the_display_prints_a_summary_every_few_seconds(tmp_path, this_sweep,
                                                                       monkeypatch):
    monkeypatch.setattr(running, "SHOW_EVERY", 0.02)
    state.write_plan(tmp_path, [{}, {}, {}])
    stream = io.StringIO()
    with running.job_progress(tmp_path, "a", job()) as views:
        views(None).start(snapshot())
        with running.RunningDisplay(tmp_path, TOKEN, 3, stream=stream):
            time.sleep(0.2)
    lines = stream.getvalue().splitlines()
    assert lines[:2] == ["running: 1 of 3 jobs, 0 finished",
                         "  gru adding seed=0 final run: step 120/600, loss 0.5, val mse 0.25 "
                         "(best 0.2), 41 s"]
    # Nothing running, nothing printed.
    quiet = io.StringIO()
    with running.RunningDisplay(tmp_path, TOKEN, 3, stream=quiet):
        time.sleep(0.1)
    assert quiet.getvalue() == ""


def test_on_a_terminal_the_display_is_one_line_redrawn_in_place(tmp_path, this_sweep,
                                                                monkeypatch):
    class Terminal(io.StringIO):
        def isatty(self):
            return True

    monkeypatch.setattr(running, "REDRAW_EVERY", 0.02)
    state.write_plan(tmp_path, [{}, {}])
    screen = Terminal()
    with running.job_progress(tmp_path, "a", job()) as views:
        views((0, 8)).start(snapshot())
        with running.RunningDisplay(tmp_path, TOKEN, 2, stream=screen):
            time.sleep(0.2)
    text = screen.getvalue()
    assert "\n" not in text and "sweep 0/2 done" in text
    assert "gru/adding/s0 trial #0 of 8 120/600 val 0.25" in text
