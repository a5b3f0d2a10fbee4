"""Truncated BPTT: one chunk covering the sequence is full BPTT; shorter chunks carry the detached
state and take one optimiser step per chunk (the procedure of Williams & Peng 1990 with k1 = k2,
written out below with plain torch as the reference)."""

import copy
import functools
from pathlib import Path

import pytest
import torch

import loopzoo
from loopzoo.engine.data import training_loader
from loopzoo.engine.evaluation import SplitScorer
from loopzoo.engine.lightning_setup import fit_quietly
from loopzoo.engine.module import SequenceModule
from loopzoo.engine.objectives import masked_loss
from loopzoo.engine.schedules import TeacherForcingPlan
from loopzoo.engine.tbptt import chunk_spans

LENGTH, STEPS = 24, 3


def test_chunk_spans_cover_the_sequence_in_order():
    assert chunk_spans(10, 4) == [(0, 4), (4, 8), (8, 10)]
    assert chunk_spans(10, None) == [(0, 10)]
    assert chunk_spans(10, 10) == chunk_spans(10, 99) == [(0, 10)]
    assert chunk_spans(5, 1) == [(t, t + 1) for t in range(5)]


def _task():
    # Copy memory: targets at every step, so every chunk carries loss.
    return loopzoo.tasks.create("copy", seed=0, length=LENGTH - 20, train_size=64, val_size=16,
                                test_size=16)


def _model(topology: str, task) -> torch.nn.Module:
    torch.manual_seed(0)
    return loopzoo.create(topology, input_size=task.input_size, output_size=task.output_size,
                          hidden_size=12)


def _train(model, task, chunk, tmp_path: Path) -> SequenceModule:
    module = SequenceModule(
        model, task, SplitScorer(task, task.split("val"), feeds_back=False), batch_size=16,
        optimizer=functools.partial(torch.optim.Adam, lr=0.01), grad_clip_norm=1.0,
        plan=TeacherForcingPlan("teacher_forcing"), tbptt_chunk=chunk, val_every=1000,
        primary=task.metric, goal=task.goal, select_group="plain",
    )
    spans = len(chunk_spans(LENGTH, chunk))
    module.phase(end_step=STEPS * spans, patience=None)
    fit_quietly(module, training_loader(task.split("train"), 16, seed=5),
                {"enable_progress_bar": False}, run_dir=tmp_path)
    return module


@pytest.mark.parametrize("topology", ["hidden-feedback", "lstm"])
@pytest.mark.parametrize("chunk", [LENGTH, LENGTH + 7])
def test_a_chunk_covering_the_sequence_equals_full_bptt(tmp_path: Path, topology, chunk):
    task = _task()
    assert task.split("train").x.shape[1] == LENGTH
    full = _train(_model(topology, task), task, None, tmp_path).model
    covered = _train(_model(topology, task), task, chunk, tmp_path).model
    for (name, a), b in zip(full.state_dict().items(), covered.state_dict().values(), strict=True):
        assert torch.equal(a, b), name


def test_short_chunks_match_a_plain_torch_truncated_bptt_loop(tmp_path: Path):
    task, chunk = _task(), 5
    model = _model("hidden-feedback", task)
    reference = copy.deepcopy(model)
    trained = _train(model, task, chunk, tmp_path)
    assert trained.fit_state.step == STEPS * len(chunk_spans(LENGTH, chunk))

    optimizer = torch.optim.Adam(reference.parameters(), lr=0.01)
    # One batch per fetch: the same batches the harness splits out of its grouped fetches.
    plain = training_loader(task.split("train"), 16, seed=5, batches_per_fetch=1)
    for batch, (x, y, mask) in enumerate(plain):
        if batch == STEPS:
            break
        state = None
        for start in range(0, LENGTH, chunk):
            part = slice(start, start + chunk)
            out, state = reference(x[:, part]) if state is None else reference(x[:, part], state)
            loss = masked_loss("classification", out, y[:, part], mask[:, part])
            optimizer.zero_grad()
            loss.backward()
            torch.nn.utils.clip_grad_norm_(reference.parameters(), 1.0)
            optimizer.step()
            state = tuple(s.detach() for s in state)
    for a, b in zip(trained.model.parameters(), reference.parameters(), strict=True):
        torch.testing.assert_close(a, b)


def test_short_chunks_differ_from_full_bptt(tmp_path: Path):
    task = _task()
    full = _train(_model("hidden-feedback", task), task, None, tmp_path).model
    short = _train(_model("hidden-feedback", task), task, 6, tmp_path).model
    assert not all(torch.equal(a, b) for a, b in zip(full.parameters(), short.parameters(),
                                                      strict=True))
