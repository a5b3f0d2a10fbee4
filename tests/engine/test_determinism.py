"""Same config and seed -> identical record numbers on the same machine; another seed differs."""

from pathlib import Path

from loopzoo.engine.training import train_and_evaluate

TINY_EXTRA = ("trainer.max_steps=30",)



def _numbers(body: dict) -> dict:
    return {key: body[key] for key in ("status", "metrics", "lr", "curves", "gradient_reach",
                                       "params", "sizes")}


def test_same_config_and_seed_give_identical_numbers(tiny_config, tmp_path: Path):
    cfg = tiny_config("model=stacked", "seed=4")
    first = train_and_evaluate(cfg, tmp_path / "a")
    second = train_and_evaluate(cfg, tmp_path / "b")
    assert first["status"] == "ok"
    assert _numbers(first) == _numbers(second)
    assert first["cost"]["clip_rate"] == second["cost"]["clip_rate"]


def test_a_run_does_not_depend_on_what_ran_before_it_in_the_process(tiny_config, tmp_path: Path):
    cfg = tiny_config("model=hidden-feedback", "seed=1")
    alone = train_and_evaluate(cfg, tmp_path / "a")
    train_and_evaluate(tiny_config("model=gru", "task=copy", "task.options.length=4"),
                       tmp_path / "other")
    after_another = train_and_evaluate(cfg, tmp_path / "b")
    assert _numbers(alone) == _numbers(after_another)


def test_another_seed_gives_other_numbers(tiny_config, tmp_path: Path):
    one = train_and_evaluate(tiny_config("seed=1"), tmp_path / "a")
    two = train_and_evaluate(tiny_config("seed=2"), tmp_path / "b")
    assert one["metrics"]["test"] != two["metrics"]["test"]
