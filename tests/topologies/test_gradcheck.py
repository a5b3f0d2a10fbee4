"""torch.autograd.gradcheck (finite differences, float64) on every topology and the shared kernel.

Source of truth: torch.autograd.gradcheck compares analytical gradients with central finite
differences; it checks the hand-written backward of the Elman kernel as well as autograd paths.
"""

from __future__ import annotations

import itertools

import pytest
import torch
from torch.autograd import gradcheck
from torch.func import functional_call

import loopzoo
from loopzoo.topologies import _kernels
from loopzoo.topologies._elman import additive_scan

B, T = 2, 5


def _model(name: str, options: dict):
    """float64, and in eval mode: dropout between layers is torch's and random in training."""
    model = loopzoo.create(name, input_size=3, output_size=2, hidden_size=4, **options)
    return model.double().eval()


def _check(model, x, **kwargs) -> None:
    """gradcheck with respect to the input, the initial state and every parameter."""
    names = [n for n, _ in model.named_parameters()]
    params = [p.detach().clone().requires_grad_() for p in model.parameters()]
    state = tuple(s.normal_().requires_grad_() for s in model.init_state(x.shape[0]))
    n_state = len(state)

    def run(x, *rest):
        y, final = functional_call(
            model, dict(zip(names, rest[n_state:], strict=True)), (x, rest[:n_state]), kwargs
        )
        return (y, *final)

    assert gradcheck(run, (x, *state, *params), eps=1e-6, atol=1e-5, rtol=1e-4)


def test_gradcheck_whole_sequence_with_lengths(gradient_case: tuple[str, dict]) -> None:
    name, options = gradient_case
    torch.manual_seed(0)
    model = _model(name, options)
    x = torch.randn(B + 1, T, 3, dtype=torch.float64, requires_grad=True)
    _check(model, x)
    _check(model, x, lengths=torch.tensor([T, 2, 0]))


def test_gradcheck_with_targets_and_teacher_forcing(
    feedback_gradient_case: tuple[str, dict],
) -> None:
    """Teacher forcing (1.0) and scheduled sampling (0.5, coins re-drawn from a fixed seed)."""
    name, options = feedback_gradient_case
    torch.manual_seed(1)
    model = _model(name, options)
    x = torch.randn(B, T, 3, dtype=torch.float64, requires_grad=True)
    targets = torch.randn(B, T, 2, dtype=torch.float64).softmax(-1)
    _check(model, x, targets=targets, teacher_forcing=1.0)
    _check(model, x, targets=targets, teacher_forcing=1.0, lengths=torch.tensor([T, 3]))

    names = [n for n, _ in model.named_parameters()]

    def scheduled(x, targets, *params):
        torch.manual_seed(7)  # the same coins at every finite-difference evaluation
        y, final = functional_call(
            model, dict(zip(names, params, strict=True)), (x,),
            {"targets": targets, "teacher_forcing": 0.5},
        )
        return (y, *final)

    params = [p.detach().clone().requires_grad_() for p in model.parameters()]
    targets = targets.clone().requires_grad_()
    assert gradcheck(scheduled, (x, targets, *params), eps=1e-6, atol=1e-5, rtol=1e-4)


@pytest.mark.parametrize(
    ("nonlinearity", "carry", "scale", "masked", "compiled"),
    list(itertools.product(["tanh", "relu"], [False, True], [1.0, 0.5], [False, True],
                           [True, False])),
)
def test_gradcheck_additive_kernel(nonlinearity, carry, scale, masked, compiled) -> None:
    """The hand-written BPTT of the shared kernel, in every mode it supports, compiled and plain."""
    torch.manual_seed(2)
    u = torch.randn(6, 3, 4, dtype=torch.float64, requires_grad=True)
    h0 = torch.randn(3, 4, dtype=torch.float64, requires_grad=True)
    w = (0.5 * torch.randn(4, 4, dtype=torch.float64)).requires_grad_()
    valid = (torch.arange(6)[:, None] < torch.tensor([6, 2, 4])).unsqueeze(-1) if masked else None

    def run(u, h0, w):
        return additive_scan(u, h0, w, valid, nonlinearity=nonlinearity, carry=carry, scale=scale)

    with _kernels.forced(compiled):
        assert gradcheck(run, (u, h0, w), eps=1e-6, atol=1e-5, rtol=1e-4)
