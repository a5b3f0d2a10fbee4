"""Output feedback under the harness: teacher forcing, free running and scheduled sampling
(Bengio et al. 2015; schedules in loopzoo.engine.schedules), always also scored free running.
Only targets a deployed model observes are fed back, each once it is observed (the
series-parallel model of Narendra & Parthasarathy 1990): forecasts on `sines` here."""

from pathlib import Path

import pytest

from loopzoo.engine.errors import ConfigError
from loopzoo.engine.schedules import inverse_sigmoid
from loopzoo.engine.training import train_and_evaluate
from loopzoo.harness.config import compose_job, composer
from loopzoo.topologies.output_feedback import OutputFeedback

TINY = [
    "model=output-feedback", "task.options.length=12", "task.options.train_size=128",
    "task.options.val_size=32", "task.options.test_size=32", "task.batch_size=32",
    "task.budget=400", "trainer.max_steps=20", "protocol.val_every=10", "protocol.trials=null",
    "trainer.enable_progress_bar=false",
]


SINES = ("task=sines", "task.options.horizons=[1,3]")


def tiny_config(*overrides: str, task: tuple[str, ...] = SINES):
    """The shipped config, resolved as a run sees it, shrunk to a run of well under a second."""
    with composer():
        return compose_job([*task, *TINY, *overrides])


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
                                "fed_back": "value", "selected_on": "free_running",
                                "observable": "after:1,3", "delay": [1, 3], "note": None}


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


def test_val_and_test_are_what_a_deployed_model_scores(tmp_path: Path):
    body = train_and_evaluate(tiny_config(), tmp_path)
    metrics = body["metrics"]
    assert set(metrics) == {"val", "val_free_running", "val_measured_feedback",
                            "test", "test_free_running", "test_measured_feedback"}
    # Selection was on free running: val / test are the free-running scores.
    assert metrics["test"] == metrics["test_free_running"]
    assert min(body["curves"]["val"]) == pytest.approx(metrics["val_free_running"]["mse"])


def test_selection_can_use_the_measured_feedback_score(tmp_path: Path):
    body = train_and_evaluate(tiny_config("protocol.feedback_select=measured_feedback"),
                              tmp_path)
    assert body["feedback"]["selected_on"] == "measured_feedback"
    assert body["metrics"]["test"] == body["metrics"]["test_measured_feedback"]
    assert min(body["curves"]["val"]) == pytest.approx(body["metrics"]["val"]["mse"])


@pytest.mark.parametrize("mode", ["teacher_forcing", "scheduled"])
def test_targets_never_observed_are_never_fed_back(tmp_path: Path, training_forcing, mode):
    """A label a deployed model never sees (the sum of the adding problem) is never
    teacher-forced, and no measured-feedback score is reported."""
    overrides = [f"model.feedback.mode={mode}",
                 "protocol.feedback_select=measured_feedback"]
    if mode == "teacher_forcing":
        overrides += ["~model.feedback.schedule", "~model.feedback.k"]
    body = train_and_evaluate(tiny_config(*overrides, task=("task=adding",)), tmp_path)
    assert body["status"] == "ok", body["reason"]
    assert training_forcing == [0.0] * 20
    assert body["feedback"]["mode"] == "free_running"
    assert body["feedback"]["observable"] == "never" and mode in body["feedback"]["note"]
    assert body["feedback"]["selected_on"] == "free_running"
    assert set(body["metrics"]) == {"val", "val_free_running", "test", "test_free_running"}


def test_a_delay_shorter_than_the_observation_delay_is_refused(tmp_path: Path):
    with pytest.raises(ConfigError, match=r"model.options.delay = 1 feeds back targets"):
        train_and_evaluate(tiny_config("+model.options.delay=1"), tmp_path)


def test_class_outputs_feed_back_a_distribution(tmp_path: Path, training_forcing):
    body = train_and_evaluate(tiny_config("task.options.length=4", task=("task=copy",)), tmp_path)
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
