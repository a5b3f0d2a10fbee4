"""Tuned sweeps end to end on tiny jobs: one study per (task, model) shared by its seeds, the
chosen values trained per seed, and a reproduce command that repeats a run exactly."""

import shlex
import sqlite3

import pytest
from support.tiny import tiny

from loopzoo.cli import main
from loopzoo.harness import records
from loopzoo.harness.sweep import run_sweep

TINY = tiny("task.options.train_size=32", "task.options.val_size=16",
            "task.options.test_size=16", "trainer.max_steps=6", "protocol.val_every=2",
            "protocol.trials=3", "hydra/launcher=basic")


def model_records(out):
    return sorted((r for r in records.load_records(out) if r["kind"] == "model"),
                  key=lambda r: (r["model"], r["seed"]))


def finished_trials(out):
    with sqlite3.connect(out / "studies.sqlite3") as db:
        rows = db.execute(
            "SELECT s.study_name, t.state FROM trials t JOIN studies s USING (study_id)").fetchall()
    return sorted(rows)


def test_the_seeds_of_a_pair_share_one_study_and_train_its_choice(tmp_path, capsys):
    assert run_sweep(["model=gru,hidden-feedback", "seed=0,1", f"out={tmp_path}", *TINY]) == 0
    out = capsys.readouterr().out
    assert out.count("  trial ") == 6  # 3 trials per topology, not per seed
    runs = model_records(tmp_path)
    assert [(r["model"], r["seed"], r["status"]) for r in runs] == [
        ("gru", 0, "ok"), ("gru", 1, "ok"), ("hidden-feedback", 0, "ok"),
        ("hidden-feedback", 1, "ok")]
    for first, second in (runs[:2], runs[2:]):
        assert first["tuning"] == second["tuning"]
        tuning = first["tuning"]
        assert tuning["trials"] == 3 and tuning["completed"] + tuning["pruned"] == 3
        # Pruned trials count among the budget curve's draws when they reported a value.
        assert tuning["completed"] <= len(tuning["values"]) <= 3
        assert tuning["study"].startswith(f"adding-{first['model']}-")
        # What was trained is the chosen configuration, recorded in the config itself.
        assert first["config"]["optim"]["lr"] == tuning["chosen"]["lr"]
        assert first["config"]["optim"]["weight_decay"] == tuning["chosen"]["weight_decay"]
        assert first["convergence"]["stopped"] in ("early_stop", "step_cap")
        assert first["convergence"]["max_steps"] == 6
    assert set(runs[0]["tuning"]["space"]) == {"lr", "weight_decay", "num_layers", "dropout"}
    assert set(runs[2]["tuning"]["space"]) == {"lr", "weight_decay"}
    states = finished_trials(tmp_path)
    assert len(states) == 6 and {s for _, s in states} <= {"COMPLETE", "PRUNED"}

    # A rerun trains nothing and runs no trial.
    assert run_sweep(["model=gru,hidden-feedback", "seed=0,1", f"out={tmp_path}", *TINY]) == 0
    assert "  trial " not in capsys.readouterr().out
    assert finished_trials(tmp_path) == states


def test_the_reproduce_command_repeats_the_run(tmp_path, capsys):
    assert run_sweep(["model=gru", "seed=1", f"out={tmp_path / 'sweep'}", *TINY]) == 0
    (run,) = model_records(tmp_path / "sweep")
    words = shlex.split(run["reproduce"])
    assert words[:2] == ["loopzoo", "train"] and "protocol.trials=null" in words
    assert words[-1] == f"out=reproduce/{run['run_id']}"
    assert main([*words[1:-1], f"out={tmp_path / 'again'}"]) == 0
    (again,) = model_records(tmp_path / "again")
    assert again["tuning"] is None
    assert again["metrics"] == run["metrics"]
    assert again["config"]["optim"] == run["config"]["optim"]
    assert again["config"]["model"]["options"] == run["config"]["model"]["options"]


def test_a_changed_space_into_the_same_out_is_refused_before_training(tmp_path, capsys):
    assert run_sweep(["model=gru", f"out={tmp_path}", *TINY]) == 0
    before = finished_trials(tmp_path)
    capsys.readouterr()
    assert main(["sweep", "model=gru", "seed=5", f"out={tmp_path}", *TINY,
                 "protocol.space.lr.high=0.1"]) == 2
    err = capsys.readouterr().err
    assert "was tuned over another search space (differs in lr" in err
    assert "choose another out directory" in err
    assert finished_trials(tmp_path) == before
    assert [r["seed"] for r in model_records(tmp_path)] == [0]


@pytest.mark.parametrize(("override", "message"), [
    ("protocol.trials=0", "protocol.trials = 0 is invalid; accepted: an integer >= 1"),
    ("protocol.storage=sqlite:////no/such/folder/s.db", "protocol.storage = "),
    ("+model.tune.depth={low:1,high:2}", "model.tune.depth: unknown tunable name"),
])
def test_bad_tuning_input_exits_2_before_training(tmp_path, capsys, override, message):
    assert main(["sweep", "model=gru", f"out={tmp_path}", *TINY, override]) == 2
    assert message in capsys.readouterr().err
    assert not (tmp_path / "records").exists() or not any((tmp_path / "records").iterdir())
    assert main(["train", "model=gru", f"out={tmp_path}", *TINY[:-1], override]) == 2
