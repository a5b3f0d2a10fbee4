"""Gradient health of a recurrent model, measured through its public ``step`` API (torch only)."""

from __future__ import annotations

import torch
from torch import Tensor

__all__ = ["gradient_reach"]


def gradient_reach(model: torch.nn.Module, x: Tensor, *, max_lag: int | None = None) -> list[float]:
    """How far back the gradient of the last output reaches: ||dL/ds_{T-1-k}|| for k = 0..max_lag.

    The model is stepped over x (B, T, I) from its zero state. s_t is the state the model carries
    into step t (all state tensors concatenated), so lag 0 is the state the last step reads and
    lag T-1 is the initial state. L is the sum of the last step's output. A zero probe is added
    to each carried state and the gradient is taken with respect to the probes, which equals
    dL/ds_t and works for every topology, including states without a gradient path (their
    entries are 0.0).

    Returns max_lag + 1 floats (default max_lag = T - 1). Plain tanh recurrences typically decay
    geometrically with the lag; additive paths decay much less (common practice).

    >>> import loopzoo
    >>> model = loopzoo.create("hidden-feedback", input_size=1, output_size=1, hidden_size=4)
    >>> len(gradient_reach(model, torch.randn(2, 6, 1), max_lag=3))
    4
    """
    if not isinstance(x, Tensor) or x.dim() != 3:
        shape = tuple(x.shape) if isinstance(x, Tensor) else type(x).__name__
        raise ValueError(f"x must be a (B, T, input_size) tensor, got {shape}")
    steps = x.shape[1]
    if steps < 1:
        raise ValueError("x must have at least one time step")
    if max_lag is None:
        max_lag = steps - 1
    if not isinstance(max_lag, int) or isinstance(max_lag, bool) or not 0 <= max_lag < steps:
        raise ValueError(
            f"max_lag must be an integer in [0, T-1] = [0, {steps - 1}], got {max_lag!r}"
        )

    first_probe = steps - 1 - max_lag  # steps before this one need no probe
    state = model.init_state(x.shape[0])
    probes: list[tuple[Tensor, ...]] = []
    with torch.enable_grad():
        for t in range(steps):
            if t >= first_probe:
                probe = tuple(torch.zeros_like(s, requires_grad=True) for s in state)
                state = tuple(s + p for s, p in zip(state, probe, strict=True))
                probes.append(probe)
            y_t, state = model.step(x[:, t], state)
        flat = [p for probe in probes for p in probe]
        grads = torch.autograd.grad(y_t.sum(), flat, allow_unused=True)
    per_state = len(probes[0])
    norms = []
    for index in range(len(probes)):
        parts = grads[index * per_state:(index + 1) * per_state]
        squares = sum(float(g.pow(2).sum()) for g in parts if g is not None)
        norms.append(squares ** 0.5)
    return norms[::-1]  # index k = lag k
