"""The reproduce command composes back to the recorded run's config, tuned values included."""

import shlex

import pytest
from omegaconf import OmegaConf

from loopzoo.harness.config import compose_job, composer
from loopzoo.harness.reproduce import reproduce_command, reproduce_overrides
from loopzoo.harness.search_space import apply_values


@pytest.mark.parametrize("overrides", [
    ["suite=quick", "model=residual-skip", "task=adding", "seed=2"],
    ["model=output-feedback", "task=sines", "seed=0", "+trainer.precision=64",
     "task.options.length=12"],
    ["model=stacked", "task=reber", "seed=1", "~optim.grad_clip_norm"],
])
def test_the_command_composes_back_to_the_trained_config(overrides):
    values = {"lr": 0.0123, "weight_decay": 3.3e-05}
    with composer():
        cfg = apply_values(compose_job([*overrides, "out=/somewhere/else"]), values)
        command = reproduce_command(cfg, out="reproduce/run-1")
        assert command.startswith("loopzoo train model=")
        again = compose_job(shlex.split(command)[2:])
    expected = OmegaConf.to_container(cfg, resolve=True)
    expected["protocol"]["trials"] = None
    expected["out"] = "reproduce/run-1"
    assert OmegaConf.to_container(again, resolve=True) == expected


def test_strings_that_the_grammar_would_misread_are_quoted(tmp_path):
    data = tmp_path / "my data, v2.csv"
    data.write_text("level\n" + "\n".join(str(i % 7) for i in range(200)) + "\n")
    with composer():
        cfg = compose_job(["task=csv", f"task.options.path='{data}'",
                           "task.options.target=level", "out=x"])
        overrides = reproduce_overrides(cfg, out="o")
        again = compose_job(overrides)
    assert again.task.options.path == str(data)
