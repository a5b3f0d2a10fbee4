"""End to end, as the README path goes: train a run, export its artifact, serve the step graph.

The served outputs (onnxruntime streaming loop, and the StreamRunner) must equal the eager
model's forward on the task's own test sequences.
"""

from __future__ import annotations

import json
import subprocess
import sys

import pytest
import torch

import loopzoo
from loopzoo.export import onnx_runner
from loopzoo.serve.streaming import StreamRunner


def _loopzoo(*args: str) -> None:
    subprocess.run([sys.executable, "-m", "loopzoo.cli", *args], check=True, timeout=900,
                   capture_output=True, text=True)


@pytest.mark.slow
@pytest.mark.parametrize("topology", ["hidden-feedback", "output-feedback"])
def test_a_trained_run_exports_and_serves_like_its_model(topology, tmp_path):
    out = tmp_path / "runs"
    _loopzoo("train", f"model={topology}", "task=adding", "task.options.length=10",
             "trainer.max_steps=20", "trainer.enable_progress_bar=false",
             "protocol.trials=null", "protocol.val_every=10", f"out={out}")
    records = [json.loads(p.read_text()) for p in (out / "records").glob("*.json")]
    (record,) = [r for r in records if r["model"] == topology]
    assert record["status"] == "ok", record["reason"]
    artifact = out / record["artifact"]  # records name it relative to the output folder
    model = loopzoo.load(artifact)
    assert model.topology == topology
    _loopzoo("export", str(artifact), "--format", "onnx", "--out", str(tmp_path / "deploy"))
    manifest = json.loads((tmp_path / "deploy" / "export.json").read_text())
    assert manifest["graphs"]["step"]["max_error"] <= 1e-5

    x = loopzoo.tasks.create("adding", length=10, seed=0).split("test").x[:6]
    with torch.no_grad():
        y_ref, _ = model(x)
    serve = onnx_runner(tmp_path / "deploy" / "step.onnx")
    state = list(model.init_state(x.shape[0]))
    served = []
    for t in range(x.shape[1]):
        y_t, *state = serve([x[:, t].contiguous(), *state])
        served.append(y_t)
    torch.testing.assert_close(torch.stack(served, 1), y_ref, atol=1e-5, rtol=0)

    runner = StreamRunner(model)
    for i in range(x.shape[0]):
        runner.start(i)
    streamed = [
        torch.stack(list(runner.push_many({i: x[i, t] for i in range(x.shape[0])}).values()))
        for t in range(x.shape[1])
    ]
    torch.testing.assert_close(torch.stack(streamed, 1), y_ref, atol=1e-5, rtol=0)
