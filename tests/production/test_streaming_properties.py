"""Streams advanced at different paces, singly or batched in any grouping, moved between runners
through saved state, still equal forward."""

from __future__ import annotations

import pytest
import torch
from hypothesis import given, settings
from hypothesis import strategies as st

import loopzoo
from loopzoo.serve.streaming import StreamRunner

STREAMS, STEPS = 4, 6


@pytest.fixture(scope="module")
def models():
    torch.manual_seed(0)
    return {
        name: loopzoo.create(name, input_size=3, output_size=2, hidden_size=5).eval()
        for name in ("hidden-feedback", "lstm", "output-feedback")
    }


# Each move picks a set of streams to advance by one sample, whether to batch them, and whether
# to then move every stream to a fresh runner through save_state / restore_state.
moves = st.lists(
    st.tuples(st.sets(st.integers(0, STREAMS - 1), min_size=1), st.booleans(), st.booleans()),
    min_size=1,
    max_size=3 * STEPS,
)


@settings(max_examples=30, deadline=None)
@given(moves=moves, name=st.sampled_from(["hidden-feedback", "lstm", "output-feedback"]))
def test_any_interleaving_of_pushes_equals_forward(models, moves, name):
    model = models[name]
    x = torch.randn(STREAMS, STEPS, 3, generator=torch.Generator().manual_seed(1))
    with torch.no_grad():
        y_ref, _ = model(x)
    runner = StreamRunner(model)
    position = dict.fromkeys(range(STREAMS), 0)
    for stream in position:
        runner.start(stream)
    for chosen, batched, migrate in moves:
        ready = sorted(s for s in chosen if position[s] < STEPS)
        if migrate:
            saved = {s: runner.save_state(s) for s in runner.active}
            runner = StreamRunner(model)
            for s, data in saved.items():
                runner.restore_state(s, data)
        if not ready:
            continue
        if batched:
            out = runner.push_many({s: x[s, position[s]] for s in ready})
        else:
            out = {s: runner.push(s, x[s, position[s]]) for s in ready}
        for s in ready:
            torch.testing.assert_close(out[s], y_ref[s, position[s]], atol=1e-6, rtol=1e-6)
            position[s] += 1
