"""Gradient reach at initialisation: additive paths keep gradient over long lags.

Common practice (no single source): plain tanh recurrences lose gradient geometrically with the
time lag; residual (additive) paths keep it far longer. Checked at a 100-step lag, in float64 so
the plain recurrence's tiny gradients do not underflow to zero.
"""

from __future__ import annotations

import pytest
import torch

import loopzoo
from loopzoo.diagnostics import gradient_reach

LAG = 100


def _decay(name: str, seed: int) -> float:
    torch.manual_seed(seed)
    model = loopzoo.create(name, input_size=4, output_size=1, hidden_size=32).double()
    reach = gradient_reach(model, torch.randn(8, LAG + 1, 4, dtype=torch.float64))
    assert len(reach) == LAG + 1
    assert reach[0] > 0.0
    return reach[LAG] / reach[0]


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_residual_skip_keeps_gradient_far_longer_than_hidden_feedback(seed: int) -> None:
    plain, residual = _decay("hidden-feedback", seed), _decay("residual-skip", seed)
    assert plain < 1e-6  # geometric decay over 100 steps
    assert residual > 1e-2  # the additive path keeps (here even grows) the gradient
    assert residual > 1e6 * plain


def test_reach_matches_autograd_through_forward() -> None:
    """Lag k is dL/d(state carried into step T-1-k): compare lag T-1 with dL/d(initial state)."""
    torch.manual_seed(3)
    model = loopzoo.create("stacked", input_size=2, output_size=3, hidden_size=5).double()
    x = torch.randn(2, 6, 2, dtype=torch.float64)
    initial = tuple(s.requires_grad_() for s in model.init_state(2))
    y, _ = model(x, initial)
    grads = torch.autograd.grad(y[:, -1].sum(), initial)
    expected = torch.cat([g.flatten() for g in grads]).norm().item()
    assert gradient_reach(model, x)[-1] == pytest.approx(expected, rel=1e-10)


@pytest.mark.parametrize("name", loopzoo.available())
def test_reach_runs_for_every_topology(name: str) -> None:
    model = loopzoo.create(name, input_size=2, output_size=2, hidden_size=4)
    reach = gradient_reach(model, torch.randn(3, 7, 2), max_lag=4)
    assert len(reach) == 5
    assert all(r >= 0.0 for r in reach) and reach[0] > 0.0


def test_reach_rejects_bad_arguments() -> None:
    model = loopzoo.create("hidden-feedback", input_size=2, output_size=1, hidden_size=3)
    with pytest.raises(ValueError, match="max_lag"):
        gradient_reach(model, torch.randn(1, 5, 2), max_lag=5)
    with pytest.raises(ValueError, match=r"\(B, T, input_size\)"):
        gradient_reach(model, torch.randn(5, 2))
