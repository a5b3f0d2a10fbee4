"""Output feedback's teacher-forced pass as one layer, in row blocks, with a hand-written backward.

With every fed-back value known, all steps are independent: for the N = B*T rows

    h = f(inputs W^T + b)   (inputs: [x_t; o_{t-d}], N x (I + O));   y = h V^T + c

Through autograd this allocates four fresh (N, H) tensors per training step (pre-activation,
tanh, dL/dh, dL/da); at large widths allocating and first touching them (page faults), and the
passes over them, took most of the time, not the matrix products (benchmarks/RESULTS.md,
"Topologies (compiled time loops)"). Here both passes walk the rows in blocks of about 256 KB
that stay in the cache: the forward pass keeps no (N, H) tensor, and the backward pass
recomputes each block's h (one more (rows x (I + O)) x ((I + O) x H) product) instead of saving
it. The activation runs in place, as one compiled pass where compiled loops apply.
"""

from __future__ import annotations

import torch
from torch import Tensor
from torch.autograd.function import FunctionCtx, once_differentiable

from loopzoo.topologies import _kernels

__all__ = ["teacher_forced_layer"]

_BLOCK_BYTES = 1 << 18


def _activate_(h: Tensor, relu: bool) -> None:
    if relu:
        h.relu_()
    elif _kernels.applies(h):
        _kernels.kernel("elementwise").tanh_(h.view(-1).numpy())
    else:  # tanh(a) = 2 sigmoid(2a) - 1: torch's CPU sigmoid is much faster than its tanh
        h.mul_(2.0).sigmoid_().mul_(2.0).sub_(1.0)


def _through_activation_(grad: Tensor, h: Tensor, relu: bool) -> None:
    """grad <- grad f'(a), from h = f(a)."""
    if relu:
        grad.mul_(h > 0)
    elif _kernels.applies(h):
        _kernels.kernel("elementwise").tanh_backward_(grad.view(-1).numpy(), h.view(-1).numpy())
    else:
        grad.sub_(grad * h * h)


def _blocks(rows: int, hidden: int, itemsize: int) -> list[tuple[int, int]]:
    size = max(16, _BLOCK_BYTES // (hidden * itemsize))
    return [(start, min(rows, start + size)) for start in range(0, rows, size)]


class _TeacherForcedLayer(torch.autograd.Function):
    @staticmethod
    def forward(  # type: ignore[override]
        ctx: FunctionCtx, inputs: Tensor, weight: Tensor, bias: Tensor, readout_w: Tensor,
        readout_b: Tensor, relu: bool,
    ) -> Tensor:
        blocks = _blocks(inputs.shape[0], weight.shape[0], inputs.element_size())
        y = inputs.new_empty(inputs.shape[0], readout_w.shape[0])
        h = inputs.new_empty(blocks[0][1], weight.shape[0])
        for start, stop in blocks:
            h_block = h[: stop - start]
            torch.addmm(bias, inputs[start:stop], weight.t(), out=h_block)
            _activate_(h_block, relu)
            torch.addmm(readout_b, h_block, readout_w.t(), out=y[start:stop])
        ctx.save_for_backward(inputs, weight, bias, readout_w)
        ctx.relu = relu
        return y

    @staticmethod
    @once_differentiable
    def backward(ctx: FunctionCtx, grad_y: Tensor):  # type: ignore[override]
        inputs, weight, bias, readout_w = ctx.saved_tensors
        grad_y = grad_y.contiguous()
        hidden = weight.shape[0]
        blocks = _blocks(inputs.shape[0], hidden, inputs.element_size())
        h = inputs.new_empty(blocks[0][1], hidden)
        grad_a = torch.empty_like(h)
        grad_w, grad_b = torch.zeros_like(weight), torch.zeros_like(bias)
        grad_readout_w = torch.zeros_like(readout_w)
        grad_inputs = torch.empty_like(inputs) if ctx.needs_input_grad[0] else None
        for start, stop in blocks:
            h_block, grad_block = h[: stop - start], grad_a[: stop - start]
            torch.addmm(bias, inputs[start:stop], weight.t(), out=h_block)
            _activate_(h_block, ctx.relu)
            torch.mm(grad_y[start:stop], readout_w, out=grad_block)  # dL/dh
            grad_readout_w.addmm_(grad_y[start:stop].t(), h_block)
            _through_activation_(grad_block, h_block, ctx.relu)  # dL/da
            grad_w.addmm_(grad_block.t(), inputs[start:stop])
            grad_b.add_(grad_block.sum(0))
            if grad_inputs is not None:
                torch.mm(grad_block, weight, out=grad_inputs[start:stop])
        return grad_inputs, grad_w, grad_b, grad_readout_w, grad_y.sum(0), None


def teacher_forced_layer(
    inputs: Tensor, weight: Tensor, bias: Tensor, readout_w: Tensor, readout_b: Tensor, *,
    nonlinearity: str,
) -> Tensor:
    """y = V f(inputs W^T + b) + c for (N, I + O) inputs -> (N, O). Not for tracing: exported
    and compiled graphs use the same formula in plain operations."""
    return _TeacherForcedLayer.apply(
        inputs.contiguous(), weight, bias, readout_w, readout_b, nonlinearity == "relu"
    )
