"""Compiled loops of the gated residual recurrence (residual-skip, mode='gated').

    [c_t; g_t] = u_t + W h_{t-1}                    (W: (2H, H); candidate rows first)
    h_t = h_{t-1} + σ(g_t) ⊙ f(c_t)                 (held past a length)

Arrays: u (T, B, 2H) input projections with bias; h0 (B, H); w_t = W^T (H, 2H), w = W (2H, H);
valid (T, B) bool, read only when has_valid; hs (T, B, H); saved (T, B, 2H) keeps f(c_t) and
σ(g_t) for the backward pass; grad_a (T, B, 2H) = dL/d[c_t; g_t].
"""

from __future__ import annotations

import numpy as np

from loopzoo.topologies._kernels._compile import jit, scalar, sigmoid, tanh

__all__ = ["backward", "forward"]


@jit
def forward(u, h0, w_t, relu, valid, has_valid, hs, saved):
    """Fill hs with h_t and saved with (f(c_t), σ(g_t))."""
    steps, batch, hidden = hs.shape
    zero = scalar(0, hs)
    h = h0
    for t in range(steps):
        a = np.dot(h, w_t)
        for b in range(batch):
            held = has_valid and not valid[t, b]
            # One-dimensional halves: rows indexed at a computed offset did not vectorise.
            u_c, u_g = u[t, b, :hidden], u[t, b, hidden:]
            a_c, a_g = a[b, :hidden], a[b, hidden:]
            s_f, s_g = saved[t, b, :hidden], saved[t, b, hidden:]
            previous, out = h[b], hs[t, b]
            for j in range(hidden):
                c = u_c[j] + a_c[j]
                f = (c if c > zero else c * zero) if relu else tanh(c)
                gate = sigmoid(u_g[j] + a_g[j])
                s_f[j], s_g[j] = f, gate
                out[j] = previous[j] if held else previous[j] + gate * f
        h = hs[t]


@jit
def backward(grad_hs, saved, w, relu, valid, has_valid, grad_a):
    """Fill grad_a; return dL/dh0.

    dL/dc = dh σ(g) f'(c), dL/dg = dh f(c) σ(g) (1 - σ(g)) on valid steps (else 0), and
    dL/dh_{t-1} = grad_hs[t-1] + dh + dL/d[c; g] W: the identity path carries dh whole.
    """
    steps, batch, hidden = grad_hs.shape
    zero, one = scalar(0, grad_hs), scalar(1, grad_hs)
    dh = grad_hs[steps - 1].copy()
    for t in range(steps - 1, -1, -1):
        for b in range(batch):
            held = has_valid and not valid[t, b]
            s_f, s_g = saved[t, b, :hidden], saved[t, b, hidden:]
            da_c, da_g = grad_a[t, b, :hidden], grad_a[t, b, hidden:]
            d_out = dh[b]
            for j in range(hidden):
                f, gate = s_f[j], s_g[j]
                slope = (one if f > zero else zero) if relu else one - f * f
                d = zero if held else d_out[j]
                da_c[j] = d * gate * slope
                da_g[j] = d * f * gate * (one - gate)
        back = np.dot(grad_a[t], w)
        for b in range(batch):
            for j in range(hidden):
                v = back[b, j] + dh[b, j]
                if t > 0:
                    v += grad_hs[t - 1, b, j]
                dh[b, j] = v
    return dh
