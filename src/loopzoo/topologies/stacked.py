"""stacked: several Elman layers, each feeding the next and itself (sRNN, Pascanu et al. 2014).

    h^1_t = f(U_1 x_t     + W_1 h^1_{t-1} + b_1)
    h^l_t = f(U_l h^{l-1}_t + W_l h^l_{t-1} + b_l)      l = 2..L   (dropout on h^{l-1} in training)
    y_t   = V h^L_t + c

Shapes: x (B, T, I), h^l_t (B, H), y (B, T, O). State: (h^1, ..., h^L). Layer by layer, as
torch.nn.RNN(num_layers=L) computes it (with one bias per layer, the sum of torch's two).
"""

from __future__ import annotations

from typing import Any

from torch import Tensor, nn
from torch.nn.functional import dropout

from loopzoo.topologies._base import (
    RecurrentTopology,
    State,
    batch_first,
    make_readout,
    register,
    time_major_mask,
    uniform_init,
)
from loopzoo.topologies._elman import AdditiveRecurrence
from loopzoo.topologies._options import DROPOUT, NONLINEARITY, check_dropout_layers, num_layers
from loopzoo.topologies._search import IntegerRange, RealRange

__all__ = ["Stacked"]


@register("stacked")
class Stacked(RecurrentTopology):
    """Stacked Elman layers with a linear readout on the top layer.

    Options: nonlinearity ('tanh' | 'relu'), num_layers (default 2), dropout between layers
    (default 0.0).

    >>> import loopzoo, torch
    >>> model = loopzoo.create("stacked", input_size=3, output_size=2, hidden_size=8)
    >>> y, state = model(torch.randn(4, 10, 3))
    >>> y.shape, len(state)
    (torch.Size([4, 10, 2]), 2)
    """

    option_specs = {"nonlinearity": NONLINEARITY, "num_layers": num_layers(2), "dropout": DROPOUT}
    # Two layers are what makes it stacked; no dropout is the option's own limit.
    tunable = {
        "num_layers": IntegerRange(2, 4, hard=("low",)),
        "dropout": RealRange(0.0, 0.3, hard=("low",)),
    }

    def __init__(self, **sizes_and_options: Any) -> None:
        super().__init__(**sizes_and_options)
        layers = self.options["num_layers"]
        check_dropout_layers(repr(self.topology), self.options["dropout"], layers)
        self.layers = nn.ModuleList(
            AdditiveRecurrence(
                self.input_size if k == 0 else self.hidden_size,
                self.hidden_size,
                nonlinearity=self.options["nonlinearity"],
            )
            for k in range(layers)
        )
        self.readout = make_readout(self.hidden_size, self.output_size)
        uniform_init(self, self.hidden_size)

    def state_sizes(self) -> tuple[int, ...]:
        return (self.hidden_size,) * self.options["num_layers"]

    def _between_layers(self, signal: Tensor, layer: int) -> Tensor:
        rate = self.options["dropout"]
        if layer == 0 or rate == 0.0:
            return signal
        return dropout(signal, rate, self.training)

    def _sequence(self, x: Tensor, state: State, valid: Tensor | None) -> tuple[Tensor, State]:
        signal, valid_tm, finals = x.transpose(0, 1), time_major_mask(valid), []
        for k, layer in enumerate(self.layers):
            signal, final = layer.sequence(self._between_layers(signal, k), state[k], valid_tm)
            finals.append(final)
        return batch_first(self.readout(signal)), tuple(finals)

    def step_unchecked(self, x_t: Tensor, state: State) -> tuple[Tensor, State]:
        signal, new_state = x_t, []
        for k, layer in enumerate(self.layers):
            signal = layer.step(self._between_layers(signal, k), state[k])
            new_state.append(signal)
        return self.readout(signal), tuple(new_state)
