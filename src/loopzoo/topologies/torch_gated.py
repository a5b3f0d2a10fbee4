"""lstm and gru: the gated layers of torch.nn.LSTM / torch.nn.GRU as reference rows.

LSTM (Hochreiter & Schmidhuber 1997, with forget gate), per layer:
    i, f, g, o = σ(W_i[x;h]), σ(W_f[x;h]), tanh(W_g[x;h]), σ(W_o[x;h])   (biases omitted)
    c_t = f ⊙ c_{t-1} + i ⊙ g;   h_t = o ⊙ tanh(c_t)
GRU (Cho et al. 2014), per layer:
    r, z = σ(W_r[x;h]), σ(W_z[x;h]);  n = tanh(W_in x + r ⊙ (W_hn h));  h_t = (1 - z) ⊙ n + z ⊙ h
Readout y_t = V h^{top}_t + c.

Shapes: x (B, T, I), y (B, T, O). State: (h_1..h_L) for gru and (h_1..h_L, c_1..c_L) for lstm,
each (B, H). The parameters live in a torch.nn.LSTM / torch.nn.GRU. ``forward`` of lstm runs
torch's fused layer (packed sequences for ``lengths``); ``forward`` of gru runs the same
equations in compiled loops (``_gru.py``; torch's CPU GRU is several times slower than its
LSTM) where compiled loops apply, else torch's layer. ``step`` writes the cell equations with
the same weights so it exports as plain tensor algebra.
"""

from __future__ import annotations

from typing import Any, ClassVar

import torch
from torch import Tensor, nn
from torch.nn.functional import dropout
from torch.nn.utils.rnn import pack_padded_sequence, pad_packed_sequence

from loopzoo.topologies import _kernels
from loopzoo.topologies._base import (
    RecurrentTopology,
    State,
    batch_first,
    make_readout,
    register,
    time_major_mask,
    uniform_init,
)
from loopzoo.topologies._gru import gru_layers
from loopzoo.topologies._options import DROPOUT, check_dropout_layers, num_layers
from loopzoo.topologies._search import IntegerRange, RealRange

__all__ = ["GRU", "LSTM"]


class _TorchGated(RecurrentTopology):
    """Shared wrapper: torch.nn.LSTM / torch.nn.GRU (batch first) plus a linear readout."""

    layer_class: ClassVar[type[nn.RNNBase]]
    states_per_layer: ClassVar[int]
    option_specs = {"num_layers": num_layers(1), "dropout": DROPOUT}
    # Dropout acts between layers, so it is searched only with two or more.
    tunable = {
        "num_layers": IntegerRange(1, 3, hard=("low",)),
        "dropout": RealRange(0.0, 0.3, hard=("low",), only_if={"num_layers": (2, 3)}),
    }

    def __init__(self, **sizes_and_options: Any) -> None:
        super().__init__(**sizes_and_options)
        layers, rate = self.options["num_layers"], self.options["dropout"]
        check_dropout_layers(repr(self.topology), rate, layers)
        self.rnn = self.layer_class(
            self.input_size, self.hidden_size, num_layers=layers, dropout=rate, batch_first=True
        )
        self.readout = make_readout(self.hidden_size, self.output_size)
        uniform_init(self, self.hidden_size)

    def state_sizes(self) -> tuple[int, ...]:
        return (self.hidden_size,) * (self.options["num_layers"] * self.states_per_layer)

    def _to_torch(self, state: State) -> Tensor | tuple[Tensor, Tensor]:
        """Our flat tuple of (B, H) tensors -> torch's (L, B, H) layout."""
        layers = self.options["num_layers"]
        stacked = [torch.stack(state[i * layers:(i + 1) * layers]) for i in
                   range(self.states_per_layer)]
        return stacked[0] if len(stacked) == 1 else (stacked[0], stacked[1])

    def _from_torch(self, hx: Tensor | tuple[Tensor, ...]) -> State:
        parts = hx if isinstance(hx, tuple) else (hx,)
        return tuple(t for part in parts for t in part.unbind(0))

    def _sequence(self, x: Tensor, state: State, valid: Tensor | None) -> tuple[Tensor, State]:
        hx = self._to_torch(state)
        if valid is None:
            out, final = self.rnn(x, hx)
            return self.readout(out), self._from_torch(final)
        lengths = valid.sum(dim=1)
        # Packing refuses empty sequences: run them one step, then restore their initial state
        # (their outputs are masked to zero by the base).
        packed = pack_padded_sequence(
            x, lengths.clamp(min=1).cpu(), batch_first=True, enforce_sorted=False
        )
        out, final = self.rnn(packed, hx)
        out, _ = pad_packed_sequence(out, batch_first=True, total_length=x.shape[1])
        empty = (lengths == 0).unsqueeze(1)
        held = tuple(
            torch.where(empty, old, new)
            for new, old in zip(self._from_torch(final), state, strict=True)
        )
        return self.readout(out), held

    def step_unchecked(self, x_t: Tensor, state: State) -> tuple[Tensor, State]:
        layers = self.options["num_layers"]
        inputs, new_state = x_t, []
        for layer in range(layers):
            if layer > 0:
                inputs = dropout(inputs, self.options["dropout"], self.training)
            own = tuple(state[i * layers + layer] for i in range(self.states_per_layer))
            gates_x = torch.addmm(
                getattr(self.rnn, f"bias_ih_l{layer}"), inputs,
                getattr(self.rnn, f"weight_ih_l{layer}").t(),
            )
            gates_h = torch.addmm(
                getattr(self.rnn, f"bias_hh_l{layer}"), own[0],
                getattr(self.rnn, f"weight_hh_l{layer}").t(),
            )
            updated = self._cell(gates_x, gates_h, own)
            new_state.append(updated)
            inputs = updated[0]
        flat = tuple(new_state[layer][i] for i in range(self.states_per_layer)
                     for layer in range(layers))
        return self.readout(inputs), flat

    @staticmethod
    def _cell(gates_x: Tensor, gates_h: Tensor, own: State) -> State:
        raise NotImplementedError


@register("lstm")
class LSTM(_TorchGated):
    """torch.nn.LSTM with a linear readout, in the zoo's interface.

    Options: num_layers (default 1), dropout between layers (default 0.0).

    >>> import loopzoo, torch
    >>> model = loopzoo.create("lstm", input_size=3, output_size=2, hidden_size=8)
    >>> y, (h, c) = model(torch.randn(4, 10, 3))
    >>> y.shape, c.shape
    (torch.Size([4, 10, 2]), torch.Size([4, 8]))
    """

    layer_class = nn.LSTM
    states_per_layer = 2

    @staticmethod
    def _cell(gates_x: Tensor, gates_h: Tensor, own: State) -> State:
        i, f, g, o = (gates_x + gates_h).chunk(4, dim=1)
        c = torch.sigmoid(f) * own[1] + torch.sigmoid(i) * torch.tanh(g)
        return torch.sigmoid(o) * torch.tanh(c), c


@register("gru")
class GRU(_TorchGated):
    """The GRU of torch.nn.GRU (compiled loops on its weights) with a linear readout.

    Options: num_layers (default 1), dropout between layers (default 0.0).

    >>> import loopzoo, torch
    >>> model = loopzoo.create("gru", input_size=3, output_size=2, hidden_size=8)
    >>> y, (h,) = model(torch.randn(4, 10, 3))
    >>> y.shape, h.shape
    (torch.Size([4, 10, 2]), torch.Size([4, 8]))
    """

    layer_class = nn.GRU
    states_per_layer = 1

    def _sequence(self, x: Tensor, state: State, valid: Tensor | None) -> tuple[Tensor, State]:
        if not _kernels.applies(x):
            return super()._sequence(x, state, valid)
        hs, finals = gru_layers(
            self.rnn, x.transpose(0, 1), state, time_major_mask(valid), self.training
        )
        return batch_first(self.readout(hs)), finals

    @staticmethod
    def _cell(gates_x: Tensor, gates_h: Tensor, own: State) -> State:
        x_r, x_z, x_n = gates_x.chunk(3, dim=1)
        h_r, h_z, h_n = gates_h.chunk(3, dim=1)
        r = torch.sigmoid(x_r + h_r)
        z = torch.sigmoid(x_z + h_z)
        n = torch.tanh(x_n + r * h_n)
        return ((1.0 - z) * n + z * own[0],)
