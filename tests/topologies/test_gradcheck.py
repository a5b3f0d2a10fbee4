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
from loopzoo.topologies import TOPOLOGIES
from loopzoo.topologies._elman import additive_scan

B, T = 2, 5
# Non-default options worth a gradient check of their own (defaults are always checked).
VARIANTS = {
    "hidden-feedback": [{"nonlinearity": "relu"}],
    "output-feedback": [{"output_kind": "classes"}, {"nonlinearity": "relu"}],
    "stacked": [{"num_layers": 3}],
    "deep-transition": [{"transition_depth": 3, "output_depth": 2, "shortcut": True}],
    "residual-skip": [{"mode": "gated", "num_layers": 2}, {"scale": 0.5, "num_layers": 2}],
    "lstm": [{"num_layers": 2}],
    "gru": [{"num_layers": 2}],
}


def _cases(feedback_only: bool = False):
    for name in loopzoo.available():
        if feedback_only and not TOPOLOGIES.get(name).feeds_back_output:
            continue
        for options in [{}, *VARIANTS.get(name, [])]:
            yield pytest.param(name, options, id=f"{name}-{options}")


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


@pytest.mark.parametrize(("name", "options"), list(_cases()))
def test_gradcheck_whole_sequence_with_lengths(name: str, options: dict) -> None:
    torch.manual_seed(0)
    model = loopzoo.create(name, input_size=3, output_size=2, hidden_size=4, **options).double()
    x = torch.randn(B + 1, T, 3, dtype=torch.float64, requires_grad=True)
    _check(model, x)
    _check(model, x, lengths=torch.tensor([T, 2, 0]))


@pytest.mark.parametrize(("name", "options"), list(_cases(feedback_only=True)))
def test_gradcheck_with_targets_and_teacher_forcing(name: str, options: dict) -> None:
    """Teacher forcing (1.0) and scheduled sampling (0.5, coins re-drawn from a fixed seed)."""
    torch.manual_seed(1)
    model = loopzoo.create(name, input_size=3, output_size=2, hidden_size=4, **options).double()
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
    ("nonlinearity", "carry", "scale", "masked"),
    list(itertools.product(["tanh", "relu"], [False, True], [1.0, 0.5], [False, True])),
)
def test_gradcheck_additive_kernel(nonlinearity, carry, scale, masked) -> None:
    """The hand-written BPTT of the shared kernel, in every mode it supports."""
    torch.manual_seed(2)
    u = torch.randn(6, 3, 4, dtype=torch.float64, requires_grad=True)
    h0 = torch.randn(3, 4, dtype=torch.float64, requires_grad=True)
    w = (0.5 * torch.randn(4, 4, dtype=torch.float64)).requires_grad_()
    valid = (torch.arange(6)[:, None] < torch.tensor([6, 2, 4])).unsqueeze(-1) if masked else None

    def run(u, h0, w):
        return additive_scan(u, h0, w, valid, nonlinearity=nonlinearity, carry=carry, scale=scale)

    assert gradcheck(run, (u, h0, w), eps=1e-6, atol=1e-5, rtol=1e-4)
