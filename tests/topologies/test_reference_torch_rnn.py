"""Reference checks against torch.nn's recurrent layers (the general-purpose reference library).

Source of truth: torch.nn.RNN / torch.nn.LSTM / torch.nn.GRU of the installed torch, with weights
copied into the zoo's modules; outputs, final states and every gradient must agree.
"""

from __future__ import annotations

import pytest
import torch
from torch import nn
from torch.nn.utils.rnn import pack_padded_sequence, pad_packed_sequence

import loopzoo

B, T, IN, H, OUT = 3, 7, 4, 5, 2
TOL = {"atol": 1e-10, "rtol": 1e-8}  # float64 throughout: only rounding differences remain


def _copy_rnn_layer(cell, reference: nn.RNN, layer: int) -> None:
    """torch.nn.RNN has two biases; the Elman equation has one, their sum."""
    with torch.no_grad():
        cell.weight_ih.copy_(getattr(reference, f"weight_ih_l{layer}"))
        cell.weight_hh.copy_(getattr(reference, f"weight_hh_l{layer}"))
        cell.bias.copy_(
            getattr(reference, f"bias_ih_l{layer}") + getattr(reference, f"bias_hh_l{layer}")
        )


def _reference_pair(name: str, nonlinearity: str, num_layers: int):
    torch.manual_seed(0)
    options = {"nonlinearity": nonlinearity}
    if name == "stacked":
        options["num_layers"] = num_layers
    model = loopzoo.create(name, input_size=IN, output_size=OUT, hidden_size=H, **options).double()
    rnn = nn.RNN(IN, H, num_layers=num_layers, nonlinearity=nonlinearity, batch_first=True).double()
    readout = nn.Linear(H, OUT).double()
    cells = [model.cell] if name == "hidden-feedback" else list(model.layers)
    for layer, cell in enumerate(cells):
        _copy_rnn_layer(cell, rnn, layer)
    with torch.no_grad():
        model.readout.weight.copy_(readout.weight)
        model.readout.bias.copy_(readout.bias)
    return model, rnn, readout, cells


def _cases():
    for nonlinearity in ("tanh", "relu"):
        yield "hidden-feedback", nonlinearity, 1
        for layers in (1, 2, 3):
            yield "stacked", nonlinearity, layers


@pytest.mark.parametrize(("name", "nonlinearity", "num_layers"), list(_cases()))
def test_elman_rows_match_torch_rnn(name: str, nonlinearity: str, num_layers: int) -> None:
    if name not in loopzoo.available():
        pytest.fail(f"{name} is not registered")
    model, rnn, readout, cells = _reference_pair(name, nonlinearity, num_layers)
    x = torch.randn(B, T, IN, dtype=torch.float64, requires_grad=True)
    h0 = torch.randn(num_layers, B, H, dtype=torch.float64, requires_grad=True)

    out, h_ref = rnn(x, h0)
    y_ref = readout(out)
    y, state = model(x, tuple(h0.unbind(0)))
    torch.testing.assert_close(y, y_ref, **TOL)
    torch.testing.assert_close(torch.stack(state), h_ref, **TOL)

    # Gradients of one scalar that touches every output and the final state.
    weights = torch.randn_like(y_ref)
    loss_ref = (y_ref * weights).sum() + h_ref.pow(2).sum()
    loss = (y * weights).sum() + torch.stack(state).pow(2).sum()
    grads_ref = torch.autograd.grad(loss_ref, [x, h0, *rnn.parameters(), *readout.parameters()])
    grads = torch.autograd.grad(loss, [x, h0, *model.parameters()])
    torch.testing.assert_close(grads[0], grads_ref[0], **TOL)  # dL/dx
    torch.testing.assert_close(grads[1], grads_ref[1], **TOL)  # dL/dh0
    named = dict(zip([n for n, _ in model.named_parameters()], grads[2:], strict=True))
    ref = dict(zip([n for n, _ in rnn.named_parameters()], grads_ref[2:], strict=False))
    prefixes = (
        ["cell."] if name == "hidden-feedback" else [f"layers.{k}." for k in range(num_layers)]
    )
    for layer, prefix in enumerate(prefixes):
        torch.testing.assert_close(named[prefix + "weight_ih"], ref[f"weight_ih_l{layer}"], **TOL)
        torch.testing.assert_close(named[prefix + "weight_hh"], ref[f"weight_hh_l{layer}"], **TOL)
        # Both torch biases receive the same gradient as the single summed bias.
        torch.testing.assert_close(named[prefix + "bias"], ref[f"bias_ih_l{layer}"], **TOL)
        torch.testing.assert_close(named[prefix + "bias"], ref[f"bias_hh_l{layer}"], **TOL)
    torch.testing.assert_close(named["readout.weight"], grads_ref[-2], **TOL)
    torch.testing.assert_close(named["readout.bias"], grads_ref[-1], **TOL)


@pytest.mark.parametrize("nonlinearity", ["tanh", "relu"])
def test_elman_lengths_match_torch_packed_rnn(nonlinearity: str) -> None:
    """Variable lengths against torch's packed-sequence RNN (pack_padded_sequence)."""
    model, rnn, readout, _ = _reference_pair("hidden-feedback", nonlinearity, 1)
    x = torch.randn(4, T, IN, dtype=torch.float64)
    lengths = torch.tensor([T, 1, 4, 6])
    packed = nn.utils.rnn.pack_padded_sequence(x, lengths, batch_first=True, enforce_sorted=False)
    out, h_ref = rnn(packed)
    out, _ = nn.utils.rnn.pad_packed_sequence(out, batch_first=True, total_length=T)
    y_ref = readout(out) * (torch.arange(T) < lengths[:, None]).unsqueeze(-1)
    y, (h,) = model(x, lengths=lengths)
    torch.testing.assert_close(y, y_ref, **TOL)
    torch.testing.assert_close(h, h_ref[0], **TOL)


@pytest.mark.parametrize("name", ["lstm", "gru"])
@pytest.mark.parametrize("num_layers", [1, 2])
def test_gated_rows_match_torch_layers(name: str, num_layers: int) -> None:
    torch.manual_seed(1)
    model = loopzoo.create(
        name, input_size=IN, output_size=OUT, hidden_size=H, num_layers=num_layers
    ).double()
    reference = (nn.LSTM if name == "lstm" else nn.GRU)(
        IN, H, num_layers=num_layers, batch_first=True
    ).double()
    readout = nn.Linear(H, OUT).double()
    model.rnn.load_state_dict(reference.state_dict())
    model.readout.load_state_dict(readout.state_dict())
    x = torch.randn(B, T, IN, dtype=torch.float64)
    out, hx = reference(x)
    y_ref = readout(out)
    parts = hx if isinstance(hx, tuple) else (hx,)
    state_ref = tuple(t for part in parts for t in part.unbind(0))

    y, state = model(x)
    torch.testing.assert_close(y, y_ref, **TOL)
    for got, want in zip(state, state_ref, strict=True):
        torch.testing.assert_close(got, want, **TOL)

    # The hand-written step uses the same weights: stepping reproduces torch's layer.
    ys, carried = [], None
    for t in range(T):
        y_t, carried = model.step(x[:, t], carried)
        ys.append(y_t)
    torch.testing.assert_close(torch.stack(ys, 1), y_ref, **TOL)
    for got, want in zip(carried, state_ref, strict=True):
        torch.testing.assert_close(got, want, **TOL)


@pytest.mark.parametrize("num_layers", [1, 2])
def test_gru_gradients_match_torch_gru(num_layers: int) -> None:
    """gru runs its own loops (compiled where they apply) on torch.nn.GRU's weights: outputs,
    final states and every gradient equal torch.nn.GRU's, also with lengths (packed sequences)."""
    torch.manual_seed(3)
    model = loopzoo.create(
        "gru", input_size=IN, output_size=OUT, hidden_size=H, num_layers=num_layers
    ).double()
    reference = nn.GRU(IN, H, num_layers=num_layers, batch_first=True).double()
    readout = nn.Linear(H, OUT).double()
    model.rnn.load_state_dict(reference.state_dict())
    model.readout.load_state_dict(readout.state_dict())
    x = torch.randn(B, T, IN, dtype=torch.float64, requires_grad=True)
    h0 = torch.randn(num_layers, B, H, dtype=torch.float64, requires_grad=True)
    lengths = torch.tensor([T, 4, 1])
    for given in (None, lengths):
        if given is None:
            out, h_ref = reference(x, h0)
        else:
            packed = pack_padded_sequence(x, given, batch_first=True, enforce_sorted=False)
            out, h_ref = reference(packed, h0)
            out, _ = pad_packed_sequence(out, batch_first=True, total_length=T)
        y_ref = readout(out)
        if given is not None:  # the zoo's contract: y is 0 past each length
            y_ref = y_ref.masked_fill((torch.arange(T) >= given[:, None]).unsqueeze(-1), 0.0)
        y, state = model(x, tuple(h0.unbind(0)), lengths=given)
        torch.testing.assert_close(y, y_ref, **TOL)
        torch.testing.assert_close(torch.stack(state), h_ref, **TOL)
        weights = torch.randn_like(y_ref)
        grads_ref = torch.autograd.grad(
            (y_ref * weights).sum() + h_ref.pow(2).sum(),
            [x, h0, *reference.parameters(), *readout.parameters()],
        )
        grads = torch.autograd.grad(
            (y * weights).sum() + torch.stack(state).pow(2).sum(), [x, h0, *model.parameters()]
        )
        for got, want in zip(grads, grads_ref, strict=True):
            torch.testing.assert_close(got, want, **TOL)
