"""Every shipped config (each group option, each suite, each launcher) composed, shrunk and run.

The shrinking is driven by the task registry: whatever sizes a task's options offer are made tiny,
so a new task or topology file is exercised here without new test code.
"""

import dataclasses
import itertools
import math
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest
from omegaconf import OmegaConf

import loopzoo
from loopzoo.harness import records
from loopzoo.harness.app import run_one, threads_for_launcher
from loopzoo.harness.config import compose_job, composer, cores, group_options
from loopzoo.harness.sweep import plan_sweep
from loopzoo.tasks import TASKS

FAST = [
    "trainer.max_steps=4", "protocol.val_every=2", "protocol.patience=1",
    "protocol.trials=null", "optim.lr=0.01", "task.batch_size=8", "task.budget=900",
]
# Forecasting windows keep their size: a window must cover the seasonal baseline's period.
TINY_SIZES = {"train_size": 16, "val_size": 8, "test_size": 8, "length": 6, "lines": 60}
TEXT = "pump 3 pressure nominal\nvalve 7 closed after check\nfan 2 vibration high\n" * 40
# Columns the csv configs' required keys (???) are pointed at, in the demo file below.
CSV_COLUMNS = {"target": "level", "label": "state", "sequence": "unit"}


def demo_csv(path: Path) -> Path:
    """An invented tank-level log: 40 units x 10 readings, each unit labelled by its state."""
    rows = ["unit,step,level,state"]
    for unit in range(40):
        for step in range(10):
            rows.append(f"{unit},{step},{math.sin(unit + step / 3):.4f},{unit % 2}")
    path.write_text("\n".join(rows) + "\n", encoding="utf-8")
    return path


def shrink(option: str, tmp_path: Path) -> list[str]:
    """Overrides that make the task config ``option`` tiny and fill its required keys.

    Size options the registered task offers (train_size, length, window, ...) are set small; a
    required path gets a demo file; other required keys (csv columns) get the demo's columns.
    """
    with composer():
        task = compose_job([f"task={option}"], with_hydra=True).task
    shipped = OmegaConf.to_container(task.options, resolve=False)
    fields = {f.name for f in dataclasses.fields(TASKS.get(task.name).Options)}
    overrides = [f"{'' if key in shipped else '+'}task.options.{key}={value}"
                 for key, value in TINY_SIZES.items() if key in fields]
    for key, value in shipped.items():
        if value != "???":
            continue
        if key == "path":
            is_csv = task.name.startswith("csv")
            data = demo_csv(tmp_path / "tanks.csv") if is_csv else tmp_path / "log.txt"
            if not is_csv:
                data.write_text(TEXT, encoding="utf-8")
            overrides.append(f"task.options.path={data}")
        else:
            overrides.append(f"task.options.{key}={CSV_COLUMNS[key]}")
    return overrides


def run_tiny(overrides: list[str], out: Path) -> dict:
    with composer():
        cfg = compose_job([*overrides, f"out={out}"])
    outcome = run_one(cfg, threads=1)
    return records.read_record(records.record_path(out, outcome.run_id))


def test_every_registered_name_has_a_config_and_every_config_a_registered_name():
    assert group_options("model") == sorted(loopzoo.available())
    with composer():
        task_names = {compose_job([f"task={t}"], with_hydra=True).task.name
                      for t in group_options("task")}
    assert sorted(task_names) == sorted(loopzoo.tasks.available()) == group_options("task")


@pytest.mark.parametrize("model", group_options("model"))
def test_every_model_config_trains(model, tmp_path):
    record = run_tiny([f"model={model}", "task=adding", *FAST, *shrink("adding", tmp_path)],
                      tmp_path / "out")
    assert record["status"] == "ok", record["reason"]
    assert record["model"] == model
    # The config's options are the ones the topology is built with.
    assert record["config"]["model"]["name"] == model


@pytest.mark.parametrize("task", group_options("task"))
def test_every_task_config_trains(task, tmp_path):
    record = run_tiny(["model=hidden-feedback", f"task={task}", *FAST, *shrink(task, tmp_path)],
                      tmp_path / "out")
    assert record["status"] == "ok", record["reason"]
    assert record["config"]["task"]["name"] == record["task"]
    assert record["primary"]["name"] in record["metrics"]["test"]


def test_output_feedback_takes_its_output_kind_from_the_task(tmp_path):
    with composer():
        for task in ("adding", "copy"):
            cfg = compose_job(["model=output-feedback", f"task={task}"])
            expected = "classes" if TASKS.get(task).kind == "classification" else "real"
            assert cfg.model.options.output_kind == expected
    record = run_tiny(["model=output-feedback", "task=copy", *FAST, *shrink("copy", tmp_path)],
                      tmp_path / "out")
    assert record["status"] == "ok", record["reason"]
    assert {"val_free_running", "test_free_running"} <= set(record["metrics"])


def test_trainer_optim_and_protocol_options_compose():
    with composer():
        for trainer, optim, protocol in itertools.product(
            group_options("trainer"), group_options("optim"), group_options("protocol")
        ):
            cfg = compose_job([f"trainer={trainer}", f"optim={optim}", f"protocol={protocol}"])
            assert cfg.trainer.accelerator == "cpu"
            assert cfg.trainer.max_steps > 0 and cfg.optim.lr > 0
        ddp = compose_job(["trainer=ddp"]).trainer
        assert (ddp.strategy, ddp.devices, ddp.num_nodes) == ("ddp_spawn", 2, 1)


def test_launcher_presets_compose_and_set_threads():
    with composer():
        local = compose_job(["hydra/launcher=local"], with_hydra=True).hydra.launcher
        assert local._target_.endswith("JoblibLauncher")
        assert local.n_jobs == cores()
        assert threads_for_launcher(local) == 1  # cores / n_jobs with one job per core
        slurm = compose_job(["hydra/launcher=slurm"], with_hydra=True).hydra.launcher
        assert slurm._target_.endswith("SlurmLauncher")
        assert threads_for_launcher(slurm) == slurm.cpus_per_task
        local_slurm = compose_job(["hydra/launcher=slurm-local"], with_hydra=True).hydra.launcher
        assert local_slurm._target_.endswith("LocalLauncher")
        # Hydra's own folders go under the output directory, never into the working directory.
        hydra = compose_job(["out=/somewhere/else"], with_hydra=True).hydra
        assert hydra.run.dir.startswith("/somewhere/else/.hydra-runs/")
        assert hydra.sweep.dir.startswith("/somewhere/else/.hydra-runs/")
    assert threads_for_launcher({"n_jobs": 2}) == max(1, cores() // 2)
    assert threads_for_launcher({"n_jobs": -1}) == 1
    assert threads_for_launcher(None) == cores()


@pytest.mark.parametrize("suite", group_options("suite"))
def test_every_suite_expands_composes_and_trains(suite, tmp_path):
    plan = plan_sweep([f"suite={suite}", f"out={tmp_path / 'out'}"])
    with composer():
        params = compose_job([f"suite={suite}"], with_hydra=True).hydra.sweeper.params
    sizes = [len(str(value).split(",")) for value in params.values()]
    assert len(plan.jobs) == math.prod(sizes)
    assert len(set(plan.run_ids)) == len(plan.jobs)
    assert {job.suite for job in plan.jobs} == {suite}
    # The suite's first job, shrunk, trains (every task and model is trained on its own above).
    task = plan.jobs[0].task.name
    record = run_tiny([*plan.overrides[0], *FAST, *shrink(task, tmp_path)], tmp_path / "out")
    assert record["status"] == "ok", record["reason"]
    assert (record["suite"], record["task"]) == (suite, task)


def test_quick_suite_is_the_issue_s_comparison(tmp_path):
    # Issue 4: all seven topologies on four tasks, three seeds.
    plan = plan_sweep(["suite=quick", f"out={tmp_path}"])
    assert {job.model.name for job in plan.jobs} == set(loopzoo.available())
    assert len({job.task.name for job in plan.jobs}) == 4
    assert len({job.seed for job in plan.jobs}) == 3


def test_suite_per_task_settings_apply_and_the_command_line_wins(tmp_path):
    with composer():
        per_task = OmegaConf.to_container(
            compose_job(["suite=quick"], with_hydra=True).per_task)
        task, fragment = next(iter(per_task.items()))
        budget = fragment["task"]["budget"]
        cfg = compose_job(["suite=quick", f"task={task}"])
        assert cfg.task.budget == budget
        assert "per_task" not in cfg
        cfg = compose_job(["suite=quick", f"task={task}", "task.budget=777"])
        assert cfg.task.budget == 777


@pytest.mark.slow
def test_a_built_wheel_ships_every_config_file(tmp_path):
    # From an installed package the configs are found as loopzoo.conf: the wheel must hold them.
    repo = Path(__file__).resolve().parents[2]
    subprocess.run([sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation",
                    "-w", str(tmp_path), str(repo)], check=True, capture_output=True)
    (wheel,) = tmp_path.glob("loopzoo-*.whl")
    shipped = {name for name in zipfile.ZipFile(wheel).namelist() if name.endswith(".yaml")}
    expected = {f"loopzoo/conf/{p.relative_to(repo / 'conf').as_posix()}"
                for p in (repo / "conf").rglob("*.yaml")}
    assert expected and expected == shipped


@pytest.mark.slow
def test_the_ddp_trainer_config_trains_through_the_command_line(tmp_path):
    # trainer=ddp: ddp_spawn over two CPU processes (gloo), one run, one record.
    run = subprocess.run(
        [sys.executable, "-m", "loopzoo.cli", "train", "trainer=ddp", "model=gru", "task=adding",
         *FAST, *shrink("adding", tmp_path), "trainer.enable_progress_bar=false",
         f"out={tmp_path / 'out'}"], capture_output=True, text=True, timeout=900)
    assert run.returncode == 0, run.stderr[-3000:]
    (record,) = [r for r in records.load_records(tmp_path / "out") if r["kind"] == "model"]
    assert record["status"] == "ok", record["reason"]
    assert record["config"]["trainer"]["strategy"] == "ddp_spawn"
