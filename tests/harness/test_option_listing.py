"""Every task option is declared in its shipped config, so none needs `+`, and `loopzoo options`
lists each task's and topology's options with the value, what is accepted and what it means."""

import dataclasses
import subprocess
import sys

import pytest
import yaml

import loopzoo
from loopzoo import cli
from loopzoo.harness.option_help import model_options, task_options
from loopzoo.harness.shipped import shipped_options
from loopzoo.tasks import TASKS
from loopzoo.topologies import TOPOLOGIES


def shipped(group, name):
    from importlib import resources

    text = resources.files("loopzoo.conf").joinpath(group, f"{name}.yaml").read_text("utf-8")
    return yaml.safe_load(text)


@pytest.mark.parametrize("name", shipped_options("task"))
def test_every_task_option_is_declared_in_its_config(name):
    config = shipped("task", name)
    fields = [f.name for f in dataclasses.fields(TASKS.get(config["name"]).Options)]
    assert sorted(config["options"]) == sorted(fields)


@pytest.mark.parametrize("name", loopzoo.tasks.available())
def test_task_listing_has_every_option_with_accepted_values_and_meaning(name):
    rows = task_options(name)
    fields = dataclasses.fields(TASKS.get(name).Options)
    assert [row.name for row in rows] == [f.name for f in fields]
    config = shipped("task", name)["options"]
    for row in rows:
        assert row.meaning, f"{name}.{row.name} has no meaning line"
        assert row.accepted != "see the task's documentation", f"{name}.{row.name}"
        expected = "required" if config[row.name] == "???" else config[row.name]
        assert row.value == expected


@pytest.mark.parametrize("name", loopzoo.available())
def test_topology_listing_comes_from_its_option_specs(name):
    specs = TOPOLOGIES.get(name).option_specs
    rows = model_options(name)
    assert [row.name for row in rows] == list(specs)
    for row in rows:
        spec = specs[row.name]
        assert row.meaning == spec.help and row.default == spec.default
        with pytest.raises(ValueError) as refused:
            spec.check(row.name, object())
        assert row.accepted in str(refused.value)  # the check's own words


def test_accepted_values_are_the_checks_words():
    rows = {row.name: row for row in task_options("csv")}
    assert rows["window"].accepted == "an integer in [1, 1000000]"
    with pytest.raises(ValueError, match="window = 0 is invalid"):
        loopzoo.tasks.create("csv", path="unused.csv", target="kw", window=0)
    assert rows["differences"].accepted == "true or false"
    assert rows["path"].value == "required" and rows["features"].value == []
    digits = {row.name: row for row in task_options("digits")}
    assert digits["read"].accepted == "one of 'rows', 'pixels'"


def test_the_options_command(capsys):
    assert cli.main(["options", "task=csv", "model=residual-skip"]) == 0
    out = capsys.readouterr().out
    assert "task csv: set with task.options.NAME=VALUE" in out
    assert "  window = 20\n      accepted: an integer in [1, 1000000]\n" in out
    assert "  scale = 1.0\n      accepted: a finite number in (0.0, 1.0]\n" in out
    assert cli.main(["options", "task=adding"]) == 0
    assert "  length = 50   (code default: 100)" in capsys.readouterr().out
    for argv, message in ((["options"], "options needs task=NAME or model=NAME"),
                          (["options", "task=csvv"], "unknown task 'csvv'"),
                          (["options", "topology=gru"], "options takes task=NAME or model=NAME")):
        assert cli.main(argv) == 2
        assert message in capsys.readouterr().err


def test_the_options_command_imports_no_hydra():
    code = ("import sys; from loopzoo import cli; cli.main(['options', 'task=csv']); "
            "print(sorted(m for m in ('lightning', 'hydra') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip().splitlines()[-1] == "[]"


def test_declared_options_need_no_plus_and_a_plus_still_works(tmp_path):
    from loopzoo.harness.config import compose_job, composer
    from loopzoo.harness.errors import ConfigError

    data = tmp_path / "kw.csv"
    data.write_text("t,kw\n" + "".join(f"{t},{t % 5}\n" for t in range(60)), encoding="utf-8")
    base = ["task=csv", f"task.options.path={data}", "task.options.target=kw", f"out={tmp_path}"]
    with composer():
        plain = compose_job([*base, "task.options.window=4", "task.options.time=t"])
        plus = compose_job([*base, "+task.options.window=4", "+task.options.time=t"])
        assert plain == plus
        assert plain.task.options.window == 4 and plain.task.options.time == "t"
        with pytest.raises(ConfigError, match="unknown config key 'task.options.windw'. Nearest "
                           "valid keys: task.options.window"):
            compose_job([*base, "task.options.windw=4"])
