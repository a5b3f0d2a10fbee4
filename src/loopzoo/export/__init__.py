"""Export a loopzoo module's step graph (and, where it can, its sequence graph) to ONNX or
``torch.export``, and check the files against the eager module.

    from loopzoo.export import export_graph, max_error, onnx_runner
    export_graph(model, "step", "onnx", "out/step.onnx")
    assert max_error(model, "step", onnx_runner("out/step.onnx")) < 1e-5

Command line: ``loopzoo export ARTIFACT --format onnx --out DIR`` (``loopzoo.export.main``).
"""

from loopzoo.export.cli import main
from loopzoo.export.graphs import GRAPHS, graph_spec, graphs_for
from loopzoo.export.parity import max_error, onnx_runner, program_runner, runner_for
from loopzoo.export.writers import (
    FORMATS,
    export_bytes,
    export_graph,
    export_onnx,
    export_program,
)

__all__ = [
    "FORMATS",
    "GRAPHS",
    "export_bytes",
    "export_graph",
    "export_onnx",
    "export_program",
    "graph_spec",
    "graphs_for",
    "main",
    "max_error",
    "onnx_runner",
    "program_runner",
    "runner_for",
]
