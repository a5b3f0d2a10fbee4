"""The turbine examples run as a user runs them, and agree with the eager model and each other."""

from __future__ import annotations

import csv
import io
import subprocess
import sys
from pathlib import Path

import torch

import loopzoo
from loopzoo.export import main as export_main
from loopzoo.serve.artifacts import read_description

EXAMPLES = Path(__file__).resolve().parents[2] / "examples"
DEMO = EXAMPLES / "demo"


def _run(script: str, *args: str) -> str:
    completed = subprocess.run(
        [sys.executable, str(EXAMPLES / script), *args],
        capture_output=True, text=True, check=True, timeout=300,
    )
    return completed.stdout


def _rows(text: str) -> list[dict[str, str]]:
    return list(csv.DictReader(io.StringIO(text)))


def _eager_predictions(artifact: Path, readings: Path) -> dict[tuple[float, str], float]:
    """Each turbine's whole sequence through ``forward``: the reference for the streaming scores."""
    model = loopzoo.load(artifact)
    metadata = read_description(artifact)["metadata"]
    mean, std = torch.tensor(metadata["feature_mean"]), torch.tensor(metadata["feature_std"])
    by_turbine: dict[str, list[dict[str, str]]] = {}
    for row in _rows(readings.read_text()):
        by_turbine.setdefault(row["turbine"], []).append(row)
    predictions = {}
    for turbine, rows in by_turbine.items():
        x = torch.tensor([[float(r[f]) for f in metadata["features"]] for r in rows])
        with torch.no_grad():
            y, _ = model(((x - mean) / std).unsqueeze(0))
        scaled = y[0, :, 0] * metadata["target_std"] + metadata["target_mean"]
        for r, value in zip(rows, scaled.tolist(), strict=True):
            predictions[(float(r["time_s"]), turbine)] = value
    return predictions


def test_streamed_scores_equal_forward_and_the_onnx_server_agrees(tmp_path):
    readings = DEMO / "readings.csv"
    scored = _rows(_run("score_stream.py", str(DEMO / "artifact"), str(readings)))
    assert len(scored) == len(_rows(readings.read_text()))
    reference = _eager_predictions(DEMO / "artifact", readings)
    for row in scored:
        expected = reference[(float(row["time_s"]), row["turbine"])]
        assert abs(float(row["predicted_next"]) - expected) < 1e-5
    assert export_main([str(DEMO / "artifact"), "--format", "onnx", "--out",
                        str(tmp_path / "deploy"), "--graph", "step"]) == 0
    served = _rows(_run("serve_onnx.py", str(tmp_path / "deploy"),
                        str(DEMO / "artifact" / "model.json"), str(readings)))
    assert [(r["time_s"], r["turbine"]) for r in served] == [
        (r["time_s"], r["turbine"]) for r in scored
    ]
    for mine, theirs in zip(scored, served, strict=True):
        assert abs(float(mine["predicted_next"]) - float(theirs["predicted_next"])) < 1e-5
        assert mine["alarm"] == theirs["alarm"]


def test_demo_builder_writes_a_loadable_artifact_and_csv(tmp_path):
    _run("make_demo.py", "--out", str(tmp_path), "--rows", "40", "--steps", "5")
    rows = _rows((tmp_path / "readings.csv").read_text())
    assert len(rows) == 80 and {r["turbine"] for r in rows} == {"T01", "T02"}
    model = loopzoo.load(tmp_path / "artifact")
    assert model.topology == "hidden-feedback" and model.input_size == 3
    assert read_description(tmp_path / "artifact")["metadata"]["residual_std"] > 0
