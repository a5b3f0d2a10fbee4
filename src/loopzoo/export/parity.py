"""Check exported graphs against the eager module at several batch sizes and sequence lengths.

The step graph is checked the way it is served: a streaming loop that feeds each call's next state
into the following call, compared with one eager ``forward`` over the whole sequence.
"""

from __future__ import annotations

import io
import os
from collections.abc import Callable, Sequence
from pathlib import Path

import numpy as np
import torch

from loopzoo._registry import unknown_choice
from loopzoo.export.graphs import graphs_for

__all__ = [
    "CHECK_BATCH_SIZES",
    "CHECK_LENGTHS",
    "Runner",
    "max_error",
    "onnx_runner",
    "program_runner",
    "runner_for",
]

# Length 2 is in on purpose: torch.export has been seen to guard on it (DEVELOPERS.md).
CHECK_BATCH_SIZES = (1, 3, 8)
CHECK_LENGTHS = (1, 2, 5, 13)

# Calls a graph on its inputs in order (x_t / x, [targets], state_0, ...) and returns its outputs.
Runner = Callable[[Sequence[torch.Tensor]], list[torch.Tensor]]


def onnx_runner(model_bytes_or_path: bytes | str | os.PathLike[str]) -> Runner:
    """A ``Runner`` over an onnxruntime CPU session of an ONNX graph."""
    import onnxruntime

    source = model_bytes_or_path
    if not isinstance(source, bytes):
        source = Path(source).read_bytes()
    options = onnxruntime.SessionOptions()
    options.log_severity_level = 3  # errors only: not its notes on unused initialisers
    session = onnxruntime.InferenceSession(
        source, sess_options=options, providers=["CPUExecutionProvider"]
    )
    names = [i.name for i in session.get_inputs()]

    def run(inputs: Sequence[torch.Tensor]) -> list[torch.Tensor]:
        feed = {n: t.numpy() for n, t in zip(names, inputs, strict=True)}
        return [torch.from_numpy(np.asarray(o)) for o in session.run(None, feed)]

    return run


def program_runner(
    program_bytes_or_path: bytes | str | os.PathLike[str], graph: str
) -> Runner:
    """A ``Runner`` over a saved ``torch.export`` program of ``graph`` (``torch.export.load``)."""
    source = program_bytes_or_path
    data = source if isinstance(source, bytes) else Path(source).read_bytes()
    module = torch.export.load(io.BytesIO(data)).module()
    leading = 2 if graph == "sequence-teacher-forced" else 1

    def run(inputs: Sequence[torch.Tensor]) -> list[torch.Tensor]:
        with torch.no_grad():
            return list(module(*inputs[:leading], tuple(inputs[leading:])))

    return run


def runner_for(fmt: str, source: bytes | str | os.PathLike[str], graph: str) -> Runner:
    """The ``Runner`` of an exported file of format ``fmt`` ("onnx" or "torch-export")."""
    if fmt == "onnx":
        return onnx_runner(source)
    if fmt == "torch-export":
        return program_runner(source, graph)
    raise unknown_choice("export format", fmt, ["onnx", "torch-export"])


def max_error(
    model: torch.nn.Module,
    graph: str,
    runner: Runner,
    batch_sizes: Sequence[int] = CHECK_BATCH_SIZES,
    lengths: Sequence[int] = CHECK_LENGTHS,
    seed: int = 0,
) -> float:
    """Largest |exported - eager| over outputs and final states, for every (batch, length) pair.

    ``graph`` is "step" (streaming loop over the step graph), "sequence" or
    "sequence-teacher-forced"; inputs are standard-normal, the starting state random, so the state
    inputs are exercised too.
    """
    if graph not in graphs_for(model):
        raise unknown_choice(f"graph for topology {model.topology!r}", graph, graphs_for(model))
    model = model.eval()
    generator = torch.Generator().manual_seed(seed)
    dtype = model.init_state(1)[0].dtype
    worst = 0.0
    for batch in batch_sizes:
        for steps in lengths:
            x = torch.randn(batch, steps, model.input_size, generator=generator, dtype=dtype)
            state = tuple(
                0.5 * torch.randn(t.shape, generator=generator, dtype=dtype)
                for t in model.init_state(batch)
            )
            targets = None
            if graph == "sequence-teacher-forced":
                targets = torch.randn(
                    batch, steps, model.output_size, generator=generator, dtype=dtype
                )
            with torch.no_grad():
                y_ref, final_ref = model(
                    x, state, targets=targets, teacher_forcing=None if targets is None else 1.0
                )
            if graph == "step":
                y, final = _stream(runner, x, state)
            else:
                leading = [x] if targets is None else [x, targets]
                y, *final = runner([*leading, *state])
            worst = max(
                worst,
                _gap(y, y_ref),
                *(_gap(a, b) for a, b in zip(final, final_ref, strict=True)),
            )
    return worst


def _stream(runner: Runner, x: torch.Tensor, state: tuple[torch.Tensor, ...]):
    outputs = []
    for t in range(x.shape[1]):
        y_t, *state = runner([x[:, t].contiguous(), *state])
        outputs.append(y_t)
    return torch.stack(outputs, dim=1), state


def _gap(a: torch.Tensor, b: torch.Tensor) -> float:
    if tuple(a.shape) != tuple(b.shape):
        raise AssertionError(f"exported output has shape {tuple(a.shape)}, eager {tuple(b.shape)}")
    return float((a.to(torch.float64) - b.to(torch.float64)).abs().max())
