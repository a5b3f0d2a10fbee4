"""Same config and seed -> identical record numbers on the same machine; another seed differs."""

from pathlib import Path

from hydra import compose, initialize_config_module

from loopzoo.engine.training import train_and_evaluate

TINY = [
    "task.options.length=12", "task.options.train_size=128", "task.options.val_size=32",
    "task.options.test_size=32", "task.batch_size=32", "task.budget=400",
    "trainer.max_steps=30", "protocol.val_every=10", "protocol.trials=null",
    "trainer.enable_progress_bar=false",
]


def tiny_config(*overrides: str):
    """The shipped config composed with Hydra and shrunk to a run of well under a second."""
    with initialize_config_module(config_module="loopzoo.conf", version_base="1.3"):
        return compose(config_name="config", overrides=[*TINY, *overrides])


def _numbers(body: dict) -> dict:
    return {key: body[key] for key in ("status", "metrics", "lr", "curves", "gradient_reach",
                                       "params", "sizes")}


def test_same_config_and_seed_give_identical_numbers(tmp_path: Path):
    cfg = tiny_config("model=stacked", "seed=4")
    first = train_and_evaluate(cfg, tmp_path / "a")
    second = train_and_evaluate(cfg, tmp_path / "b")
    assert first["status"] == "ok"
    assert _numbers(first) == _numbers(second)
    assert first["cost"]["clip_rate"] == second["cost"]["clip_rate"]


def test_a_run_does_not_depend_on_what_ran_before_it_in_the_process(tmp_path: Path):
    cfg = tiny_config("model=hidden-feedback", "seed=1")
    alone = train_and_evaluate(cfg, tmp_path / "a")
    train_and_evaluate(tiny_config("model=gru", "task=copy", "task.options.length=4"),
                       tmp_path / "other")
    after_another = train_and_evaluate(cfg, tmp_path / "b")
    assert _numbers(alone) == _numbers(after_another)


def test_another_seed_gives_other_numbers(tmp_path: Path):
    one = train_and_evaluate(tiny_config("seed=1"), tmp_path / "a")
    two = train_and_evaluate(tiny_config("seed=2"), tmp_path / "b")
    assert one["metrics"]["test"] != two["metrics"]["test"]
