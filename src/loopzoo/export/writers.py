"""Write a graph of a loopzoo module as an ONNX model or a ``torch.export`` program, atomically."""

from __future__ import annotations

import io
import logging
import os
import warnings
from pathlib import Path

import torch

from loopzoo import _io
from loopzoo._registry import unknown_choice
from loopzoo.export.graphs import graph_spec

__all__ = ["FORMATS", "SUFFIXES", "export_bytes", "export_graph", "export_onnx", "export_program"]

FORMATS = ("onnx", "torch-export")
SUFFIXES = {"onnx": ".onnx", "torch-export": ".pt2"}


def export_program(model: torch.nn.Module, graph: str) -> torch.export.ExportedProgram:
    """``torch.export`` of ``graph`` ("step", "sequence", ...) with its dynamic dimensions."""
    spec = graph_spec(model, graph)
    with torch.no_grad():
        return torch.export.export(
            spec.module,
            spec.example_inputs,
            dynamic_shapes=spec.dynamic_shapes,
            strict=False,
            prefer_deferred_runtime_asserts_over_guards=True,
        )


def export_onnx(model: torch.nn.Module, graph: str) -> bytes:
    """The serialised ONNX model of ``graph`` with named inputs / outputs and dynamic dimensions.

    Inputs and outputs are named as in ``graphs.graph_spec`` (x_t, state_0, ... -> y_t,
    next_state_0, ...); dynamic dimensions are named "batch" and "time".
    """
    spec = graph_spec(model, graph)
    # The exporter logs about optional torchvision kernels and warns about its own internals.
    onnx_logger = logging.getLogger("torch.onnx")
    level = onnx_logger.level
    onnx_logger.setLevel(logging.ERROR)
    try:
        with torch.no_grad(), warnings.catch_warnings():
            warnings.simplefilter("ignore")
            program = torch.onnx.export(
                spec.module,
                spec.example_inputs,
                dynamo=True,
                input_names=spec.input_names,
                output_names=spec.output_names,
                dynamic_shapes=spec.dynamic_shapes,
                verbose=False,
            )
    finally:
        onnx_logger.setLevel(level)
    return program.model_proto.SerializeToString()


def export_bytes(model: torch.nn.Module, graph: str, fmt: str) -> bytes:
    """The file contents of ``graph`` of ``model`` in format ``fmt`` ("onnx" or "torch-export")."""
    if fmt not in FORMATS:
        raise unknown_choice("export format", fmt, list(FORMATS))
    if fmt == "onnx":
        return export_onnx(model, graph)
    buffer = io.BytesIO()
    torch.export.save(export_program(model, graph), buffer)
    return buffer.getvalue()


def export_graph(
    model: torch.nn.Module, graph: str, fmt: str, path: str | os.PathLike[str]
) -> Path:
    """Write ``graph`` of ``model`` in format ``fmt`` to ``path`` (atomically) and return it."""
    _io.atomic_write_bytes(path, export_bytes(model, graph, fmt))
    return Path(path)
