"""Gradient-norm clipping and its clip rate, checked against torch.nn.utils.clip_grad_norm_'s
definition (the update of plain SGD with lr 1 has the norm of the clipped gradient)."""

import functools
from pathlib import Path

import pytest
import torch

import loopzoo
from loopzoo.engine.data import training_loader
from loopzoo.engine.evaluation import SplitScorer
from loopzoo.engine.lightning_setup import fit_quietly
from loopzoo.engine.module import SequenceModule
from loopzoo.engine.schedules import TeacherForcingPlan
from loopzoo.engine.training import train_and_evaluate


@pytest.mark.parametrize(("clip", "rate"), [("0.000001", 1.0), ("null", 0.0)])
def test_clip_rate_counts_the_steps_whose_norm_exceeded_the_limit(tiny_config,
                                                                  tmp_path: Path, clip, rate):
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
