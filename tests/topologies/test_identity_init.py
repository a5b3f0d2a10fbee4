"""IRNN: Le, Jaitly & Hinton, "A Simple Way to Initialize Recurrent Networks of Rectified Linear
Units" (arXiv 1504.00941, 2015), section 2: ReLU units, the recurrent weight matrix initialised
to the identity and the biases to zero, so that without input the hidden state is copied from
step to step."""

from __future__ import annotations

import torch

import loopzoo


def _irnn(**options):
    torch.manual_seed(0)
    return loopzoo.create("hidden-feedback", input_size=3, output_size=2, hidden_size=16,
                          nonlinearity="relu", init="identity", **options)


def test_recurrent_weight_is_the_identity_and_biases_are_zero():
    model = _irnn()
    assert torch.equal(model.cell.weight_hh, torch.eye(16))
    assert torch.equal(model.cell.bias, torch.zeros(16))
    assert torch.equal(model.readout.bias, torch.zeros(2))
    # The other weights keep the zoo's default U(-1/sqrt(H), 1/sqrt(H)).
    assert model.cell.weight_ih.abs().max() <= 16 ** -0.5
    assert model.cell.weight_ih.std() > 0


def test_without_input_the_state_is_carried_unchanged():
    model = _irnn()
    start = torch.rand(4, 16)
    _, (final,) = model(torch.zeros(4, 200, 3), (start,))
    torch.testing.assert_close(final, start, rtol=0, atol=0)
    # The gradient reaches back undiminished: dL/dh_0 = dL/dh_T through 200 identity steps.
    start.requires_grad_(True)
    _, (final,) = model(torch.zeros(4, 200, 3), (start,))
    final.sum().backward()
    torch.testing.assert_close(start.grad, torch.ones(4, 16))


def test_uniform_stays_the_default():
    model = loopzoo.create("hidden-feedback", input_size=3, output_size=2, hidden_size=16)
    assert model.options["init"] == "uniform"
    assert not torch.equal(model.cell.weight_hh, torch.eye(16))
