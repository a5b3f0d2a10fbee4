"""The gated residual recurrence's time loop, compiled, with a hand-written backward pass.

    [c_t; g_t] = u_t + W h_{t-1};   h_t = h_{t-1} + σ(g_t) ⊙ f(c_t)   (held past a length)

u_t = U x_t + b is computed for all steps before the loop; the loop runs in
``_kernels/gated_residual.py`` and dL/dW is one (2H, T*B) x (T*B, H) product after it. Checked
against the plain PyTorch loop of ``residual_skip.GatedResidualRecurrence`` and gradcheck
(tests/topologies/test_compiled_loops.py, test_gradcheck.py).
"""

from __future__ import annotations

import torch
from torch import Tensor
from torch.autograd.function import FunctionCtx, once_differentiable

from loopzoo.topologies import _kernels

__all__ = ["gated_residual_scan"]


class _GatedResidualScan(torch.autograd.Function):
    """u (T, B, 2H), h0 (B, H), W (2H, H), valid (T, B, 1) or None -> h (T, B, H)."""

    @staticmethod
    def forward(  # type: ignore[override]
        ctx: FunctionCtx, u: Tensor, h0: Tensor, weight_hh: Tensor, valid: Tensor | None,
        relu: bool,
    ) -> Tensor:
        steps, batch, hidden = u.shape[0], u.shape[1], h0.shape[1]
        hs = u.new_empty(steps, batch, hidden)
        saved = torch.empty_like(u)
        with _kernels.blas_threads():
            _kernels.kernel("gated_residual").forward(
                u.detach().numpy(), h0.detach().contiguous().numpy(),
                weight_hh.detach().t().contiguous().numpy(), relu,
                *_kernels.mask_array(valid), hs.numpy(), saved.numpy(),
            )
        ctx.save_for_backward(h0, weight_hh, hs, saved, valid)
        ctx.relu = relu
        return hs

    @staticmethod
    @once_differentiable
    def backward(ctx: FunctionCtx, grad_hs: Tensor):  # type: ignore[override]
        h0, weight_hh, hs, saved, valid = ctx.saved_tensors
        hidden = hs.shape[-1]
        grad_a = torch.empty_like(saved)
        with _kernels.blas_threads():
            dh0 = _kernels.kernel("gated_residual").backward(
                grad_hs.contiguous().numpy(), saved.numpy(),
                weight_hh.detach().contiguous().numpy(), ctx.relu,
                *_kernels.mask_array(valid), grad_a.numpy(),
            )
        grad_w = torch.addmm(
            grad_a[0].t() @ h0,
            grad_a[1:].reshape(-1, 2 * hidden).t(),
            hs[:-1].reshape(-1, hidden),
        )
        return grad_a, torch.from_numpy(dh0), grad_w, None, None


def gated_residual_scan(
    u: Tensor, h0: Tensor, weight_hh: Tensor, valid: Tensor | None, *, nonlinearity: str
) -> Tensor:
    """All states h (T, B, H) of the gated residual recurrence, held past each length.

    u: (T, B, 2H) projections [candidate; gate] with bias; h0: (B, H); weight_hh: (2H, H);
    valid: (T, B, 1) bool or None. Call only where ``_kernels.applies(u)``.
    """
    return _GatedResidualScan.apply(u.contiguous(), h0, weight_hh, valid, nonlinearity == "relu")
