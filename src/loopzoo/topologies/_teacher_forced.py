"""Output feedback's teacher-forced pass as one layer, in row blocks, with a hand-written backward.

With every fed-back value known, all steps are independent: for the N = B*T rows

    h = f(inputs W^T + b)   (inputs: [x_t; o_{t-d}], N x (I + O));   y = h V^T + c

Through autograd this allocates four fresh (N, H) tensors per training step (pre-activation,
tanh, dL/dh, dL/da); at large widths allocating and first touching them (page faults), and the
passes over them, took most of the time, not the matrix products (benchmarks/RESULTS.md,
"Topologies (compiled time loops)"). Here both passes walk the rows in blocks of about 256 KB
that stay in the cache, and the activation runs in place, as one compiled pass where compiled
loops apply. h is kept for the backward pass in the layer's ``Workspace``, one (N, H) buffer
allocated once and reused every step; where there is none, or a later forward pass has reused
it, or it would exceed ``SAVE_LIMIT_BYTES``, the backward pass recomputes each block's h (one
more (rows x (I + O)) x ((I + O) x H) product) instead.
"""

from __future__ import annotations

import torch
from torch import Tensor
from torch.autograd.function import FunctionCtx, once_differentiable

from loopzoo.topologies import _kernels

__all__ = ["SAVE_LIMIT_BYTES", "Workspace", "teacher_forced_layer"]

_BLOCK_BYTES = 1 << 18
SAVE_LIMIT_BYTES = 1 << 28  # above 256 MB of activations, recompute h instead of keeping it


class Workspace:
    """One layer's reusable (N, H) activation buffer, kept from its forward to its backward pass.

    Each forward pass that takes the buffer starts a new generation; a backward pass whose
    generation is no longer current (another forward pass reused the buffer in between)
    recomputes h. Copies and pickles start empty.
    """

    def __init__(self) -> None:
        self._buffer: Tensor | None = None
        self.generation = 0

    def take(self, rows: int, hidden: int, like: Tensor) -> tuple[Tensor, int]:
        """A (rows, hidden) buffer of ``like``'s dtype and device, and its new generation."""
        old = self._buffer
        if (old is None or old.shape != (rows, hidden) or old.dtype != like.dtype
                or old.device != like.device):
            self._buffer = old = None  # let the old buffer go before allocating the new one
            self._buffer = like.new_empty(rows, hidden)
        self.generation += 1
        return self._buffer, self.generation

    def __deepcopy__(self, memo: dict[int, object]) -> Workspace:
        return Workspace()

    def __getstate__(self) -> dict[str, object]:
        return {}

    def __setstate__(self, state: dict[str, object]) -> None:
        self.__init__()


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
        readout_b: Tensor, relu: bool, workspace: Workspace | None,
    ) -> Tensor:
        rows, hidden = inputs.shape[0], weight.shape[0]
        blocks = _blocks(rows, hidden, inputs.element_size())
        y = inputs.new_empty(rows, readout_w.shape[0])
        keep = (workspace is not None and any(ctx.needs_input_grad)
                and rows * hidden * inputs.element_size() <= SAVE_LIMIT_BYTES)
        ctx.kept = None
        if keep:
            h, ctx.generation = workspace.take(rows, hidden, inputs)
            ctx.kept, ctx.workspace = h, workspace
        else:
            h = inputs.new_empty(blocks[0][1], hidden)
        for start, stop in blocks:
            h_block = h[start:stop] if keep else h[: stop - start]
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
        kept = ctx.kept
        if kept is not None and ctx.workspace.generation != ctx.generation:
            kept = None  # a later forward pass reused the buffer
        h = kept if kept is not None else inputs.new_empty(blocks[0][1], hidden)
        grad_a = inputs.new_empty(blocks[0][1], hidden)
        grad_w, grad_b = torch.zeros_like(weight), torch.zeros_like(bias)
        grad_readout_w = torch.zeros_like(readout_w)
        grad_inputs = torch.empty_like(inputs) if ctx.needs_input_grad[0] else None
        for start, stop in blocks:
            grad_block = grad_a[: stop - start]
            if kept is not None:
                h_block = kept[start:stop]
            else:
                h_block = h[: stop - start]
                torch.addmm(bias, inputs[start:stop], weight.t(), out=h_block)
                _activate_(h_block, ctx.relu)
            torch.mm(grad_y[start:stop], readout_w, out=grad_block)  # dL/dh
            grad_readout_w.addmm_(grad_y[start:stop].t(), h_block)
            _through_activation_(grad_block, h_block, ctx.relu)  # dL/da
            grad_w.addmm_(grad_block.t(), inputs[start:stop])
            grad_b.add_(grad_block.sum(0))
            if grad_inputs is not None:
                torch.mm(grad_block, weight, out=grad_inputs[start:stop])
        return grad_inputs, grad_w, grad_b, grad_readout_w, grad_y.sum(0), None, None


def teacher_forced_layer(
    inputs: Tensor, weight: Tensor, bias: Tensor, readout_w: Tensor, readout_b: Tensor, *,
    nonlinearity: str, workspace: Workspace | None = None,
) -> Tensor:
    """y = V f(inputs W^T + b) + c for (N, I + O) inputs -> (N, O). With a ``workspace`` (one per
    layer), h is kept there for the backward pass instead of recomputed. Not for tracing:
    exported and compiled graphs use the same formula in plain operations."""
    return _TeacherForcedLayer.apply(
        inputs.contiguous(), weight, bias, readout_w, readout_b, nonlinearity == "relu",
        workspace if torch.is_grad_enabled() else None,  # no backward pass to keep h for
    )
