"""The GRU recurrence of torch.nn.GRU, run by compiled loops with a hand-written backward pass.

Per layer, with the input part gx_t = W_ih x_t + b_ih of all steps computed in one product:

    g_t = W_hh h_{t-1} + b_hh;   r, z = σ(gx_r + g_r), σ(gx_z + g_z)
    n = tanh(gx_n + r ⊙ g_n);    h_t = (1 - z) ⊙ n + z ⊙ h_{t-1}

(Cho et al. 2014, in torch.nn.GRU's form: r multiplies W_hn h + b_hn.) The loop runs in
``_kernels/gru.py``; the backward pass returns dL/dgx for all steps, and dL/dW_hh is one
(3H, T*B) x (T*B, H) product after the loop. Parameters stay in the topology's torch.nn.GRU
(same names, same initialisation), whose own fused layer is the plain path and the reference
(tests/topologies/test_reference_torch_rnn.py, test_compiled_loops.py).
"""

from __future__ import annotations

import torch
from torch import Tensor, nn
from torch.autograd.function import FunctionCtx, once_differentiable
from torch.nn.functional import dropout

from loopzoo.topologies import _kernels
from loopzoo.topologies._base import State, project_time_major

__all__ = ["gru_layers"]


class _GRUScan(torch.autograd.Function):
    """gx (T, B, 3H), h0 (B, H), W_hh (3H, H), b_hh (3H,), valid (T, B, 1) -> h (T, B, H)."""

    @staticmethod
    def forward(  # type: ignore[override]
        ctx: FunctionCtx,
        gx: Tensor,
        h0: Tensor,
        weight_hh: Tensor,
        bias_hh: Tensor,
        valid: Tensor | None,
    ) -> Tensor:
        steps, batch, hidden = gx.shape[0], gx.shape[1], h0.shape[1]
        hs = gx.new_empty(steps, batch, hidden)
        gates = gx.new_empty(steps, batch, 4 * hidden)
        loops = _kernels.kernel("gru")
        with _kernels.blas_threads():
            loops.forward(
                gx.detach().numpy(), h0.detach().contiguous().numpy(),
                weight_hh.detach().t().contiguous().numpy(), bias_hh.detach().numpy(),
                *_kernels.mask_array(valid), hs.numpy(), gates.numpy(),
            )
        ctx.save_for_backward(h0, weight_hh, hs, gates, valid)
        return hs

    @staticmethod
    @once_differentiable
    def backward(ctx: FunctionCtx, grad_hs: Tensor):  # type: ignore[override]
        h0, weight_hh, hs, gates, valid = ctx.saved_tensors
        hidden = hs.shape[-1]
        grad_gx = hs.new_empty(hs.shape[0], hs.shape[1], 3 * hidden)
        grad_gh = torch.empty_like(grad_gx)
        loops = _kernels.kernel("gru")
        with _kernels.blas_threads():
            dh0 = loops.backward(
                grad_hs.contiguous().numpy(), h0.detach().contiguous().numpy(), hs.numpy(),
                gates.numpy(), weight_hh.detach().contiguous().numpy(),
                *_kernels.mask_array(valid), grad_gx.numpy(), grad_gh.numpy(),
            )
        # sum_t dL/dg_t^T h_{t-1}: one product over all later steps, plus the first step.
        grad_w = torch.addmm(
            grad_gh[0].t() @ h0,
            grad_gh[1:].reshape(-1, 3 * hidden).t(),
            hs[:-1].reshape(-1, hidden),
        )
        return grad_gx, torch.from_numpy(dh0), grad_w, grad_gh.sum(dim=(0, 1)), None


def gru_layers(
    rnn: nn.GRU, x_tm: Tensor, state: State, valid_tm: Tensor | None, training: bool
) -> tuple[Tensor, State]:
    """torch.nn.GRU's computation on ``rnn``'s parameters, by compiled loops.

    x_tm (T, B, I) time-major; state: one (B, H) per layer; valid_tm (T, B, 1) bool or None.
    Returns the top layer's h (T, B, H), held past each length, and each layer's final h.
    Dropout between layers as torch.nn.GRU applies it (on every layer's output but the last).
    """
    signal, finals = x_tm, []
    for layer in range(rnn.num_layers):
        if layer > 0 and rnn.dropout > 0.0:
            signal = dropout(signal, rnn.dropout, training)
        gx = project_time_major(
            signal, getattr(rnn, f"weight_ih_l{layer}"), getattr(rnn, f"bias_ih_l{layer}"),
            time_major=True,
        )
        signal = _GRUScan.apply(
            gx, state[layer], getattr(rnn, f"weight_hh_l{layer}"),
            getattr(rnn, f"bias_hh_l{layer}"), valid_tm,
        )
        finals.append(signal[-1])
    return signal, tuple(finals)
