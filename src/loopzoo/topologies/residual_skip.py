"""residual-skip: the previous state is added back at every step, and skips join stacked layers.

    scaled:  h_t = h_{t-1} + s · f(U x_t + W h_{t-1} + b)
    gated:   h_t = h_{t-1} + σ(U_g x_t + W_g h_{t-1} + b_g) ⊙ f(U x_t + W h_{t-1} + b)
    layers:  layer 1 reads x_t; layer l > 1 reads z^{l-1}_t, where z^1 = h^1, z^l = h^l + z^{l-1}
    y_t = V z^L_t + c

With s = 1 this is a one-layer Recurrent Highway Network with both gates open (Zilly et al. 2017);
residual recurrent layers for sequence classification: Wang & Tian, EMNLP 2016. The additive path
keeps dL/dh_{t-k} from shrinking geometrically with k (common practice). The gated form is the
default: the scaled form with s = 1 is an unbounded integrator whose gradient grows with the lag
and which stayed at the memoryless level on the adding problem where the gated form solved it
(benchmarks/RESULTS.md, "residual-skip default").

Shapes: x (B, T, I), h^l_t (B, H), y (B, T, O). State: (h^1, ..., h^L).
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
from loopzoo.topologies._elman import AdditiveRecurrence
from loopzoo.topologies._options import NONLINEARITY, Option, choice, num_layers, real
from loopzoo.topologies._residual_gate import gated_residual_scan
from loopzoo.topologies._search import Choices, IntegerRange, RealRange

__all__ = ["GatedResidualRecurrence", "ResidualSkip"]


class GatedResidualRecurrence(nn.Module):
    """One layer of h_t = h_{t-1} + σ(gate) ⊙ f(candidate); both from [x_t; h_{t-1}].

    Parameters: weight_ih (2H, I), weight_hh (2H, H), bias (2H,), candidate rows first.
    ``sequence``: time-major (T, B, I) -> (T, B, H).
    """

    def __init__(self, input_size: int, hidden_size: int, *, nonlinearity: str) -> None:
        super().__init__()
        self.weight_ih = nn.Parameter(torch.empty(2 * hidden_size, input_size))
        self.weight_hh = nn.Parameter(torch.empty(2 * hidden_size, hidden_size))
        self.bias = nn.Parameter(torch.empty(2 * hidden_size))
        self.nonlinearity, self.activation = nonlinearity, activation(nonlinearity)

    def _update(self, projected: Tensor, h: Tensor) -> Tensor:
        candidate, gate = (projected + h @ self.weight_hh.t()).chunk(2, dim=-1)
        return h + torch.sigmoid(gate) * self.activation(candidate)

    def sequence(
        self, x_tm: Tensor, h0: Tensor, valid_tm: Tensor | None
    ) -> tuple[Tensor, Tensor]:
        """Time-major x (T, B, I), h0 (B, H), valid (T, B, 1) or None -> (h (T, B, H), final h).

        Past a sequence's length the per-step h are not held (they are masked downstream);
        the final h is the state after each sequence's last valid step.
        """
        projected = project_time_major(x_tm, self.weight_ih, self.bias, time_major=True)
        if _kernels.applies(projected):  # compiled loop (_residual_gate.py); it holds h
            hs = gated_residual_scan(
                projected, h0, self.weight_hh, valid_tm, nonlinearity=self.nonlinearity
            )
            return hs, hs[-1]

        def cell(u_t: Tensor, state: State) -> tuple[Tensor, State]:
            h = self._update(u_t, state[0])
            return h, (h,)

        outputs, (final,) = scan(cell, projected, (h0,), valid_tm)
        return outputs, final

    def step(self, x_t: Tensor, h: Tensor) -> Tensor:
        """One step: x_t (B, I), h (B, H) -> h (B, H)."""
        return self._update(torch.addmm(self.bias, x_t, self.weight_ih.t()), h)


@register("residual-skip")
class ResidualSkip(RecurrentTopology):
    """Residual recurrence (scaled or gated) with skips across stacked layers.

    Options: nonlinearity ('tanh' | 'relu'), mode ('gated' | 'scaled', default 'gated'),
    scale s in (0, 1] for mode='scaled' (default 1.0), num_layers (default 1).

    >>> import loopzoo, torch
    >>> model = loopzoo.create("residual-skip", input_size=3, output_size=2, hidden_size=8)
    >>> y, (h,) = model(torch.randn(4, 10, 3))
    >>> y.shape
    torch.Size([4, 10, 2])
    """

    option_specs = {
        "nonlinearity": NONLINEARITY,
        "mode": Option("gated", choice("gated", "scaled"), "how the update is weighted"),
        "scale": Option(1.0, real(0.0, 1.0, low_open=True), "s for mode='scaled'"),
        "num_layers": num_layers(1),
    }
    # scale <= 1 is the option's own limit; the scale applies to mode 'scaled' only.
    tunable = {
        "mode": Choices(("scaled", "gated")),
        "scale": RealRange(0.03, 1.0, log=True, hard=("high",), only_if={"mode": ("scaled",)}),
        "num_layers": IntegerRange(1, 4, hard=("low",)),
    }

    def __init__(self, **sizes_and_options: Any) -> None:
        super().__init__(**sizes_and_options)
        mode, scale = self.options["mode"], self.options["scale"]
        if mode == "gated" and scale != 1.0:
            raise ValueError(
                f"'residual-skip' option scale={scale} applies only to mode='scaled'; the gate "
                "sets the step size in mode='gated'"
            )
        nonlinearity = self.options["nonlinearity"]

        def layer(inputs: int) -> nn.Module:
            if mode == "gated":
                return GatedResidualRecurrence(inputs, self.hidden_size, nonlinearity=nonlinearity)
            return AdditiveRecurrence(
                inputs, self.hidden_size, nonlinearity=nonlinearity, carry=True, scale=scale
            )

        self.layers = nn.ModuleList(
            layer(self.input_size if k == 0 else self.hidden_size)
            for k in range(self.options["num_layers"])
        )
        self.readout = make_readout(self.hidden_size, self.output_size)
        uniform_init(self, self.hidden_size)

    def state_sizes(self) -> tuple[int, ...]:
        return (self.hidden_size,) * self.options["num_layers"]

    def _sequence(self, x: Tensor, state: State, valid: Tensor | None) -> tuple[Tensor, State]:
        signal, valid_tm, finals = x.transpose(0, 1), time_major_mask(valid), []
        for k, layer in enumerate(self.layers):
            hs, final = layer.sequence(signal, state[k], valid_tm)  # (T, B, H), (B, H)
            finals.append(final)
            signal = hs if k == 0 else hs + signal
        return batch_first(self.readout(signal)), tuple(finals)

    def step_unchecked(self, x_t: Tensor, state: State) -> tuple[Tensor, State]:
        signal, new_state = x_t, []
        for k, layer in enumerate(self.layers):
            h = layer.step(signal, state[k])
            new_state.append(h)
            signal = h if k == 0 else h + signal
        return self.readout(signal), tuple(new_state)
