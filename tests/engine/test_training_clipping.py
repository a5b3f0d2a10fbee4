"""Gradient-norm clipping and its clip rate, checked against torch.nn.utils.clip_grad_norm_'s
definition (the update of plain SGD with lr 1 has the norm of the clipped gradient)."""

import functools
from pathlib import Path

import pytest
import torch
from hydra import compose, initialize_config_module

import loopzoo
from loopzoo.engine.data import training_loader
from loopzoo.engine.evaluation import SplitScorer
from loopzoo.engine.lightning_setup import fit_quietly
from loopzoo.engine.module import SequenceModule
from loopzoo.engine.schedules import TeacherForcingPlan
from loopzoo.engine.training import train_and_evaluate

TINY = [
    "task.options.length=12", "task.options.train_size=128", "task.options.val_size=32",
    "task.options.test_size=32", "task.batch_size=32", "task.budget=400",
    "trainer.max_steps=20", "protocol.val_every=10", "protocol.trials=null",
    "trainer.enable_progress_bar=false",
]


def tiny_config(*overrides: str):
    """The shipped config composed with Hydra and shrunk to a run of well under a second."""
    with initialize_config_module(config_module="loopzoo.conf", version_base="1.3"):
        return compose(config_name="config", overrides=[*TINY, *overrides])


@pytest.mark.parametrize(("clip", "rate"), [("0.000001", 1.0), ("null", 0.0)])
def test_clip_rate_counts_the_steps_whose_norm_exceeded_the_limit(tmp_path: Path, clip, rate):
    body = train_and_evaluate(tiny_config(f"optim.grad_clip_norm={clip}"), tmp_path)
    assert body["cost"]["clip_rate"] == rate


def test_a_clipped_sgd_step_moves_the_weights_by_the_clip_norm(tmp_path: Path):
    task = loopzoo.tasks.create("adding", seed=0, length=12, train_size=64, val_size=32,
                                test_size=32)
    torch.manual_seed(0)
    model = loopzoo.create("hidden-feedback", input_size=2, output_size=1, hidden_size=8)
    before = torch.cat([p.detach().flatten().clone() for p in model.parameters()])
    limit = 1e-3
    module = SequenceModule(
        model, task, SplitScorer(task, task.split("val"), feeds_back=False), batch_size=32,
        optimizer=functools.partial(torch.optim.SGD, lr=1.0), grad_clip_norm=limit,
        plan=TeacherForcingPlan("teacher_forcing"), tbptt_chunk=None, val_every=100,
        primary="mse", goal="min", select_group="plain",
    )
    module.phase(end_step=1, patience=None)
    fit_quietly(module, training_loader(task.split("train"), 32, seed=0),
                {"enable_progress_bar": False}, run_dir=tmp_path)
    after = torch.cat([p.detach().flatten() for p in model.parameters()])
    assert module.fit_state.step == 1 and module.fit_state.clipped_steps == 1
    # clip_grad_norm_ rescales the gradient to total norm `limit` (torch.nn.utils docs).
    assert float((after - before).norm()) == pytest.approx(limit, rel=1e-4)
