"""Compiled loops of output feedback run free or by scheduled sampling (output-feedback).

    a_t = u_t + W o_{t-d}   (per channel c, the value fed d_c steps earlier)
    h_t = f(a_t);   y_t = V h_t + c;   o_t = target_t if coin_t else feed(y_t)

feed: 0 value, 1 detached (no gradient), 2 softmax, 3 one-hot of the argmax (no gradient).
Values fed before the sequence come from the state line (B, D*O): block k holds o_{-1-k}.
Past a sequence's length nothing is fed and y_t is 0 (the valid steps are a prefix).

Arrays: u (T, B, H) with bias; line0 (B, D*O); delays (O,) int64; w_t = W^T (O, H), w = W
(H, O); v_t = V^T (H, O), v = V (O, H); c (O,); targets (T, B, O) and coins (T, B) bool, read
only when forcing; lengths (B,) int64 valid steps; outputs inputs (T, B, O) the values read,
hs (T, B, H), ys and fed (T, B, O), line (B, D*O) the final state line.
"""

from __future__ import annotations

import numpy as np

from loopzoo.topologies._kernels._compile import jit, scalar, tanh

__all__ = ["backward", "forward"]


@jit
def _read(t, b, c, delay, fed, line0, outputs):
    """o_{t-delay}[c] of sequence b: a fed value, or from the initial line."""
    if t - delay >= 0:
        return fed[t - delay, b, c]
    return line0[b, (delay - 1 - t) * outputs + c]


@jit
def forward(u, line0, delays, w_t, v_t, c, feed, relu, targets, coins, forcing, lengths,
            inputs, hs, ys, fed, line):
    """Fill inputs (the o_{t-d} read at each step), hs, ys, fed and the final line."""
    steps, batch, hidden = hs.shape
    outputs = ys.shape[2]
    zero, one = scalar(0, hs), scalar(1, hs)
    for t in range(steps):
        inp = inputs[t]
        for b in range(batch):
            for k in range(outputs):
                inp[b, k] = _read(t, b, k, delays[k], fed, line0, outputs)
        a = np.dot(inp, w_t)
        h_t = hs[t]
        for b in range(batch):
            for j in range(hidden):
                x = a[b, j] + u[t, b, j]
                h_t[b, j] = (x if x > zero else x * zero) if relu else tanh(x)
        y = np.dot(h_t, v_t)
        for b in range(batch):
            if t >= lengths[b]:
                for k in range(outputs):
                    ys[t, b, k], fed[t, b, k] = zero, zero
                continue
            for k in range(outputs):
                ys[t, b, k] = y[b, k] + c[k]
            if forcing and coins[t, b]:
                for k in range(outputs):
                    fed[t, b, k] = targets[t, b, k]
            elif feed <= 1:
                for k in range(outputs):
                    fed[t, b, k] = ys[t, b, k]
            elif feed == 2:
                top = ys[t, b, 0]
                for k in range(outputs):
                    top = max(top, ys[t, b, k])
                total = zero
                for k in range(outputs):
                    e = np.exp(ys[t, b, k] - top)
                    fed[t, b, k] = e
                    total += e
                for k in range(outputs):
                    fed[t, b, k] /= total
            else:
                best = 0
                for k in range(outputs):
                    if ys[t, b, k] > ys[t, b, best]:
                        best = k
                for k in range(outputs):
                    fed[t, b, k] = one if k == best else zero
    depth = line0.shape[1] // outputs
    for b in range(batch):
        for block in range(depth):
            step = lengths[b] - 1 - block
            for k in range(outputs):
                if step >= 0:
                    line[b, block * outputs + k] = fed[step, b, k]
                else:
                    line[b, block * outputs + k] = line0[b, (-1 - step) * outputs + k]


@jit
def backward(grad_ys, grad_line, lengths, delays, hs, ys, fed, w, v, feed, relu, coins, forcing,
             grad_a, grad_y, grad_fed, grad_line0, grad_targets):
    """Fill grad_a = dL/da_t (T, B, H), grad_y = dL/dy_t through every path (T, B, O),
    grad_fed = dL/do_t (T, B, O), grad_line0 (B, D*O), grad_targets (T, B, O) (if forcing)."""
    steps, batch, hidden = hs.shape
    outputs = ys.shape[2]
    zero, one = scalar(0, hs), scalar(1, hs)
    depth = grad_line.shape[1] // outputs
    grad_fed[:] = zero
    grad_line0[:] = zero
    for b in range(batch):
        for block in range(depth):
            step = lengths[b] - 1 - block
            for k in range(outputs):
                g = grad_line[b, block * outputs + k]
                if step >= 0:
                    grad_fed[step, b, k] += g
                else:
                    grad_line0[b, (-1 - step) * outputs + k] += g
    for t in range(steps - 1, -1, -1):
        dy = grad_y[t]
        for b in range(batch):
            if t >= lengths[b]:
                for k in range(outputs):
                    dy[b, k] = zero
                continue
            coin = forcing and coins[t, b]
            for k in range(outputs):
                dy[b, k] = grad_ys[t, b, k]
                if coin:
                    grad_targets[t, b, k] += grad_fed[t, b, k]
            if coin or feed == 1 or feed == 3:
                continue
            if feed == 0:
                for k in range(outputs):
                    dy[b, k] += grad_fed[t, b, k]
            else:  # softmax: dy += p (do - <do, p>)
                inner = zero
                for k in range(outputs):
                    inner += grad_fed[t, b, k] * fed[t, b, k]
                for k in range(outputs):
                    dy[b, k] += fed[t, b, k] * (grad_fed[t, b, k] - inner)
        dh = np.dot(dy, v)
        da_t = grad_a[t]
        for b in range(batch):
            for j in range(hidden):
                z = hs[t, b, j]
                slope = (one if z > zero else zero) if relu else one - z * z
                da_t[b, j] = dh[b, j] * slope
        dinp = np.dot(da_t, w)
        for b in range(batch):
            for k in range(outputs):
                delay = delays[k]
                if t - delay >= 0:
                    grad_fed[t - delay, b, k] += dinp[b, k]
                else:
                    grad_line0[b, (delay - 1 - t) * outputs + k] += dinp[b, k]
