"""Bad configs are refused before training with the field, the value and what is accepted;
diverging and failing runs are recorded, never raised."""

from pathlib import Path

import pytest

from loopzoo.engine import module
from loopzoo.engine.training import train_and_evaluate
from loopzoo.harness.errors import ConfigError


@pytest.mark.parametrize(
    ("overrides", "message"),
    [
        (["task.budget=5"], r"task.budget = 5 cannot be met .*smallest"),
        (["model.name=elmann"], r"unknown model.name 'elmann'.*hidden-feedback"),
        (["task.name=adder"], r"unknown task.name 'adder'.*adding"),
        (["optim.lr=-1"], r"optim.lr = -1 is invalid; accepted: a finite number > 0"),
        (["optim.name=adagrad"], r"unknown optimizer 'adagrad'; available: adam"),
        (["+optim.momentum=0.9"], r"optim keys \['momentum'\].*optimizer 'adam'"),
        (["protocol.val_every=0"], r"protocol.val_every = 0 is invalid"),
        (["protocol.tbptt_chunk=-3"], r"protocol.tbptt_chunk = -3"),
        (["protocol.feedback_select=both"], r"protocol.feedback_select = 'both'"),
        (["+protocol.warmup=3"], r"protocol keys \['warmup'\] are unknown"),
        (["trainer.max_steps=0"], r"trainer.max_steps = 0"),
        (["+trainer.gradient_clip_val=1.0"], r"trainer.gradient_clip_val .*optim.grad_clip_norm"),
        (["+trainer.max_epoch=3"], r"trainer.max_epoch: unknown Lightning Trainer argument"),
        (["task.batch_size=1000"], r"task.batch_size = 1000 exceeds the 128 training sequences"),
        (["+model.feedback.mode=scheduled"], r"does not feed back its output"),
        (["task.options.length=0"], r"task 'adding'"),
    ],
)
def test_bad_configs_are_refused_before_training(tiny_config,
                                                 tmp_path: Path, monkeypatch, overrides, message):
    trained = []
    monkeypatch.setattr(module.SequenceModule, "training_step", lambda *a: trained.append(1))
    with pytest.raises(ConfigError, match=message):
        train_and_evaluate(tiny_config(*overrides), tmp_path)
    assert not trained


def test_a_non_finite_step_is_recorded_as_diverged_at_that_step(tiny_config,
                                                                tmp_path: Path, monkeypatch):
    calls = []
    original = module.masked_loss

    def poisoned(*args):
        calls.append(1)
        loss = original(*args)
        return loss * float("nan") if len(calls) == 7 else loss

    monkeypatch.setattr(module, "masked_loss", poisoned)
    body = train_and_evaluate(tiny_config(), tmp_path)
    assert body["status"] == "diverged"
    assert body["diverged_at_step"] == 7
    assert "step 7" in body["reason"]
    assert body["metrics"] is None
    assert body["cost"]["steps"] == 6


def test_an_error_inside_training_is_recorded_as_failed(tiny_config, tmp_path: Path, monkeypatch):
    def broken(*args, **kwargs):
        raise RuntimeError("simulated out-of-memory")

    monkeypatch.setattr(module.SequenceModule, "training_step", broken)
    body = train_and_evaluate(tiny_config(), tmp_path)
    assert body["status"] == "failed"
    assert body["reason"] == "RuntimeError: simulated out-of-memory"
