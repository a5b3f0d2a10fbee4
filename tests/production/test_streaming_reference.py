"""StreamRunner against torch.nn's own recurrent layers (an implementation outside loopzoo).

hidden-feedback is the Elman network, h_t = tanh(W_ih x_t + W_hh h_{t-1} + b); torch.nn.RNN
computes the same recurrence (with a second bias, set to zero here). lstm and gru hold a
torch.nn.LSTM / torch.nn.GRU whose whole-sequence kernel is the reference for the runner's
one-sample-at-a-time path.
"""

from __future__ import annotations

import pytest
import torch

from loopzoo.serve.streaming import StreamRunner

ATOL = 1e-5  # float32: torch.nn's fused kernels and the step's separate products round apart


def _streamed(model, x):
    runner = StreamRunner(model)
    for stream in range(x.shape[0]):
        runner.start(stream)
    steps = []
    for t in range(x.shape[1]):
        pushed = runner.push_many({s: x[s, t] for s in range(x.shape[0])})
        steps.append(torch.stack([pushed[s] for s in range(x.shape[0])]))
    return torch.stack(steps, 1)


def test_hidden_feedback_runner_equals_torch_nn_rnn(build):
    model = build("hidden-feedback")
    reference = torch.nn.RNN(model.input_size, model.hidden_size, batch_first=True)
    with torch.no_grad():
        reference.weight_ih_l0.copy_(model.cell.weight_ih)
        reference.weight_hh_l0.copy_(model.cell.weight_hh)
        reference.bias_ih_l0.copy_(model.cell.bias)
        reference.bias_hh_l0.zero_()
    x = torch.randn(5, 12, model.input_size, generator=torch.Generator().manual_seed(7))
    with torch.no_grad():
        expected = model.readout(reference(x)[0])
    torch.testing.assert_close(_streamed(model, x), expected, atol=ATOL, rtol=0)


@pytest.mark.parametrize("gated", ["lstm", "gru"])
def test_gated_runner_equals_the_torch_nn_layer_it_holds(gated, build):
    model = build(gated)
    assert isinstance(model.rnn, torch.nn.LSTM | torch.nn.GRU)
    x = torch.randn(5, 12, model.input_size, generator=torch.Generator().manual_seed(8))
    with torch.no_grad():
        expected = model.readout(model.rnn(x)[0])
    torch.testing.assert_close(_streamed(model, x), expected, atol=ATOL, rtol=0)
