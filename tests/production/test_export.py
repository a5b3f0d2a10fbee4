"""Exported graphs against the eager module: onnxruntime and torch.export at several (B, T).

The reference is the eager module's own ``forward``; onnxruntime is the independent runtime.
Tolerance 1e-5 in float32 is the export issue's target.
"""

from __future__ import annotations

import json

import onnxruntime
import pytest
import torch

import loopzoo
from loopzoo.export import export_bytes, graphs_for, main, max_error, onnx_runner, runner_for
from loopzoo.topologies import TOPOLOGIES

TOLERANCE = 1e-5
BATCH_SIZES = (1, 3, 8)
LENGTHS = (1, 2, 5, 13)


def _session(data: bytes) -> onnxruntime.InferenceSession:
    return onnxruntime.InferenceSession(data, providers=["CPUExecutionProvider"])


def test_onnx_step_graph_streams_like_forward(topology, build):
    model = build(topology)
    data = export_bytes(model, "step", "onnx")
    session = _session(data)
    state_count = len(model.init_state(1))
    inputs = {i.name: i.shape for i in session.get_inputs()}
    assert inputs == {
        "x_t": ["batch", model.input_size],
        **{f"state_{i}": ["batch", t.shape[1]] for i, t in enumerate(model.init_state(1))},
    }
    assert [o.name for o in session.get_outputs()] == [
        "y_t",
        *(f"next_state_{i}" for i in range(state_count)),
    ]
    error = max_error(model, "step", onnx_runner(data), BATCH_SIZES, LENGTHS)
    assert error <= TOLERANCE


def test_onnx_sequence_graph_has_dynamic_batch_and_time(topology, build):
    model = build(topology)
    data = export_bytes(model, "sequence", "onnx")
    x_shape = _session(data).get_inputs()[0].shape
    assert x_shape == ["batch", "time", model.input_size], "time must not be frozen"
    assert max_error(model, "sequence", onnx_runner(data), BATCH_SIZES, LENGTHS) <= TOLERANCE


@pytest.mark.parametrize(
    "feedback_topology",
    [name for name in loopzoo.available() if TOPOLOGIES.get(name).feeds_back_output],
)
def test_onnx_teacher_forced_graph_matches_forward_with_targets(feedback_topology, build):
    model = build(feedback_topology)
    assert "sequence-teacher-forced" in graphs_for(model)
    data = export_bytes(model, "sequence-teacher-forced", "onnx")
    assert [i.name for i in _session(data).get_inputs()][:2] == ["x", "targets"]
    error = max_error(model, "sequence-teacher-forced", onnx_runner(data), BATCH_SIZES, LENGTHS)
    assert error <= TOLERANCE


@pytest.mark.parametrize(
    "feedback_topology",
    [name for name in loopzoo.available() if TOPOLOGIES.get(name).feeds_back_output],
)
def test_torch_export_teacher_forced_program_keeps_time_dynamic(feedback_topology, build):
    model = build(feedback_topology)
    data = export_bytes(model, "sequence-teacher-forced", "torch-export")
    runner = runner_for("torch-export", data, "sequence-teacher-forced")
    error = max_error(model, "sequence-teacher-forced", runner, BATCH_SIZES, LENGTHS)
    assert error <= TOLERANCE


def test_torch_export_step_program_streams_like_forward(topology, build):
    model = build(topology)
    data = export_bytes(model, "step", "torch-export")
    runner = runner_for("torch-export", data, "step")
    assert max_error(model, "step", runner, BATCH_SIZES, LENGTHS) <= TOLERANCE


@pytest.mark.slow
def test_torch_export_sequence_program_matches_forward(topology, build):
    model = build(topology)
    data = export_bytes(model, "sequence", "torch-export")
    runner = runner_for("torch-export", data, "sequence")
    assert max_error(model, "sequence", runner, BATCH_SIZES, LENGTHS) <= TOLERANCE


@pytest.mark.parametrize("fmt", ["onnx", "torch-export"])
def test_command_writes_only_checked_graphs_and_a_manifest(fmt, build, tmp_path):
    model = build("output-feedback" if "output-feedback" in loopzoo.available() else "gru")
    artifact = loopzoo.save(model, tmp_path / "artifact")
    out = tmp_path / "deploy"
    assert main([str(artifact), "--format", fmt, "--out", str(out)]) == 0
    manifest = json.loads((out / "export.json").read_text())
    assert manifest["topology"] == model.topology and manifest["format"] == fmt
    assert "step" in manifest["graphs"]
    assert set(manifest["graphs"]) | set(manifest["not_exported"]) == set(graphs_for(model))
    suffix = ".onnx" if fmt == "onnx" else ".pt2"
    for graph, entry in manifest["graphs"].items():
        assert (out / f"{graph}{suffix}").is_file() and entry["file"] == f"{graph}{suffix}"
        assert entry["max_error"] <= TOLERANCE
    for graph in manifest["not_exported"]:
        assert not (out / f"{graph}{suffix}").exists()


def test_command_refuses_a_graph_that_fails_its_check_and_writes_nothing(build, tmp_path):
    artifact = loopzoo.save(build("hidden-feedback"), tmp_path / "artifact")
    out = tmp_path / "deploy"
    # onnxruntime's kernels round differently from torch's, so no file matches to 1e-12.
    code = main(
        [str(artifact), "--format", "onnx", "--out", str(out), "--graph", "step",
         "--tolerance", "1e-12"]
    )
    assert code == 1
    manifest = json.loads((out / "export.json").read_text())
    assert "differs from the eager model" in manifest["not_exported"]["step"]
    assert not (out / "step.onnx").exists()


def test_command_bad_input_is_a_clear_error(build, tmp_path, capsys):
    artifact = loopzoo.save(build("hidden-feedback"), tmp_path / "artifact")
    (tmp_path / "a-file").write_text("")
    cases = [
        ([str(tmp_path / "missing"), "--format", "onnx", "--out", str(tmp_path / "o")],
         "neither an artifact directory"),
        ([str(artifact), "--format", "tflite", "--out", str(tmp_path / "o")], "invalid choice"),
        ([str(artifact), "--format", "onnx", "--out", str(tmp_path / "o"), "--graph", "loop"],
         "--graph 'loop' is not available"),
        ([str(artifact), "--format", "onnx", "--out", str(tmp_path / "a-file")], "is a file"),
        ([str(artifact), "--format", "onnx", "--out", str(tmp_path / "o"), "--tolerance", "-1"],
         "--tolerance must be > 0"),
        ([str(artifact), "--out", str(tmp_path / "o")], "--format"),
    ]
    for argv, message in cases:
        assert main(argv) == 2, argv
        assert message in capsys.readouterr().err
    assert not (tmp_path / "o").exists()


OPTION_VARIANTS = [
    ("hidden-feedback", {"nonlinearity": "relu"}),
    ("output-feedback", {"output_kind": "classes"}),
    ("output-feedback", {"output_kind": "classes", "fed_back": "onehot"}),
    ("output-feedback", {"fed_back": "detached"}),
    ("output-feedback", {"delay": [1, 3]}),
    ("output-feedback", {"delay": 2, "output_kind": "classes"}),
    ("stacked", {"num_layers": 3}),
    ("deep-transition", {"shortcut": True, "output_depth": 2, "transition_depth": 3}),
    ("residual-skip", {"mode": "scaled", "scale": 0.5, "num_layers": 2}),
    ("lstm", {"num_layers": 2}),
    ("gru", {"num_layers": 2}),
]


@pytest.mark.slow
@pytest.mark.parametrize(("name", "options"), OPTION_VARIANTS, ids=lambda v: str(v))
def test_onnx_graphs_of_option_variants_match_eager(name, options):
    if name not in loopzoo.available():
        pytest.fail(f"topology {name!r} is not registered")
    torch.manual_seed(0)
    model = loopzoo.create(name, input_size=3, output_size=2, hidden_size=6, **options).eval()
    for graph in graphs_for(model):
        data = export_bytes(model, graph, "onnx")
        assert max_error(model, graph, onnx_runner(data), BATCH_SIZES, LENGTHS) <= TOLERANCE, graph


def test_a_float64_model_exports_a_float64_step_graph(build):
    model = build("hidden-feedback").double()
    data = export_bytes(model, "step", "onnx")
    assert _session(data).get_inputs()[0].type == "tensor(double)"
    # float64 all the way: the gap is rounding of float64, far below the float32 tolerance.
    assert max_error(model, "step", onnx_runner(data), BATCH_SIZES, LENGTHS) <= 1e-12
