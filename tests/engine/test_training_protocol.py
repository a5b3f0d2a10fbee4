"""The fair protocol end to end on tiny shipped configs: early stopping, the step cap, tuning
trials on validation only, test once."""

from pathlib import Path

import lightning as L
import pytest
import torch
from hydra import compose, initialize_config_module

import loopzoo
from loopzoo.diagnostics import gradient_reach
from loopzoo.engine import evaluation, module
from loopzoo.engine.training import train_and_evaluate, validation_run
from loopzoo.harness.baselines import baseline_records

TINY = [
    "task.options.length=12", "task.options.train_size=256", "task.options.val_size=64",
    "task.options.test_size=64", "task.batch_size=32", "task.budget=400",
    "trainer.max_steps=40", "protocol.val_every=10", "trainer.enable_progress_bar=false",
]


def tiny_config(*overrides: str):
    """The shipped config composed with Hydra and shrunk to a run of well under a second."""
    with initialize_config_module(config_module="loopzoo.conf", version_base="1.3"):
        return compose(config_name="config", overrides=[*TINY, *overrides])


def test_a_run_returns_every_body_field(tmp_path: Path):
    run_dir = tmp_path / "runs" / "some-run"
    body = train_and_evaluate(tiny_config("model=gru", "task=adding", "seed=3"), run_dir)
    assert body["status"] == "ok", body["reason"]
    assert (body["model"], body["task"], body["seed"]) == ("gru", "adding", 3)
    # The width is solved from the budget by the zoo's own solver.
    width = loopzoo.width_for_budget("gru", params=400, input_size=2, output_size=1, num_layers=1)
    assert body["sizes"] == {"input_size": 2, "output_size": 1, "hidden_size": width}
    def count(hidden: int) -> int:
        model = loopzoo.create("gru", input_size=2, output_size=1, hidden_size=hidden)
        return sum(p.numel() for p in model.parameters())

    assert body["params"] == count(width)
    assert abs(count(width) - 400) <= min(abs(count(width - 1) - 400), abs(count(width + 1) - 400))
    assert body["primary"] == {"name": "mse", "goal": "min"}
    assert set(body["metrics"]) == {"val", "test"}
    assert body["metrics"]["test"]["mse"] > 0.0
    cost = body["cost"]
    for key in ("wall_seconds", "train_seconds", "train_ms_per_step", "step_latency_ms",
                "batched_step_latency_ms", "peak_memory_mb"):
        assert cost[key] > 0.0, key
    assert cost["batched_batch_size"] == 32
    assert 0.0 <= cost["clip_rate"] <= 1.0
    assert body["curves"]["step"] == [10, 20, 30, 40][: len(body["curves"]["step"])]
    assert len(body["curves"]["val"]) == len(body["curves"]["train_loss"])
    assert body["started"] <= body["finished"]
    # The production artifact of the best weights, loadable by loopzoo.load.
    assert body["artifact"] == "runs/some-run/artifact"
    assert loopzoo.load(tmp_path / body["artifact"]).hidden_size == width
    reach = body["gradient_reach"]
    assert reach["lags"] == list(range(12))
    assert reach["init"][0] == reach["final"][0] == 1.0
    # The initial reach is that of the seeded, untrained model on the first validation inputs.
    L.seed_everything(3, verbose=False)
    untrained = loopzoo.create("gru", input_size=2, output_size=1, hidden_size=width)
    val = loopzoo.tasks.create("adding", seed=3, length=12, train_size=256, val_size=64,
                               test_size=64).split("val")
    assert reach["init_raw"] == pytest.approx(gradient_reach(untrained, val.x[:32], max_lag=11))


def test_a_run_trains_once_with_the_configured_rate_up_to_the_cap(tmp_path: Path):
    body = train_and_evaluate(
        tiny_config("optim.lr=0.005", "protocol.patience=null"), tmp_path)
    assert body["lr"] == {"chosen": 0.005}
    assert body["cost"]["steps"] == 40
    assert body["convergence"] == {"stopped": "step_cap", "best_step": body["convergence"][
        "best_step"], "steps": 40, "max_steps": 40}


def test_a_tuning_trial_scores_validation_only_and_can_be_pruned(tmp_path: Path, monkeypatch):
    scored = []
    original = evaluation.SplitScorer.score

    def spy(self, model):
        scored.append(self.split.x)
        return original(self, model)

    monkeypatch.setattr(evaluation.SplitScorer, "score", spy)
    cfg = tiny_config("protocol.patience=null", "seed=4")
    task = loopzoo.tasks.create("adding", seed=4, length=12, train_size=256, val_size=64,
                                test_size=64)
    pruned = validation_run(cfg, tmp_path, lambda step, value: step >= 20)
    assert (pruned["stopped"], pruned["value"], pruned["steps"]) == ("pruned", None, 20)
    reports = []
    done = validation_run(cfg, tmp_path, lambda step, value: reports.append(value) or False)
    assert (done["stopped"], done["steps"]) == ("step_cap", 40)
    assert done["value"] == min(reports) and len(reports) == 4
    assert len(scored) == 2 + 4
    assert all(torch.equal(x, task.split("val").x) for x in scored)


def test_early_stopping_after_patience_stale_validations(tmp_path: Path, monkeypatch):
    # A scorer that never improves after its first call: the run must stop after `patience`
    # further validations, whatever the data.
    monkeypatch.setattr(
        evaluation.SplitScorer, "score", lambda self, model: {"plain": {"mse": 1.0, "mae": 1.0}}
    )
    body = train_and_evaluate(
        tiny_config("protocol.trials=null", "protocol.patience=2", "trainer.max_steps=200"),
        tmp_path,
    )
    assert body["convergence"] == {"stopped": "early_stop", "best_step": 10, "steps": 30,
                                   "max_steps": 200}
    assert body["curves"]["step"] == [10, 20, 30]
    assert body["cost"]["steps"] == 30


def test_the_test_split_is_scored_once_for_the_chosen_setting(tmp_path: Path, monkeypatch):
    scored = []
    original = evaluation.SplitScorer.score

    def counting(self, model):
        scored.append(self.split)
        return original(self, model)

    monkeypatch.setattr(evaluation.SplitScorer, "score", counting)
    cfg = tiny_config()
    train_and_evaluate(cfg, tmp_path)
    test = loopzoo.tasks.create("adding", seed=0, length=12, train_size=256, val_size=64,
                                test_size=64).split("test")
    test_scorings = [s for s in scored if s.x.shape == test.x.shape and bool((s.x == test.x).all())]
    assert len(test_scorings) == 1


def test_best_validation_weights_are_kept(tmp_path: Path, monkeypatch):
    # Scores 3, 1, 2, 4: the weights at the second validation (step 20) are the best.
    values = iter([3.0, 1.0, 2.0, 4.0])
    snapshots = {}
    original = evaluation.SplitScorer.score

    def scripted(self, model):
        if len(snapshots) >= 4:  # the four validations during training, then val and test
            return original(self, model)
        value = next(values)
        snapshots[value] = {k: v.clone() for k, v in model.state_dict().items()}
        return {"plain": {"mse": value, "mae": value}}

    monkeypatch.setattr(evaluation.SplitScorer, "score", scripted)
    kept = {}
    original_load = module.torch.nn.Module.load_state_dict

    def spy(self, state_dict, *args, **kwargs):
        kept.update({k: v.clone() for k, v in state_dict.items()})
        return original_load(self, state_dict, *args, **kwargs)

    monkeypatch.setattr(module.torch.nn.Module, "load_state_dict", spy)
    body = train_and_evaluate(tiny_config("protocol.trials=null", "protocol.patience=null"),
                              tmp_path)
    assert body["convergence"]["best_step"] == 20
    assert all((kept[k] == snapshots[1.0][k]).all() for k in snapshots[1.0])
    assert any((kept[k] != snapshots[4.0][k]).any() for k in snapshots[4.0])


def test_classification_tasks_train_on_cross_entropy(tmp_path: Path):
    body = train_and_evaluate(
        tiny_config("task=copy", "task.options.length=5", "model=lstm"), tmp_path
    )
    assert body["status"] == "ok", body["reason"]
    assert body["primary"] == {"name": "cross_entropy", "goal": "min"}
    assert body["metrics"]["test"]["cross_entropy"] > 0.0


def test_baseline_records_follow_the_tasks_baselines():
    cfg = tiny_config("seed=2")
    task = loopzoo.tasks.create("adding", seed=2, length=12, train_size=256, val_size=64,
                                test_size=64)
    records = baseline_records(cfg)
    assert [r["model"] for r in records] == list(task.baselines())
    for record in records:
        assert record["kind"] == "baseline" and record["status"] == "ok"
        expected = task.baselines()[record["model"]].metrics
        assert record["metrics"]["test"] == pytest.approx(expected)
        assert record["cost"] == {"fit_seconds": None} and "curves" not in record
        assert record["seed"] == 2 and record["seed_dependent"] is True


def test_bounds_are_recorded_apart_from_baselines():
    # sines: the noise-free signal is a bound (its MSE is the noise variance), not a baseline
    cfg = tiny_config("task=sines", "task.options.length=12")
    by_name = {r["model"]: r for r in baseline_records(cfg)}
    assert by_name["optimal"]["kind"] == "bound" and by_name["persistence"]["kind"] == "baseline"
    assert by_name["optimal"]["details"]["noise_variance"] == pytest.approx(0.01)
