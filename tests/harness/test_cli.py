"""The ``loopzoo`` command line: listing, one run, bad input with named errors and exit code 2."""

import json
import subprocess
import sys

import pytest
from support.tiny import tiny

import loopzoo
from loopzoo import cli
from loopzoo.harness import records
from loopzoo.harness.config import group_options
from loopzoo.harness.shipped import shipped_options

TINY = tiny("trainer.max_steps=3", "trainer.enable_progress_bar=false")


def test_train_off_a_terminal_prints_a_few_progress_lines_not_one_per_epoch(tmp_path, capsys):
    # 16 training sequences in batches of 8: 200 steps are 100 epochs and 20 validations.
    progress = [o for o in TINY if not o.startswith("trainer.enable_progress_bar")]
    assert cli.main(["train", "model=gru", f"out={tmp_path}", *progress, "trainer.max_steps=200",
                     "protocol.val_every=10", "protocol.patience=null"]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert 3 <= len(lines) <= 6, lines
    assert lines[0] == "gru adding seed=0: training, at most 200 steps"
    end = next(line for line in lines if line.startswith("gru adding seed=0: step_cap"))
    assert "step 200/200, loss " in end and ", val mse " in end and "(best " in end
    assert not any("Epoch" in line or "it/s" in line for line in lines)  # no Lightning bar


def test_list_names_every_topology_task_suite_and_launcher_with_a_line_each(capsys):
    assert cli.main(["list"]) == 0
    lines = capsys.readouterr().out.splitlines()
    names = {line.split()[0]: line for line in lines if line.startswith("  ")}
    for name in [*loopzoo.available(), *loopzoo.tasks.available(), *group_options("suite"),
                 *shipped_options("hydra/launcher")]:
        assert name in names, name
        assert len(names[name].split()) > 2, f"{name} has no description"


def test_list_is_fast_because_it_imports_no_harness():
    code = ("import sys; from loopzoo import cli; cli.main(['list']); "
            "print(sorted(m for m in ('lightning', 'hydra') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip().splitlines()[-1] == "[]"


def test_train_writes_one_record_then_skips_it(tmp_path, capsys):
    assert cli.main(["train", "model=gru", "seed=2", f"out={tmp_path}", *TINY]) == 0
    out = capsys.readouterr().out
    assert ": ok in " in out
    model_records = [r for r in records.load_records(tmp_path) if r["kind"] == "model"]
    assert len(model_records) == 1
    record = model_records[0]
    assert (record["model"], record["task"], record["seed"], record["status"]) == (
        "gru", "adding", 2, "ok")
    assert record["config"]["trainer"]["max_steps"] == 3
    assert record["versions"]["torch_threads"] >= 1
    # The task's classical baselines for this seed are recorded next to it.
    baselines = [r for r in records.load_records(tmp_path) if r["kind"] == "baseline"]
    assert baselines and all(r["seed"] == 2 and r["task"] == "adding" for r in baselines)
    assert json.loads((tmp_path / records.MANIFEST).read_text())["suite"] is None
    assert cli.main(["train", "model=gru", "seed=2", f"out={tmp_path}", *TINY]) == 0
    assert "skipped" in capsys.readouterr().out
    assert len(list((tmp_path / "records").glob("*.json"))) == 1 + len(baselines)


@pytest.mark.parametrize(("argv", "expected"), [
    (["train", "model=stackd"], "unknown model 'stackd'; available: deep-transition, gru"),
    (["train", "task=adding2"], "unknown task 'adding2'"),
    (["sweep", "suite=quik"], "unknown suite 'quik'; available: forecasting, long-lag, quick. "
                              "Did you mean 'quick'?"),
    (["train", "trainer.max_step=3"], "unknown config key 'trainer.max_step'. Nearest valid keys: "
                                      "trainer.max_steps"),
    (["train", "optim.learning_rate=3"], "unknown config key 'optim.learning_rate'"),
    (["train", "task=text"], "task.options.path is required"),
    (["train", "model=gru,lstm"], "use 'loopzoo sweep' for model=gru,lstm"),
    (["train", "seed=-1"], "seed = -1 is invalid; accepted: an integer >= 0"),
    (["train", "~seed"], "seed is required"),
    (["train", "modl=gru"], "unknown config key 'modl'. Nearest valid keys: model"),
    (["sweep", "suite=quick,long-lag"], "suite takes one name per sweep"),
    (["sweep", "model=gru,nope"], "job model=nope"),
    (["train", "hydra/launcher=slurmm"], "unknown hydra/launcher 'slurmm'"),
    (["frobnicate"], "unknown command 'frobnicate'; available: list, options, train, sweep"),
])
def test_bad_input_is_named_with_what_is_accepted(argv, expected, capsys, tmp_path):
    assert cli.main([*argv, f"out={tmp_path}"] if argv[0] != "frobnicate" else argv) == 2
    err = capsys.readouterr().err
    assert expected in err
    assert "Traceback" not in err


def test_an_impossible_budget_is_refused_before_training(tmp_path, capsys):
    # The readout alone of a 2-input, 1-output model needs more than 5 parameters.
    assert cli.main(["train", "model=gru", f"out={tmp_path}", *TINY, "task.budget=5"]) == 2
    err = capsys.readouterr().err
    assert "task.budget = 5 cannot be met by model 'gru'" in err and "Traceback" not in err
    assert not [r for r in records.load_records(tmp_path) if r["kind"] == "model"]


def test_an_out_dir_of_another_suite_is_refused(tmp_path, capsys):
    records.claim_out_dir(tmp_path, "quick")
    assert cli.main(["train", f"out={tmp_path}", *TINY]) == 2
    assert "holds runs with suite 'quick'" in capsys.readouterr().err


def test_console_script_exits_2_without_traceback(tmp_path):
    run = subprocess.run([sys.executable, "-m", "loopzoo.cli", "train", "model=nope",
                          f"out={tmp_path}"], capture_output=True, text=True)
    assert run.returncode == 2
    assert run.stderr.startswith("loopzoo: error: unknown model 'nope'")
    assert "Traceback" not in run.stderr


def test_report_and_export_are_delegated(monkeypatch, capsys):
    calls = []

    class Fake:
        @staticmethod
        def main(argv):
            calls.append(argv)
            return 0

    monkeypatch.setattr(cli, "import_module", lambda name: Fake)
    assert cli.main(["report", "DIR"]) == 0
    assert cli.main(["export", "a", "b"]) == 0
    assert calls == [["DIR"], ["a", "b"]]

    def missing(name):
        raise ImportError(f"No module named {name!r}")

    monkeypatch.setattr(cli, "import_module", missing)
    assert cli.main(["report", "DIR"]) == 2
    assert "the report is not available in this installation" in capsys.readouterr().err


def test_help_lists_the_commands(capsys):
    assert cli.main(["--help"]) == 0
    out = capsys.readouterr().out
    for command in cli.SUBCOMMANDS:
        assert command in out


def test_an_interrupt_says_how_to_finish(monkeypatch, capsys):
    def interrupted(argv):
        raise KeyboardInterrupt

    monkeypatch.setitem(cli.SUBCOMMANDS, "sweep", interrupted)
    assert cli.main(["sweep", "suite=quick"]) == 130
    assert "run the same command again to finish" in capsys.readouterr().err
