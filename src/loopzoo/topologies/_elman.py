"""The shared additive recurrence with a hand-written backward pass, and the layer built on it.

Recurrence (per step t, with u_t = U x_t + b computed for all steps before the loop):

    a_t = u_t + W h_{t-1}
    h_t = c * h_{t-1} + s * f(a_t)        f = tanh or relu; c = 0 (Elman) or 1 (residual)

and past a sequence's length the state is held: h_t = h_{t-1}. The forward loop runs without
autograd (tanh evaluated through sigmoid, see below); the backward pass runs back-propagation
through time by hand and forms dL/dW as one (H, T*B) x (T*B, H) product after the loop instead
of one small product per step. Checked against torch.nn.RNN and torch.autograd.gradcheck in
tests/topologies.
"""

from __future__ import annotations

import torch
from torch import Tensor, nn
from torch.autograd.function import FunctionCtx, once_differentiable

from loopzoo.topologies import _kernels
from loopzoo.topologies._base import project_time_major

__all__ = ["AdditiveRecurrence", "additive_scan"]


# torch's CPU sigmoid is several times faster than its tanh (measured here: about 3.5 vs 22 us
# for a 32 x 128 block), so the loops compute tanh(a) = 2 sigmoid(2a) - 1.


def _plain_loop(u: Tensor, h0: Tensor, weight_hh: Tensor, hs: Tensor, relu: bool) -> None:
    """h_t = f(u_t + W h_{t-1}) written into hs (T, B, H); two operations per step."""
    if relu:
        h, w_t = h0, weight_hh.t()
        # Per-step views made once: indexing inside the loop costs measurable time at small B.
        for u_t, h_out in zip(u.unbind(0), hs.unbind(0), strict=True):
            torch.addmm(u_t, h, w_t, out=h_out).relu_()
            h = h_out
        return
    # In sigmoid space: with s_t = sigmoid(2 a_t) and h_t = 2 s_t - 1,
    # 2 a_t = 2 u_t + 2 W (2 s_{t-1} - 1) = (2 u_t - 2 W 1) + 4 W s_{t-1}.
    u_s = torch.sub(u, weight_hh.sum(dim=1)).mul_(2.0)
    w_s = weight_hh.t() * 4.0
    s = (h0 + 1.0) * 0.5
    for u_t, s_out in zip(u_s.unbind(0), hs.unbind(0), strict=True):
        torch.addmm(u_t, s, w_s, out=s_out).sigmoid_()
        s = s_out
    hs.mul_(2.0).sub_(1.0)


def _general_loop(
    u: Tensor,
    h0: Tensor,
    weight_hh: Tensor,
    hs: Tensor,
    zs: Tensor,
    valid: Tensor | None,
    relu: bool,
    carry: bool,
    scale: float,
) -> None:
    """h_t = c h_{t-1} + s f(a_t), held past lengths, into hs; f(a_t) into zs."""
    if relu:
        pre, w_t, multiplier, offset = u, weight_hh.t(), scale, 0.0
    else:  # zs holds sigmoid(2 a) in the loop; s tanh(a) = 2 s sigmoid(2 a) - s
        pre, w_t, multiplier, offset = u * 2.0, weight_hh.t() * 2.0, 2.0 * scale, -scale
    h, scratch = h0, torch.empty_like(h0)
    for t, (u_t, z, h_out) in enumerate(zip(*(v.unbind(0) for v in (pre, zs, hs)), strict=True)):
        torch.addmm(u_t, h, w_t, out=z)
        if relu:
            z.relu_()
        else:
            z.sigmoid_()
        new = h_out if valid is None else scratch
        if carry:
            torch.add(h, z, alpha=multiplier, out=new)
        else:
            torch.mul(z, multiplier, out=new)
        if offset:
            new.add_(offset)
        if valid is not None:
            torch.where(valid[t], new, h, out=h_out)
        h = h_out
    if not relu:
        zs.mul_(2.0).sub_(1.0)  # sigmoid(2a) -> tanh(a), which the backward pass reads


class _AdditiveScan(torch.autograd.Function):
    """u (T, B, H), h0 (B, H), W (H, H), valid (T, B, 1) or None -> h (T, B, H)."""

    @staticmethod
    def forward(  # type: ignore[override]
        ctx: FunctionCtx,
        u: Tensor,
        h0: Tensor,
        weight_hh: Tensor,
        valid: Tensor | None,
        relu: bool,
        carry: bool,
        scale: float,
    ) -> Tensor:
        hs = torch.empty_like(u)
        ctx.compiled = _kernels.applies(u, h0, weight_hh)
        if ctx.compiled:
            zs = torch.empty_like(u)
            _compiled_forward(u, h0, weight_hh, valid, hs, zs, relu, carry, scale)
        elif not carry and valid is None and scale == 1.0:
            zs = hs  # h_t == f(a_t): one buffer serves both
            _plain_loop(u, h0, weight_hh, hs, relu)
        else:
            zs = torch.empty_like(u)
            _general_loop(u, h0, weight_hh, hs, zs, valid, relu, carry, scale)
        ctx.save_for_backward(h0, weight_hh, hs, zs, valid)
        ctx.relu, ctx.carry, ctx.scale = relu, carry, scale
        return hs

    @staticmethod
    @once_differentiable
    def backward(ctx: FunctionCtx, grad_hs: Tensor):  # type: ignore[override]
        h0, weight_hh, hs, zs, valid = ctx.saved_tensors
        relu, carry, scale = ctx.relu, ctx.carry, ctx.scale
        hidden = hs.shape[-1]
        if ctx.compiled:
            grad_a, dh = _compiled_backward(grad_hs, zs, weight_hh, valid, relu, carry, scale)
        else:
            grad_a, dh = _plain_backward(grad_hs, zs, weight_hh, valid, relu, carry, scale)
        grad_w = None
        if ctx.needs_input_grad[2]:
            # sum_t da_t^T h_{t-1} as one product over all later steps, plus the first step.
            grad_w = torch.addmm(
                grad_a[0].t() @ h0,
                grad_a[1:].reshape(-1, hidden).t(),
                hs[:-1].reshape(-1, hidden),
            )
        return grad_a, dh, grad_w, None, None, None, None


def _compiled_forward(
    u: Tensor, h0: Tensor, weight_hh: Tensor, valid: Tensor | None, hs: Tensor, zs: Tensor,
    relu: bool, carry: bool, scale: float,
) -> None:
    loops = _kernels.kernel("additive")
    with _kernels.blas_threads():
        loops.forward(
            u.detach().numpy(), h0.detach().contiguous().numpy(),
            weight_hh.detach().t().contiguous().numpy(), *_kernels.mask_array(valid),
            relu, carry, scale, hs.numpy(), zs.numpy(),
        )


def _compiled_backward(
    grad_hs: Tensor, zs: Tensor, weight_hh: Tensor, valid: Tensor | None,
    relu: bool, carry: bool, scale: float,
) -> tuple[Tensor, Tensor]:
    loops = _kernels.kernel("additive")
    grad_a = torch.empty_like(zs)
    with _kernels.blas_threads():
        dh = loops.backward(
            grad_hs.contiguous().numpy(), zs.numpy(), weight_hh.detach().contiguous().numpy(),
            *_kernels.mask_array(valid), relu, carry, scale, grad_a.numpy(),
        )
    return grad_a, torch.from_numpy(dh)


def _plain_backward(
    grad_hs: Tensor, zs: Tensor, weight_hh: Tensor, valid: Tensor | None,
    relu: bool, carry: bool, scale: float,
) -> tuple[Tensor, Tensor]:
    """BPTT in torch operations: returns dL/da (T, B, H) and dL/dh0 (B, H)."""
    steps = zs.shape[0]
    # dL/da_t = dL/dh_t * gain_t, gain = s f'(a) [t valid], for all steps in a few big ops;
    # f'(a) from f(a): tanh' = 1 - tanh^2, relu' = [relu(a) > 0].
    gain = (zs > 0).to(zs.dtype) if relu else 1.0 - zs * zs
    if scale != 1.0:
        gain.mul_(scale)
    # The share of dL/dh_t reaching h_{t-1} directly, bypassing f: all of it when carrying,
    # and past a sequence's length (where h_t = h_{t-1}).
    bypass = None
    if valid is not None:
        gain.mul_(valid)
        if not carry:
            bypass = (~valid).to(zs.dtype)
    grad_a = torch.empty_like(zs)
    gains, grads_a, upstream = gain.unbind(0), grad_a.unbind(0), grad_hs.unbind(0)
    bypasses = None if bypass is None else bypass.unbind(0)
    dh = upstream[steps - 1]
    for t in range(steps - 1, -1, -1):
        da = torch.mul(dh, gains[t], out=grads_a[t])
        if carry:
            base = dh if t == 0 else dh + upstream[t - 1]
        elif bypasses is not None:
            base = dh * bypasses[t] if t == 0 else torch.addcmul(
                upstream[t - 1], dh, bypasses[t]
            )
        else:
            base = None if t == 0 else upstream[t - 1]
        # dL/dh_{t-1} = (everything that reaches it directly) + da_t W.
        dh = da @ weight_hh if base is None else torch.addmm(base, da, weight_hh)
    return grad_a, dh


def additive_scan(
    u: Tensor,
    h0: Tensor,
    weight_hh: Tensor,
    valid: Tensor | None = None,
    *,
    nonlinearity: str = "tanh",
    carry: bool = False,
    scale: float = 1.0,
) -> Tensor:
    """All states of h_t = c h_{t-1} + s f(u_t + W h_{t-1}), time-major.

    u: (T, B, H) input projections (bias included); h0: (B, H); weight_hh: (H, H);
    valid: (T, B, 1) bool or None. Returns h: (T, B, H), held past each sequence's length.

    >>> h = additive_scan(torch.zeros(5, 2, 3), torch.zeros(2, 3), torch.eye(3))
    >>> h.shape
    torch.Size([5, 2, 3])
    """
    return _AdditiveScan.apply(
        u.contiguous(), h0, weight_hh, valid, nonlinearity == "relu", carry, scale
    )


class AdditiveRecurrence(nn.Module):
    """One layer of h_t = c h_{t-1} + s f(U x_t + W h_{t-1} + b) (c = 0: Elman; c = 1: residual).

    Parameters: weight_ih (H, I), weight_hh (H, H), bias (H,). ``sequence`` takes and returns
    time-major tensors: (T, B, I) -> (T, B, H).
    """

    def __init__(
        self,
        input_size: int,
        hidden_size: int,
        *,
        nonlinearity: str = "tanh",
        carry: bool = False,
        scale: float = 1.0,
    ) -> None:
        super().__init__()
        self.weight_ih = nn.Parameter(torch.empty(hidden_size, input_size))
        self.weight_hh = nn.Parameter(torch.empty(hidden_size, hidden_size))
        self.bias = nn.Parameter(torch.empty(hidden_size))
        self.nonlinearity, self.carry, self.scale = nonlinearity, carry, scale

    def sequence(
        self, x_tm: Tensor, h0: Tensor, valid_tm: Tensor | None
    ) -> tuple[Tensor, Tensor]:
        """Time-major x (T, B, I), h0 (B, H), valid (T, B, 1) or None -> (h (T, B, H), final h).

        h is held past each sequence's length, so the final h is its last row.
        """
        u = project_time_major(x_tm, self.weight_ih, self.bias, time_major=True)
        hs = additive_scan(
            u, h0, self.weight_hh, valid_tm,
            nonlinearity=self.nonlinearity, carry=self.carry, scale=self.scale,
        )
        return hs, hs[-1]

    def step(self, x_t: Tensor, h: Tensor) -> Tensor:
        """One step: x_t (B, I), h (B, H) -> h (B, H).

        f(U x_t + W h + b) is torch's native Elman cell: one call instead of four operations,
        which decides the per-sample cost of streaming.
        """
        cell = torch.rnn_relu_cell if self.nonlinearity == "relu" else torch.rnn_tanh_cell
        z = cell(x_t, h, self.weight_ih, self.weight_hh, self.bias)
        if self.scale != 1.0:
            z = z * self.scale
        return z + h if self.carry else z
