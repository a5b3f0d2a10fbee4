"""hidden-feedback: the Elman network (Elman 1990, "Finding Structure in Time").

    h_t = f(U x_t + W h_{t-1} + b)        f = tanh or relu
    y_t = V h_t + c

init='identity' with nonlinearity='relu' is the IRNN of Le, Jaitly & Hinton ("A Simple Way to
Initialize Recurrent Networks of Rectified Linear Units", 2015): W starts as the identity and
the biases b, c at zero, so with no input the state is carried unchanged; U and V keep the
zoo's default initialisation.

Shapes: x (B, T, I), h_t (B, H), y (B, T, O). State: (h,).
"""

from __future__ import annotations

from typing import Any

import torch
import torch.nn.functional as F
from torch import Tensor

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
from loopzoo.topologies._options import NONLINEARITY, Option, choice

__all__ = ["HiddenFeedback"]


@register("hidden-feedback")
class HiddenFeedback(RecurrentTopology):
    """Elman network: the hidden state feeds back into itself; a linear readout gives y.

    Options: nonlinearity ('tanh' | 'relu', default 'tanh'); init ('uniform' | 'identity',
    default 'uniform': every parameter from U(-1/sqrt(H), 1/sqrt(H)); 'identity': W = I and zero
    biases, with 'relu' the IRNN of Le et al. 2015).

    >>> import loopzoo, torch
    >>> model = loopzoo.create("hidden-feedback", input_size=3, output_size=2, hidden_size=8)
    >>> y, (h,) = model(torch.randn(4, 10, 3))
    >>> y.shape, h.shape
    (torch.Size([4, 10, 2]), torch.Size([4, 8]))
    """

    option_specs = {
        "nonlinearity": NONLINEARITY,
        "init": Option("uniform", choice("uniform", "identity"), "how W and the biases start"),
    }
    # Nothing beyond the optimiser: the nonlinearity and init name the row (plain tanh, or IRNN
    # with relu and identity), so they are chosen by the user, not searched.
    tunable = {}

    def __init__(self, **sizes_and_options: Any) -> None:
        super().__init__(**sizes_and_options)
        self.cell = AdditiveRecurrence(
            self.input_size, self.hidden_size, nonlinearity=self.options["nonlinearity"]
        )
        self.readout = make_readout(self.hidden_size, self.output_size)
        uniform_init(self, self.hidden_size)
        if self.options["init"] == "identity":
            with torch.no_grad():
                self.cell.weight_hh.copy_(torch.eye(self.hidden_size))
                self.cell.bias.zero_()
                self.readout.bias.zero_()

    def state_sizes(self) -> tuple[int, ...]:
        return (self.hidden_size,)

    def _sequence(self, x: Tensor, state: State, valid: Tensor | None) -> tuple[Tensor, State]:
        hs, final = self.cell.sequence(x.transpose(0, 1), state[0], time_major_mask(valid))
        return batch_first(self.readout(hs)), (final,)  # hs: (T, B, H)

    def step_unchecked(self, x_t: Tensor, state: State) -> tuple[Tensor, State]:
        h, readout = self.cell.step(x_t, state[0]), self.readout
        # The readout's function, not its module call: a streamed sample pays for every call.
        return F.linear(h, readout.weight, readout.bias), (h,)
