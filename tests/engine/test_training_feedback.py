"""Output feedback under the harness: teacher forcing, free running and scheduled sampling
(Bengio et al. 2015; schedules in loopzoo.engine.schedules), always also scored free running."""

from pathlib import Path

import pytest

from loopzoo.engine.schedules import inverse_sigmoid
from loopzoo.engine.training import train_and_evaluate
from loopzoo.harness.config import compose_job, composer
from loopzoo.topologies.output_feedback import OutputFeedback

TINY = [
    "model=output-feedback", "task.options.length=12", "+task.options.train_size=128",
    "+task.options.val_size=32", "+task.options.test_size=32", "task.batch_size=32",
    "task.budget=400", "trainer.max_steps=20", "protocol.val_every=10", "protocol.trials=null",
    "trainer.enable_progress_bar=false",
]


def tiny_config(*overrides: str):
    """The shipped config, resolved as a run sees it, shrunk to a run of well under a second."""
    with composer():
        return compose_job([*TINY, *overrides])


@pytest.fixture
def training_forcing(monkeypatch):
    """The teacher_forcing value of every training forward pass, in order."""
    seen = []
    original = OutputFeedback.forward

    def spy(self, x, state=None, **kwargs):
        if self.training:
            seen.append(kwargs.get("teacher_forcing"))
        return original(self, x, state, **kwargs)

    monkeypatch.setattr(OutputFeedback, "forward", spy)
    return seen


def test_scheduled_sampling_follows_the_inverse_sigmoid_per_step(tmp_path: Path,
                                                                 training_forcing):
    body = train_and_evaluate(tiny_config("model.feedback.k=3.0"), tmp_path)
    assert body["status"] == "ok", body["reason"]
    assert training_forcing == pytest.approx([inverse_sigmoid(i, k=3.0) for i in range(20)])
    assert body["feedback"] == {"mode": "scheduled", "schedule": "inverse_sigmoid", "k": 3.0,
                                "fed_back": "value", "selected_on": "free_running"}


@pytest.mark.parametrize(("mode", "value"), [("teacher_forcing", 1.0), ("free_running", 0.0)])
def test_fixed_modes_feed_a_constant(tmp_path: Path, training_forcing, mode, value):
    body = train_and_evaluate(
        tiny_config(f"model.feedback.mode={mode}", "~model.feedback.schedule",
                    "~model.feedback.k"),
        tmp_path,
    )
    assert body["status"] == "ok", body["reason"]
    assert training_forcing == [value] * 20
    assert body["feedback"]["mode"] == mode


def test_val_and_test_are_also_scored_free_running(tmp_path: Path):
    body = train_and_evaluate(tiny_config(), tmp_path)
    metrics = body["metrics"]
    assert set(metrics) == {"val", "val_free_running", "test", "test_free_running"}
    # Selection was on free running: the best validation value is the free-running one.
    assert min(body["curves"]["val"]) == pytest.approx(metrics["val_free_running"]["mse"])


def test_selection_can_use_the_teacher_forced_score(tmp_path: Path):
    body = train_and_evaluate(tiny_config("protocol.feedback_select=teacher_forced"), tmp_path)
    assert body["feedback"]["selected_on"] == "teacher_forced"
    assert min(body["curves"]["val"]) == pytest.approx(body["metrics"]["val"]["mse"])


def test_class_outputs_feed_back_a_distribution(tmp_path: Path, training_forcing):
    body = train_and_evaluate(tiny_config("task=copy", "task.options.length=4"), tmp_path)
    assert body["status"] == "ok", body["reason"]
    assert body["feedback"]["fed_back"] == "distribution"
    assert "cross_entropy" in body["metrics"]["test_free_running"]


def test_truncated_bptt_steps_feedback_topologies_chunk_by_chunk(tmp_path: Path,
                                                                  training_forcing):
    body = train_and_evaluate(
        tiny_config("protocol.tbptt_chunk=5", "model.feedback.mode=teacher_forcing",
                    "~model.feedback.schedule", "~model.feedback.k"),
        tmp_path,
    )
    assert body["status"] == "ok", body["reason"]
    # Length 12 in chunks of 5: one forward pass and one optimiser step per chunk.
    assert len(training_forcing) == 20
    assert body["cost"]["steps"] == 20
