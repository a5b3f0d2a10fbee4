"""Compiled loops of one GRU layer, in torch.nn.GRU's equations and gate order (r, z, n).

    g_t = W_hh h_{t-1} + b_hh                      (3H: r, z, n rows), x-part gx_t precomputed
    r = σ(gx_r + g_r),  z = σ(gx_z + g_z),  n = tanh(gx_n + r ⊙ g_n)
    h_t = (1 - z) ⊙ n + z ⊙ h_{t-1}                (held past a length)

Arrays: gx (T, B, 3H); h0 (B, H); w_t = W_hh^T (H, 3H), w = W_hh (3H, H); bias (3H,);
valid (T, B) bool, read only when has_valid; hs (T, B, H) states; gates (T, B, 4H) saves
r, z, n and g_n for the backward pass; grad_gx, grad_gh (T, B, 3H).
"""

from __future__ import annotations

import numpy as np

from loopzoo.topologies._kernels._compile import jit, scalar, sigmoid, tanh

__all__ = ["backward", "forward"]


@jit
def forward(gx, h0, w_t, bias, valid, has_valid, hs, gates):
    """Fill hs with h_t and gates with (r, z, n, g_n) per step."""
    steps, batch, hidden = hs.shape
    one = scalar(1, hs)
    b_r, b_z, b_n = bias[:hidden], bias[hidden:2 * hidden], bias[2 * hidden:]
    h = h0
    for t in range(steps):
        gh = np.dot(h, w_t)
        for b in range(batch):
            held = has_valid and not valid[t, b]
            # One-dimensional rows per gate: indexing rows at a computed offset inside the loop
            # kept it from vectorising (measured: half the time of the loop).
            x_r, x_z, x_n = _thirds(gx[t, b], hidden)
            h_r, h_z, h_n = _thirds(gh[b], hidden)
            s_r, s_z, s_n, s_g = _quarters(gates[t, b], hidden)
            previous, out = h[b], hs[t, b]
            for j in range(hidden):
                r = sigmoid(x_r[j] + h_r[j] + b_r[j])
                z = sigmoid(x_z[j] + h_z[j] + b_z[j])
                g_n = h_n[j] + b_n[j]
                n = tanh(x_n[j] + r * g_n)
                s_r[j], s_z[j], s_n[j], s_g[j] = r, z, n, g_n
                out[j] = previous[j] if held else (one - z) * n + z * previous[j]
        h = hs[t]


@jit
def backward(grad_hs, h0, hs, gates, w, valid, has_valid, grad_gx, grad_gh):
    """Fill grad_gx (dL/dgx_t) and grad_gh (dL/dg_t, g before the bias); return dL/dh0.

    With dh = dL/dh_t: dn = dh (1 - z), dz = dh (h_{t-1} - n), da_n = dn (1 - n^2),
    da_r = da_n g_n r (1 - r), da_z = dz z (1 - z); dL/dgx = (da_r, da_z, da_n),
    dL/dg = (da_r, da_z, da_n r), dL/dh_{t-1} = grad_hs[t-1] + dh z + dL/dg W_hh.
    Past a length the step is the identity: dL/dh_{t-1} receives dh whole.
    """
    steps, batch, hidden = hs.shape
    zero, one = scalar(0, hs), scalar(1, hs)
    dh = grad_hs[steps - 1].copy()
    direct = np.empty_like(dh)
    for t in range(steps - 1, -1, -1):
        h_prev = hs[t - 1] if t > 0 else h0
        for b in range(batch):
            held = has_valid and not valid[t, b]
            s_r, s_z, s_n, s_g = _quarters(gates[t, b], hidden)
            dx_r, dx_z, dx_n = _thirds(grad_gx[t, b], hidden)
            dg_r, dg_z, dg_n = _thirds(grad_gh[t, b], hidden)
            d_out, previous, d_direct = dh[b], h_prev[b], direct[b]
            for j in range(hidden):
                d = zero if held else d_out[j]
                r, z, n = s_r[j], s_z[j], s_n[j]
                da_n = d * (one - z) * (one - n * n)
                da_r = da_n * s_g[j] * r * (one - r)
                da_z = d * (previous[j] - n) * z * (one - z)
                dx_r[j], dx_z[j], dx_n[j] = da_r, da_z, da_n
                dg_r[j], dg_z[j], dg_n[j] = da_r, da_z, da_n * r
                d_direct[j] = d_out[j] if held else d_out[j] * z
        back = np.dot(grad_gh[t], w)
        for b in range(batch):
            for j in range(hidden):
                v = back[b, j] + direct[b, j]
                if t > 0:
                    v += grad_hs[t - 1, b, j]
                dh[b, j] = v
    return dh


@jit
def _thirds(row, hidden):
    return row[:hidden], row[hidden:2 * hidden], row[2 * hidden:3 * hidden]


@jit
def _quarters(row, hidden):
    return row[:hidden], row[hidden:2 * hidden], row[2 * hidden:3 * hidden], row[3 * hidden:]
