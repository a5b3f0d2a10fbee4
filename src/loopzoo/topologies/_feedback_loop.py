"""Output feedback's time loop (free running, scheduled sampling), compiled, with a hand-written
backward pass: the recurrence is in ``_kernels/feedback.py``. The readout is inside the loop
(its output is fed back), so dL/dV, dL/dc and dL/dW are formed after the loop as one product
each over all steps. Checked against the plain PyTorch loop of ``output_feedback`` and gradcheck
(tests/topologies/test_compiled_loops.py, test_gradcheck.py).
"""

from __future__ import annotations

import torch
from torch import Tensor, nn
from torch.autograd.function import FunctionCtx, once_differentiable

from loopzoo.topologies import _kernels

__all__ = ["FEED", "feedback_scan"]

# What a step feeds back of its own output y_t (the fed_back option).
FEED = {"value": 0, "detached": 1, "distribution": 2, "onehot": 3}


class _FeedbackScan(torch.autograd.Function):
    @staticmethod
    def forward(  # type: ignore[override]
        ctx: FunctionCtx, u: Tensor, line0: Tensor, weight_oh: Tensor, readout_w: Tensor,
        readout_b: Tensor, targets: Tensor, coins: Tensor, lengths: Tensor, delays: Tensor,
        feed: int, relu: bool, forcing: bool,
    ) -> tuple[Tensor, Tensor]:
        steps, batch, hidden = u.shape
        outputs = readout_w.shape[0]
        inputs = u.new_empty(steps, batch, outputs)
        hs = torch.empty_like(u)
        ys, fed = torch.empty_like(inputs), torch.empty_like(inputs)
        line = torch.empty_like(line0)
        with _kernels.blas_threads():
            _kernels.kernel("feedback").forward(
                u.detach().numpy(), line0.detach().contiguous().numpy(), delays.numpy(),
                weight_oh.detach().t().contiguous().numpy(),
                readout_w.detach().t().contiguous().numpy(), readout_b.detach().numpy(),
                feed, relu, targets.detach().contiguous().numpy(), coins.numpy(), forcing,
                lengths.numpy(), inputs.numpy(), hs.numpy(), ys.numpy(), fed.numpy(),
                line.numpy(),
            )
        ctx.save_for_backward(weight_oh, readout_w, inputs, hs, ys, fed, coins, lengths, delays)
        ctx.feed, ctx.relu, ctx.forcing = feed, relu, forcing
        ctx.line_size = line0.shape[1]
        return ys, line

    @staticmethod
    @once_differentiable
    def backward(ctx: FunctionCtx, grad_ys: Tensor, grad_line: Tensor):  # type: ignore[override]
        weight_oh, readout_w, inputs, hs, ys, fed, coins, lengths, delays = ctx.saved_tensors
        steps, batch, hidden = hs.shape
        outputs = ys.shape[2]
        grad_a, grad_y = torch.empty_like(hs), torch.empty_like(ys)
        grad_fed = torch.empty_like(ys)
        grad_line0 = hs.new_empty(batch, ctx.line_size)
        grad_targets = torch.zeros_like(ys) if ctx.forcing else ys.new_zeros(1, 1, 1)
        with _kernels.blas_threads():
            _kernels.kernel("feedback").backward(
                grad_ys.contiguous().numpy(), grad_line.contiguous().numpy(), lengths.numpy(),
                delays.numpy(), hs.numpy(), ys.numpy(), fed.numpy(),
                weight_oh.detach().contiguous().numpy(), readout_w.detach().contiguous().numpy(),
                ctx.feed, ctx.relu, coins.numpy(), ctx.forcing, grad_a.numpy(), grad_y.numpy(),
                grad_fed.numpy(), grad_line0.numpy(), grad_targets.numpy(),
            )
        flat_a, flat_y = grad_a.reshape(-1, hidden), grad_y.reshape(-1, outputs)
        grad_w = flat_a.t() @ inputs.reshape(-1, outputs)
        grad_v = flat_y.t() @ hs.reshape(-1, hidden)
        return (grad_a, grad_line0, grad_w, grad_v, flat_y.sum(0),
                grad_targets if ctx.forcing else None, None, None, None, None, None, None)


def feedback_scan(
    u: Tensor, line0: Tensor, weight_oh: Tensor, readout: nn.Linear, targets: Tensor | None,
    coins: Tensor | None, valid: Tensor | None, delays: tuple[int, ...], *, fed_back: str,
    nonlinearity: str,
) -> tuple[Tensor, Tensor]:
    """Output feedback over time: u (T, B, H) with bias, line0 (B, D*O), targets (T, B, O) and
    coins (T, B) bool (None when free running), valid (B, T) bool or None (a prefix per sequence)
    -> y (T, B, O), 0 past each length, and the state line after each sequence's last valid step.
    Call only where ``_kernels.applies(u)``."""
    steps, batch = u.shape[0], u.shape[1]
    forcing = targets is not None
    if not forcing:
        targets, coins = u.new_zeros(1, 1, 1), torch.zeros(1, 1, dtype=torch.bool)
    lengths = (torch.full((batch,), steps, dtype=torch.int64) if valid is None
               else valid.sum(dim=1).to(torch.int64))
    return _FeedbackScan.apply(
        u.contiguous(), line0, weight_oh, readout.weight, readout.bias, targets,
        coins.contiguous(), lengths, torch.tensor(delays, dtype=torch.int64), FEED[fed_back],
        nonlinearity == "relu", forcing,
    )
