"""``loopzoo export ARTIFACT --format onnx|torch-export --out DIR``: write and check the graphs.

Writes ``DIR/step.<ext>`` (always) and ``DIR/sequence.<ext>`` and
``DIR/sequence-teacher-forced.<ext>`` where the topology exports them, checks each file against
the eager module (onnxruntime for ONNX, ``torch.export.load`` for programs) and writes
``DIR/export.json`` describing every graph: tensor names, dynamic dimensions, the largest error
seen, or why a graph was not written, and, for an artifact that describes its data,
``data_units``: its exact scalings, encodings and state convention, so that a runtime serves the
graphs in data units (the graphs themselves read and write model units).
"""

from __future__ import annotations

import argparse
import re
import sys
from pathlib import Path
from typing import Any

import torch

from loopzoo import _io
from loopzoo.export.graphs import graph_spec, graphs_for
from loopzoo.export.parity import CHECK_BATCH_SIZES, CHECK_LENGTHS, max_error, runner_for
from loopzoo.export.writers import FORMATS, SUFFIXES, export_bytes
from loopzoo.serve.artifacts import ArtifactError, load
from loopzoo.serve.preprocessing import serving_recipe

__all__ = ["main", "MANIFEST_FILE"]

MANIFEST_FILE = "export.json"
_DEFAULT_TOLERANCE = 1e-5  # float32 parity target of the export issue


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="loopzoo export",
        description="Export a saved model's step graph (and sequence graphs where possible), "
        "then check the files against the eager model.",
    )
    parser.add_argument("artifact", help="artifact directory (loopzoo.save) or checkpoint file")
    parser.add_argument("--format", required=True, choices=FORMATS, help="output format")
    parser.add_argument("--out", required=True, type=Path, help="directory for the graph files")
    parser.add_argument(
        "--graph",
        default="all",
        help="step, sequence, sequence-teacher-forced, or all (default: every graph that "
        "exports; a sequence graph that fails is reported and skipped)",
    )
    parser.add_argument("--no-check", action="store_true", help="skip the parity check")
    parser.add_argument(
        "--tolerance", type=float, default=_DEFAULT_TOLERANCE, help="largest accepted error"
    )
    return parser


def main(argv: list[str] | None = None) -> int:
    """Run the export command; 0 on success, 1 if a graph fails to export or check, 2 on bad input.

    Example: ``main(["runs/x/artifact", "--format", "onnx", "--out", "deploy/x"])``.
    """
    try:
        args = _parser().parse_args(argv)
    except SystemExit as exit_:
        return int(exit_.code or 0)
    try:
        model = load(args.artifact)
    except ArtifactError as error:
        print(f"loopzoo export: {error}", file=sys.stderr)
        return 2
    available = graphs_for(model)
    if args.graph != "all" and args.graph not in available:
        print(
            f"loopzoo export: --graph {args.graph!r} is not available for topology "
            f"{model.topology!r}; choose from: all, {', '.join(available)}",
            file=sys.stderr,
        )
        return 2
    try:
        _io.check_folder(args.out, "--out")
    except ValueError as error:
        print(f"loopzoo export: {error}", file=sys.stderr)
        return 2
    if not args.tolerance > 0:
        print(f"loopzoo export: --tolerance must be > 0, got {args.tolerance}", file=sys.stderr)
        return 2
    wanted = available if args.graph == "all" else [args.graph]
    manifest: dict[str, Any] = {
        "format": args.format,
        "source": str(args.artifact),
        "topology": model.topology,
        "options": model.options,
        "torch_version": torch.__version__,
        "graphs": {},
        "not_exported": {},
    }
    predictor = getattr(model, "predictor", None)
    recipe = serving_recipe(predictor.preprocessing) if predictor is not None else None
    if recipe is not None:
        manifest["data_units"] = recipe
    status = 0
    for graph in wanted:
        path = args.out / f"{graph}{SUFFIXES[args.format]}"
        try:
            data, entry = _export_checked(model, graph, args, path)
        except _NotExported as refusal:
            path.unlink(missing_ok=True)  # no stale file from an earlier export stays
            manifest["not_exported"][graph] = str(refusal)
            print(f"loopzoo export: {graph} graph not exported: {refusal}", file=sys.stderr)
            if graph == "step" or args.graph != "all":
                status = 1
            continue
        _io.atomic_write_bytes(path, data)
        manifest["graphs"][graph] = entry
        print(f"{path}  {_summary(entry)}")
    _io.atomic_write_json(args.out / MANIFEST_FILE, manifest)
    return status


class _NotExported(Exception):
    """A graph that failed to export or to match the eager model; the message says why."""


def _export_checked(
    model: torch.nn.Module, graph: str, args: argparse.Namespace, path: Path
) -> tuple[bytes, dict[str, Any]]:
    """The graph's file contents and manifest entry, checked before anything is written."""
    entry = _describe(model, graph, path)
    try:
        data = export_bytes(model, graph, args.format)
        if args.no_check:
            return data, entry
        runner = runner_for(args.format, data, graph)
        error = max_error(model, graph, runner, CHECK_BATCH_SIZES, CHECK_LENGTHS)
    except Exception as failure:  # the exporters and runtimes raise many unrelated types
        raise _NotExported(_reason(failure)) from failure
    if not error <= args.tolerance:
        raise _NotExported(
            f"differs from the eager model by {error:.3g} (tolerance {args.tolerance:g})"
        )
    entry["max_error"] = error
    entry["checked"] = {"batch_sizes": CHECK_BATCH_SIZES, "lengths": CHECK_LENGTHS}
    return data, entry


def _reason(error: BaseException) -> str:
    """The innermost cause of an exporter error, on one line without terminal colour codes."""
    while error.__cause__ is not None:
        error = error.__cause__
    lines = [line.strip() for line in re.sub(r"\x1b\[[0-9;]*m", "", str(error)).splitlines()]
    first = next((line for line in lines if line), "")
    return f"{type(error).__name__}: {first[:300]}"


def _describe(model: torch.nn.Module, graph: str, path: Path) -> dict[str, Any]:
    spec = graph_spec(model, graph)
    dynamic = ["batch"] if graph == "step" else ["batch", "time"]
    return {
        "file": path.name,
        "inputs": spec.input_names,
        "outputs": spec.output_names,
        "dynamic": dynamic,
    }


def _summary(entry: dict[str, Any]) -> str:
    checked = f"max error {entry['max_error']:.2g}" if "max_error" in entry else "not checked"
    return f"inputs {', '.join(entry['inputs'])}; dynamic {', '.join(entry['dynamic'])}; {checked}"
