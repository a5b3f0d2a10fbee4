"""The exportable graphs of a loopzoo module, with their tensor names and dynamic dimensions.

- ``step``: ``(x_t, state_0, ..) -> (y_t, next_state_0, ..)``, dynamic batch. Every topology.
- ``sequence``: ``(x, state_0, ..) -> (y, final_state_0, ..)``, dynamic batch and time. The time
  loop is ``loopzoo._torch_scan.scan`` over the step (torch's private, prototype scan): a
  Python loop would freeze the traced length. For output feedback this is free running.
- ``sequence-teacher-forced``: ``(x, targets, state_0, ..) -> (y, final_state_0, ..)`` for
  topologies that feed back outputs: their teacher-forced pass has no time loop to freeze.

All tensors are batch first: x_t (B, input_size), x (B, T, input_size), y (B, T, output_size),
targets (B, T, output_size) floats (one-hot rows for class outputs), state as ``init_state(B)``.
"""

from __future__ import annotations

from dataclasses import dataclass

import torch
from torch.export import Dim

from loopzoo._registry import unknown_choice
from loopzoo._torch_scan import scan

__all__ = ["GRAPHS", "GraphSpec", "graph_spec", "graphs_for"]

GRAPHS = ("step", "sequence", "sequence-teacher-forced")

# Traced with a batch of 2 and 3 steps: torch.export specialises dimensions of size 0 or 1.
_TRACE_BATCH = 2
_TRACE_TIME = 3


class _StepGraph(torch.nn.Module):
    def __init__(self, model: torch.nn.Module) -> None:
        super().__init__()
        self.model = model

    def forward(self, x_t: torch.Tensor, state: tuple[torch.Tensor, ...]):
        # ``step_unchecked``, not ``step``: step refuses NaN input by a data-dependent test that
        # cannot be traced; the graph's typed, shaped inputs stand in for its other checks.
        y_t, next_state = self.model.step_unchecked(x_t, tuple(state))
        return (y_t, *next_state)


class _SequenceGraph(torch.nn.Module):
    def __init__(self, model: torch.nn.Module) -> None:
        super().__init__()
        self.model = model

    def forward(self, x: torch.Tensor, state: tuple[torch.Tensor, ...]):
        # ``step_unchecked`` is ``step`` without its argument checks: the checks format messages
        # with Python strings, which scan's tracer cannot follow; the graph's typed inputs stand in.
        # The clone: scan refuses a step whose output aliases its carry (output feedback).
        def advance(carry, x_t):
            y_t, next_state = self.model.step_unchecked(x_t, tuple(carry))
            return next_state, y_t.clone()

        final, y = scan(advance, tuple(state), x, dim=1)
        return (y, *final)


class _TeacherForcedGraph(torch.nn.Module):
    def __init__(self, model: torch.nn.Module) -> None:
        super().__init__()
        self.model = model

    def forward(self, x: torch.Tensor, targets: torch.Tensor, state: tuple[torch.Tensor, ...]):
        # ``forward_unchecked`` is ``forward`` without its checks, whose data-dependent branches
        # (finite values, class-id ranges) cannot be traced. The clones keep outputs from aliasing
        # inputs.
        y, final = self.model.forward_unchecked(x, tuple(state), None, targets, 1.0)
        return (y, *(t.clone() for t in final))


@dataclass(frozen=True)
class GraphSpec:
    """One graph ready for ``torch.export`` / ONNX: module, example inputs, names, dynamic dims."""

    name: str
    module: torch.nn.Module
    example_inputs: tuple
    dynamic_shapes: tuple
    input_names: list[str]
    output_names: list[str]


def graphs_for(model: torch.nn.Module) -> list[str]:
    """The graph names that apply to ``model`` (teacher forcing only for output feedback)."""
    if getattr(model, "feeds_back_output", False):
        return list(GRAPHS)
    return ["step", "sequence"]


def graph_spec(model: torch.nn.Module, name: str) -> GraphSpec:
    """The ``GraphSpec`` of graph ``name`` ("step", "sequence", "sequence-teacher-forced")."""
    if name not in graphs_for(model):
        raise unknown_choice(f"graph for topology {model.topology!r}", name, graphs_for(model))
    model = model.eval()
    batch, time = Dim("batch", min=1), Dim("time", min=1)
    state = tuple(t.detach() for t in model.init_state(_TRACE_BATCH))
    dtype = state[0].dtype  # the model's own: a float64 model exports a float64 graph
    state_names = [f"state_{i}" for i in range(len(state))]
    state_dims = tuple({0: batch} for _ in state)
    if name == "step":
        return GraphSpec(
            name=name,
            module=_StepGraph(model),
            example_inputs=(torch.zeros(_TRACE_BATCH, model.input_size, dtype=dtype), state),
            dynamic_shapes=({0: batch}, state_dims),
            input_names=["x_t", *state_names],
            output_names=["y_t", *(f"next_{n}" for n in state_names)],
        )
    x = torch.zeros(_TRACE_BATCH, _TRACE_TIME, model.input_size, dtype=dtype)
    final_names = [f"final_{n}" for n in state_names]
    if name == "sequence":
        return GraphSpec(
            name=name,
            module=_SequenceGraph(model),
            example_inputs=(x, state),
            dynamic_shapes=({0: batch, 1: time}, state_dims),
            input_names=["x", *state_names],
            output_names=["y", *final_names],
        )
    return GraphSpec(
        name=name,
        module=_TeacherForcedGraph(model),
        example_inputs=(x, x.new_zeros(_TRACE_BATCH, _TRACE_TIME, model.output_size), state),
        dynamic_shapes=({0: batch, 1: time}, {0: batch, 1: time}, state_dims),
        input_names=["x", "targets", *state_names],
        output_names=["y", *final_names],
    )

