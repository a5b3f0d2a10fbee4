"""Compiled loops of deep-transition's MLP transition (Pascanu et al. 2014, DT / DT(S)).

    a_t = u_t + W h_{t-1}                 (H rows, or 2H with the shortcut: [first; last layer])
    z^1 = f(a_t[:H]);   z^l = f(W_l z^{l-1} + b_l (+ a_t[H:] at l = L with the shortcut))
    h_t = z^L                             (held past a length)

Arrays: u (T, B, R) projections with bias, R = H or 2H; h0 (B, H); w_t = W^T (H, R), w = W
(R, H); layer_w_t (L-1, H, H) the W_l^T, layer_w (L-1, H, H) the W_l; layer_b (L-1, H);
valid (T, B) bool, read only when has_valid; zs (L, T, B, H) every layer's output; hs (T, B, H)
held states; grad_a (T, B, R) = dL/da_t; grad_pre (L-1, T, B, H) = dL/d(pre-activation of l >= 2).
"""

from __future__ import annotations

import numpy as np

from loopzoo.topologies._kernels._compile import jit, scalar, tanh

__all__ = ["backward", "forward"]


@jit
def _activate(pre, out, relu):
    """out = f(pre), elementwise over (B, H)."""
    batch, hidden = out.shape
    zero = scalar(0, out)
    for b in range(batch):
        for j in range(hidden):
            x = pre[b, j]
            out[b, j] = (x if x > zero else x * zero) if relu else tanh(x)


@jit
def forward(u, h0, w_t, layer_w_t, layer_b, shortcut, relu, valid, has_valid, zs, hs):
    """Fill zs with every layer's output and hs with the held states."""
    depth, steps, batch, hidden = zs.shape
    h = h0
    for t in range(steps):
        a = np.dot(h, w_t)
        u_t = u[t]
        for b in range(batch):
            for j in range(a.shape[1]):
                a[b, j] += u_t[b, j]
        _activate(a[:, :hidden], zs[0, t], relu)
        for k in range(1, depth):
            pre = np.dot(zs[k - 1, t], layer_w_t[k - 1])
            for b in range(batch):
                for j in range(hidden):
                    pre[b, j] += layer_b[k - 1, j]
                    if shortcut and k == depth - 1:
                        pre[b, j] += a[b, hidden + j]
            _activate(pre, zs[k, t], relu)
        new, h_t = zs[depth - 1, t], hs[t]
        for b in range(batch):
            held = has_valid and not valid[t, b]
            for j in range(hidden):
                h_t[b, j] = h[b, j] if held else new[b, j]
        h = h_t


@jit
def _through_activation(dz, z, relu, held_rows, out):
    """out = dz f'(.) from the output z = f(.); rows of held sequences get 0."""
    batch, hidden = z.shape
    zero, one = scalar(0, z), scalar(1, z)
    for b in range(batch):
        for j in range(hidden):
            v = z[b, j]
            slope = (one if v > zero else zero) if relu else one - v * v
            out[b, j] = zero if held_rows[b] else dz[b, j] * slope


@jit
def backward(grad_hs, zs, w, layer_w, shortcut, relu, valid, has_valid, grad_a, grad_pre):
    """Fill grad_a and grad_pre; return dL/dh0. Past a length the step is the identity."""
    depth, steps, batch, hidden = zs.shape
    dh = grad_hs[steps - 1].copy()
    held = np.zeros(batch, dtype=np.bool_)
    for t in range(steps - 1, -1, -1):
        for b in range(batch):
            held[b] = has_valid and not valid[t, b]
        dz = dh
        for k in range(depth - 1, 0, -1):
            _through_activation(dz, zs[k, t], relu, held, grad_pre[k - 1, t])
            dz = np.dot(grad_pre[k - 1, t], layer_w[k - 1])
        da_t = grad_a[t]
        _through_activation(dz, zs[0, t], relu, held, da_t[:, :hidden])
        if shortcut:
            da_t[:, hidden:] = grad_pre[depth - 2, t]
        back = np.dot(da_t, w)
        for b in range(batch):
            for j in range(hidden):
                v = back[b, j]
                if held[b]:
                    v += dh[b, j]
                if t > 0:
                    v += grad_hs[t - 1, b, j]
                back[b, j] = v
        dh = back
    return dh
