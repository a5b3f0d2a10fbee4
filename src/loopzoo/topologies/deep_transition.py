"""deep-transition: an MLP as the state transition, optional deep output and shortcut.

Pascanu, Gulcehre, Cho & Bengio, "How to Construct Deep Recurrent Neural Networks", ICLR 2014
(equations from memory of its section 3). With L = transition_depth, K = output_depth:

    z^1_t = f(U x_t + W h_{t-1} + b_1)
    z^l_t = f(W_l z^{l-1}_t + b_l)                          l = 2..L
            (+ S h_{t-1} + U_s x_t inside f at l = L when shortcut=True: DT(S)-RNN)
    h_t   = z^L_t
    y_t   = V_K f(... f(V_1 h_t + c_1) ...) + c_K           (K = 1: linear readout)

L > 1, K = 1: DT-RNN; L > 1 with shortcut: DT(S)-RNN; L = 1, K > 1: DO-RNN; both > 1: DOT-RNN.
Every intermediate layer has width H. Shapes: x (B, T, I), h_t (B, H), y (B, T, O). State: (h,).
"""

from __future__ import annotations

from typing import Any

import torch
from torch import Tensor, nn

from loopzoo.topologies import _kernels
from loopzoo.topologies._base import (
    RecurrentTopology,
    State,
    activation,
    batch_first,
    make_readout,
    project_time_major,
    register,
    scan,
    time_major_mask,
    uniform_init,
)
from loopzoo.topologies._options import NONLINEARITY, Option, boolean, integer
from loopzoo.topologies._search import Choices, IntegerRange
from loopzoo.topologies._transition import transition_scan

__all__ = ["DeepTransition"]


@register("deep-transition")
class DeepTransition(RecurrentTopology):
    """DT / DT(S) / DO / DOT recurrent network.

    Options: nonlinearity ('tanh' | 'relu'), transition_depth L >= 1 (default 2),
    output_depth K >= 1 (default 1), shortcut (default False; needs L >= 2).

    >>> import loopzoo, torch
    >>> model = loopzoo.create("deep-transition", input_size=3, output_size=2, hidden_size=8,
    ...                        transition_depth=3, output_depth=2, shortcut=True)
    >>> y, (h,) = model(torch.randn(4, 10, 3))
    >>> y.shape
    torch.Size([4, 10, 2])
    """

    option_specs = {
        "nonlinearity": NONLINEARITY,
        "transition_depth": Option(2, integer(1), "layers of the state-transition MLP"),
        "output_depth": Option(1, integer(1), "layers of the readout MLP (1: linear)"),
        "shortcut": Option(False, boolean(), "h_{t-1} and x_t also enter the last layer"),
    }
    # A transition of two layers is what makes it deep; a linear readout is the shallowest.
    tunable = {
        "transition_depth": IntegerRange(2, 4, hard=("low",)),
        "output_depth": IntegerRange(1, 3, hard=("low",)),
        "shortcut": Choices((False, True)),
    }

    def __init__(self, **sizes_and_options: Any) -> None:
        super().__init__(**sizes_and_options)
        depth, shortcut = self.options["transition_depth"], self.options["shortcut"]
        if shortcut and depth < 2:
            raise ValueError(
                "'deep-transition' option shortcut=True skips intermediate layers; it needs "
                f"transition_depth >= 2, got {depth}"
            )
        hidden = self.hidden_size
        self.activation = activation(self.options["nonlinearity"])
        # Rows [0, H) feed the first layer; with shortcut, rows [H, 2H) feed the last layer, so
        # one product per step serves both.
        rows = hidden * (2 if shortcut else 1)
        self.weight_ih = nn.Parameter(torch.empty(rows, self.input_size))
        self.weight_hh = nn.Parameter(torch.empty(rows, hidden))
        self.bias = nn.Parameter(torch.empty(hidden))
        self.transition = nn.ModuleList(nn.Linear(hidden, hidden) for _ in range(depth - 1))
        self.readout = make_readout(
            hidden, self.output_size, depth=self.options["output_depth"],
            nonlinearity=self.options["nonlinearity"],
        )
        uniform_init(self, hidden)

    def state_sizes(self) -> tuple[int, ...]:
        return (self.hidden_size,)

    def _project(self, x_tm: Tensor) -> Tensor:
        """x (T, B, I) -> U x + b (T, B, H), or with shortcut [U x + b; U_s x] (T, B, 2H)."""
        bias = self.bias
        if self.options["shortcut"]:
            bias = torch.cat([bias, bias.new_zeros(self.hidden_size)])  # U_s x has no bias
        return project_time_major(x_tm, self.weight_ih, bias, time_major=True)

    def _transition(self, u_t: Tensor, h: Tensor) -> Tensor:
        hidden, shortcut = self.hidden_size, self.options["shortcut"]
        a = torch.addmm(u_t, h, self.weight_hh.t())  # (B, H), or (B, 2H) with the shortcut
        z = self.activation(a[:, :hidden] if shortcut else a)
        last = len(self.transition) - 1
        for index, layer in enumerate(self.transition):
            pre = layer(z)
            if shortcut and index == last:
                pre = pre + a[:, hidden:]
            z = self.activation(pre)
        return z

    def _sequence(self, x: Tensor, state: State, valid: Tensor | None) -> tuple[Tensor, State]:
        u, valid_tm = self._project(x.transpose(0, 1)), time_major_mask(valid)
        if _kernels.applies(u):  # compiled loop (_transition.py); it holds h past lengths
            hs = transition_scan(
                u, state[0], self.weight_hh, self.transition, valid_tm,
                shortcut=self.options["shortcut"], nonlinearity=self.options["nonlinearity"],
            )
            return batch_first(self.readout(hs)), (hs[-1],)

        def cell(u_t: Tensor, carried: State) -> tuple[Tensor, State]:
            h = self._transition(u_t, carried[0])
            return h, (h,)

        hs, final = scan(cell, u, state, valid_tm)
        return batch_first(self.readout(hs)), final

    def step_unchecked(self, x_t: Tensor, state: State) -> tuple[Tensor, State]:
        h = self._transition(self._project(x_t.unsqueeze(0))[0], state[0])
        return self.readout(h), (h,)
