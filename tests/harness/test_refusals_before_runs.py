"""Configs that cannot run are refused before anything touches the file system: group choices
name shipped (or registered) configs only, never a path, and a refused config never claims the
output folder (issue 15, items 3 and 6)."""

import pytest
from support.tiny import tiny

from loopzoo import cli
from loopzoo.harness import records

TINY = tiny("trainer.enable_progress_bar=false")


@pytest.fixture()
def outside(tmp_path):
    """A suite file outside the package that a path-like choice would reach."""
    folder = tmp_path / "elsewhere" / "suite"
    folder.mkdir(parents=True)
    (folder / "evil.yaml").write_text("# @package _global_\nsuite: quick\ntrainer:\n"
                                      "  max_steps: 1\n", encoding="utf-8")
    return folder / "evil"


@pytest.mark.parametrize("command", ["train", "sweep"])
def test_group_choices_that_are_paths_are_refused(command, outside, tmp_path, capsys):
    out = tmp_path / "out"
    relative = "../" * 12 + str(outside).lstrip("/")
    for argv, message in (([f"suite={relative}"], "unknown suite '"),
                          (["task=../../x"], "unknown task '../../x'; available: adding"),
                          (["model=../gru"], "unknown model '../gru'"),
                          (["hydra/launcher=../../local"], "unknown hydra/launcher"),
                          (["task=adding,../x"] if command == "sweep" else ["optim=../adam"],
                           "unknown task '../x'" if command == "sweep" else "unknown optim")):
        assert cli.main([command, *argv, f"out={out}"]) == 2
        err = capsys.readouterr().err
        assert message in err and "Traceback" not in err
        assert len(err.strip().splitlines()) == 1, err
    assert not out.exists()


def test_a_refused_config_does_not_claim_the_folder(tmp_path, capsys):
    out = tmp_path / "out"
    assert cli.main(["train", "trainer.max_steps=abc", f"out={out}"]) == 2
    assert "trainer.max_steps = 'abc' is invalid" in capsys.readouterr().err
    assert not out.exists()
    for refused in (["model=lstm", "model.options.dropout=0.5"], ["task.options.length=-3"]):
        assert cli.main(["train", *refused, f"out={out}"]) == 2
    assert not out.exists()
    # Refused only once the data is built (a batch larger than the training set): still no
    # manifest, so the folder takes any suite afterwards.
    assert cli.main(["train", "model=gru", *TINY, "task.batch_size=17", f"out={out}"]) == 2
    assert "task.batch_size = 17 exceeds the 16 training sequences" in capsys.readouterr().err
    assert not (out / records.MANIFEST).exists()
    assert records.check_out_dir(out, "quick") is None
    assert cli.main(["train", "model=gru", *TINY, f"out={out}"]) == 0
    assert records.check_out_dir(out, None)["suite"] is None
