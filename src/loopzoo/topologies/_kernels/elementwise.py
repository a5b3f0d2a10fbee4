"""Compiled element-wise passes over large flat arrays (one pass, no temporaries)."""

from __future__ import annotations

from loopzoo.topologies._kernels._compile import jit, scalar, tanh

__all__ = ["tanh_", "tanh_backward_"]


@jit
def tanh_(values):
    """values <- tanh(values), in place."""
    for i in range(values.size):
        values[i] = tanh(values[i])


@jit
def tanh_backward_(grad, out):
    """grad <- grad (1 - out^2), in place, where out = tanh(a)."""
    one = scalar(1, out)
    for i in range(grad.size):
        grad[i] = grad[i] * (one - out[i] * out[i])
