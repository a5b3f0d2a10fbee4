"""deep-transition's time loop, compiled, with a hand-written backward pass.

The recurrence is in ``_kernels/transition.py`` (an MLP from h_{t-1} and x_t to h_t, optional
shortcut). u_t = U x_t + b is computed for all steps before the loop; after it, dL/dW and each
transition layer's dL/dW_l are one product each over all steps. Checked against the plain
PyTorch loop of ``deep_transition.DeepTransition`` and gradcheck
(tests/topologies/test_compiled_loops.py, test_gradcheck.py).
"""

from __future__ import annotations

import torch
from torch import Tensor, nn
from torch.autograd.function import FunctionCtx, once_differentiable

from loopzoo.topologies import _kernels

__all__ = ["transition_scan"]


class _TransitionScan(torch.autograd.Function):
    """u (T, B, R), h0 (B, H), W (R, H), W_l (L-1, H, H), b_l (L-1, H) -> h (T, B, H)."""

    @staticmethod
    def forward(  # type: ignore[override]
        ctx: FunctionCtx, u: Tensor, h0: Tensor, weight_hh: Tensor, layer_w: Tensor,
        layer_b: Tensor, valid: Tensor | None, shortcut: bool, relu: bool,
    ) -> Tensor:
        steps, batch, hidden = u.shape[0], u.shape[1], h0.shape[1]
        zs = u.new_empty(layer_w.shape[0] + 1, steps, batch, hidden)
        hs = u.new_empty(steps, batch, hidden)
        with _kernels.blas_threads():
            _kernels.kernel("transition").forward(
                u.detach().numpy(), h0.detach().contiguous().numpy(),
                weight_hh.detach().t().contiguous().numpy(),
                layer_w.detach().transpose(1, 2).contiguous().numpy(),
                layer_b.detach().contiguous().numpy(), shortcut, relu,
                *_kernels.mask_array(valid), zs.numpy(), hs.numpy(),
            )
        ctx.save_for_backward(h0, weight_hh, layer_w, hs, zs, valid)
        ctx.shortcut, ctx.relu = shortcut, relu
        return hs

    @staticmethod
    @once_differentiable
    def backward(ctx: FunctionCtx, grad_hs: Tensor):  # type: ignore[override]
        h0, weight_hh, layer_w, hs, zs, valid = ctx.saved_tensors
        depth, steps, batch, hidden = zs.shape
        rows = weight_hh.shape[0]
        grad_a = hs.new_empty(steps, batch, rows)
        grad_pre = hs.new_empty(depth - 1, steps, batch, hidden)
        with _kernels.blas_threads():
            dh0 = _kernels.kernel("transition").backward(
                grad_hs.contiguous().numpy(), zs.numpy(),
                weight_hh.detach().contiguous().numpy(),
                layer_w.detach().contiguous().numpy(), ctx.shortcut, ctx.relu,
                *_kernels.mask_array(valid), grad_a.numpy(), grad_pre.numpy(),
            )
        # sum over steps of da_t^T h_{t-1}, and per layer of dpre_t^T z^{l-1}_t: one product each.
        grad_w = torch.addmm(
            grad_a[0].t() @ h0, grad_a[1:].reshape(-1, rows).t(), hs[:-1].reshape(-1, hidden)
        )
        grad_layer_w = torch.bmm(grad_pre.flatten(1, 2).transpose(1, 2), zs[:-1].flatten(1, 2))
        return (grad_a, torch.from_numpy(dh0), grad_w, grad_layer_w, grad_pre.sum(dim=(1, 2)),
                None, None, None)


def transition_scan(
    u: Tensor, h0: Tensor, weight_hh: Tensor, transition: nn.ModuleList,
    valid: Tensor | None, *, shortcut: bool, nonlinearity: str,
) -> Tensor:
    """All states h (T, B, H) of deep-transition's recurrence, held past each length.

    u: (T, B, R) projections (R = H, or 2H with the shortcut); h0: (B, H); weight_hh: (R, H);
    transition: the nn.Linear layers 2..L; valid: (T, B, 1) bool or None. Call only where
    ``_kernels.applies(u)``.
    """
    hidden = h0.shape[1]
    if len(transition):
        layer_w = torch.stack([layer.weight for layer in transition])
        layer_b = torch.stack([layer.bias for layer in transition])
    else:
        layer_w, layer_b = u.new_zeros(0, hidden, hidden), u.new_zeros(0, hidden)
    return _TransitionScan.apply(
        u.contiguous(), h0, weight_hh, layer_w, layer_b, valid, shortcut, nonlinearity == "relu"
    )
