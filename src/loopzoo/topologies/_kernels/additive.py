"""Compiled loops of the additive recurrence (see ``loopzoo.topologies._elman``).

    a_t = u_t + W h_{t-1};   z_t = f(a_t);   h_t = c h_{t-1} + s z_t  (held past a length)

Arrays are NumPy views of contiguous torch tensors: u, hs, zs, grad_hs, grad_a (T, B, H);
h0 (B, H); w_t = W^T and w = W (H, H); valid (T, B) bool, read only when has_valid.
"""

from __future__ import annotations

import numpy as np

from loopzoo.topologies._kernels._compile import jit, scalar, tanh

__all__ = ["backward", "forward"]


@jit
def forward(u, h0, w_t, valid, has_valid, relu, carry, scale, hs, zs):
    """Fill hs with h_t and zs with f(a_t)."""
    steps, batch, hidden = u.shape
    s, zero = scalar(scale, u), scalar(0, u)
    h = h0
    for t in range(steps):
        a = np.dot(h, w_t)
        u_t, z_t, h_t = u[t], zs[t], hs[t]
        for b in range(batch):
            held = has_valid and not valid[t, b]
            for j in range(hidden):
                x = a[b, j] + u_t[b, j]
                z = (x if x > zero else x * zero) if relu else tanh(x)
                z_t[b, j] = z
                new = s * z + h[b, j] if carry else s * z
                h_t[b, j] = h[b, j] if held else new
        h = h_t


@jit
def backward(grad_hs, zs, w, valid, has_valid, relu, carry, scale, grad_a):
    """Fill grad_a with dL/da_t; return dL/dh0.

    dL/dh_{t-1} = grad_hs[t-1] + (the part of dL/dh_t that bypasses f: all of it when carrying
    or past a length) + dL/da_t W, with dL/da_t = dL/dh_t s f'(a_t) on valid steps, else 0.
    """
    steps, batch, hidden = zs.shape
    s, zero, one = scalar(scale, zs), scalar(0, zs), scalar(1, zs)
    dh = grad_hs[steps - 1].copy()
    for t in range(steps - 1, -1, -1):
        z_t, da_t = zs[t], grad_a[t]
        for b in range(batch):
            held = has_valid and not valid[t, b]
            for j in range(hidden):
                z = z_t[b, j]
                slope = (one if z > zero else zero) if relu else one - z * z
                da_t[b, j] = zero if held else dh[b, j] * (s * slope)
        back = np.dot(da_t, w)
        for b in range(batch):
            bypass = carry or (has_valid and not valid[t, b])
            for j in range(hidden):
                v = back[b, j]
                if bypass:
                    v += dh[b, j]
                if t > 0:
                    v += grad_hs[t - 1, b, j]
                dh[b, j] = v
    return dh
