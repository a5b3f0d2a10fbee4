"""Artifacts: round trip of trained weights, and a clear error for every bad file."""

from __future__ import annotations

import hashlib
import json
import os
import pickle
import subprocess
import sys
from pathlib import Path

import pytest
import torch
from safetensors.torch import load as safetensors_load
from safetensors.torch import save as safetensors_save
from support.limits import LOAD_BOUND_MB

import loopzoo
from loopzoo.serve.artifacts import DESCRIPTION_FILE, WEIGHTS_FILE, ArtifactError, read_description


def _outputs(model, seed=5):
    x = torch.randn(3, 9, model.input_size, generator=torch.Generator().manual_seed(seed))
    with torch.no_grad():
        return model(x)


def test_round_trip_of_a_trained_model_gives_identical_outputs(
    topology, build, train_briefly, tmp_path
):
    model = train_briefly(build(topology))
    untrained = build(topology)
    assert any(
        not torch.equal(a, b)
        for a, b in zip(model.state_dict().values(), untrained.state_dict().values(), strict=True)
    ), "training should have moved the weights"
    loopzoo.save(model, tmp_path / "artifact", metadata={"task": "demo", "metrics": {"mse": 0.5}})
    loaded = loopzoo.load(tmp_path / "artifact")
    assert type(loaded) is type(model) and not loaded.training
    assert loaded.options == model.options
    y, state = _outputs(model)
    y_loaded, state_loaded = _outputs(loaded)
    assert torch.equal(y, y_loaded)
    assert all(torch.equal(a, b) for a, b in zip(state, state_loaded, strict=True))
    description = read_description(tmp_path / "artifact")
    assert description["topology"] == topology
    assert description["metadata"] == {"task": "demo", "metrics": {"mse": 0.5}}
    assert description["loopzoo_version"] == loopzoo.__version__


@pytest.fixture
def artifact(build, tmp_path) -> Path:
    return loopzoo.save(build("hidden-feedback"), tmp_path / "artifact")


def _edit_description(artifact: Path, **changes) -> None:
    path = artifact / DESCRIPTION_FILE
    description = json.loads(path.read_text())
    description.update(changes)
    path.write_text(json.dumps(description))


def _replace_tensors(artifact: Path, edit) -> None:
    """Rewrite the weights through ``edit(tensors)`` and fix the checksum: only the edit shows."""
    tensors = safetensors_load((artifact / WEIGHTS_FILE).read_bytes())
    edit(tensors)
    data = safetensors_save(tensors)
    (artifact / WEIGHTS_FILE).write_bytes(data)
    _edit_description(artifact, weights_sha256=hashlib.sha256(data).hexdigest())


def _first_name(artifact: Path) -> str:
    return sorted(safetensors_load((artifact / WEIGHTS_FILE).read_bytes()))[0]


@pytest.mark.parametrize(
    ("damage", "message"),
    [
        (lambda a: (a / DESCRIPTION_FILE).unlink(), "has no model.json"),
        (lambda a: (a / WEIGHTS_FILE).unlink(), "has no weights.safetensors"),
        (lambda a: (a / DESCRIPTION_FILE).write_text('{"format": "loopzoo.art'), "not valid"),
        (lambda a: (a / DESCRIPTION_FILE).write_bytes(b"\xff\xfe\x00"), "not valid UTF-8 JSON"),
        (lambda a: (a / DESCRIPTION_FILE).write_text("[1, 2]"), "expected a JSON object"),
        (lambda a: _edit_description(a, format="something-else"), "field 'format'"),
        (lambda a: _edit_description(a, version=99), "field 'version' is 99"),
        (lambda a: _edit_description(a, version="1"), "field 'version' is '1'"),
        (lambda a: _edit_description(a, topology="hiden-feedback"), "Did you mean"),
        (lambda a: _edit_description(a, topology=3), "field 'topology'"),
        (lambda a: _edit_description(a, options=[1]), "field 'options'"),
        (
            lambda a: _edit_description(
                a, options={"input_size": 3, "output_size": 2, "hidden_size": 6, "colour": 1}
            ),
            "refused the stored 'options'",
        ),
        (
            lambda a: _edit_description(
                a, options={"input_size": 3, "output_size": 2, "hidden_size": -6}
            ),
            "refused the stored 'options'",
        ),
        (
            lambda a: _edit_description(
                a, options={"input_size": 3, "output_size": 2, "hidden_size": 7}
            ),
            "with the options in model.json expects float32[7",
        ),
        (
            lambda a: (a / WEIGHTS_FILE).write_bytes((a / WEIGHTS_FILE).read_bytes()[:-9]),
            "SHA-256 does not match",
        ),
        (
            lambda a: (a / WEIGHTS_FILE).write_bytes(b"\x00" * 64),
            "SHA-256 does not match",
        ),
        (
            lambda a: _replace_tensors(a, lambda t: t.pop(_first_name(a))),
            "missing ['",
        ),
        (
            lambda a: _replace_tensors(a, lambda t: t.update(extra=torch.zeros(2))),
            "unexpected ['extra']",
        ),
        (
            lambda a: _replace_tensors(
                a, lambda t: t.update({_first_name(a): t[_first_name(a)].double()})
            ),
            "float64",
        ),
        (
            lambda a: _replace_tensors(
                a, lambda t: t.update({_first_name(a): t[_first_name(a)].flatten()[:1]})
            ),
            "field 'tensors' expects",
        ),
        (
            lambda a: _replace_tensors(
                a, lambda t: t[_first_name(a)].fill_(float("inf"))
            ),
            "NaN or infinite",
        ),
    ],
    ids=[
        "no-description",
        "no-weights",
        "truncated-json",
        "binary-json",
        "json-not-object",
        "wrong-format-tag",
        "future-version",
        "version-as-string",
        "unknown-topology",
        "topology-not-string",
        "options-not-dict",
        "unknown-option",
        "impossible-size",
        "options-mismatch-weights",
        "truncated-weights",
        "garbage-weights",
        "missing-tensor",
        "extra-tensor",
        "wrong-dtype",
        "wrong-shape",
        "infinite-weights",
    ],
)
def test_every_bad_file_is_a_clear_error(artifact, damage, message):
    damage(artifact)
    with pytest.raises(ArtifactError) as caught:
        loopzoo.load(artifact)
    assert message in str(caught.value)


def test_weights_that_are_not_safetensors_are_refused_even_with_a_matching_checksum(artifact):
    data = pickle.dumps({"weight": [1.0, 2.0]})
    (artifact / WEIGHTS_FILE).write_bytes(data)
    _edit_description(artifact, weights_sha256=hashlib.sha256(data).hexdigest())
    with pytest.raises(ArtifactError, match="not a valid safetensors file"):
        loopzoo.load(artifact)


def test_missing_path_is_a_clear_error(tmp_path):
    with pytest.raises(ArtifactError, match="neither an artifact directory nor a checkpoint"):
        loopzoo.load(tmp_path / "nowhere")


def test_save_refuses_what_it_cannot_write_faithfully(build, tmp_path):
    model = build("hidden-feedback")
    with pytest.raises(ValueError, match="metadata must be JSON-serialisable"):
        loopzoo.save(model, tmp_path / "a", metadata={"mse": float("nan")})
    with pytest.raises(ValueError, match="metadata must be JSON-serialisable"):
        loopzoo.save(model, tmp_path / "b", metadata={"when": object()})
    with pytest.raises(TypeError, match="metadata must be a dict"):
        loopzoo.save(model, tmp_path / "c", metadata=[1])
    with pytest.raises(TypeError, match="loopzoo module"):
        loopzoo.save(torch.nn.Linear(2, 2), tmp_path / "d")
    with torch.no_grad():
        next(model.parameters()).fill_(float("nan"))
    with pytest.raises(ValueError, match="NaN or infinite"):
        loopzoo.save(model, tmp_path / "e")
    assert not any(tmp_path.iterdir()), "a refused save leaves no files behind"
    (tmp_path / "taken").write_text("")
    with pytest.raises(ValueError, match="is an existing file"):
        loopzoo.save(build("gru"), tmp_path / "taken")


def test_a_harness_style_checkpoint_loads_through_weights_only(build, train_briefly, tmp_path):
    model = train_briefly(build("gru"))
    checkpoint = {
        "epoch": 3,
        "state_dict": {f"model.{k}": v for k, v in model.state_dict().items()},
        "loopzoo": {"topology": model.topology, "options": model.options},
    }
    torch.save(checkpoint, tmp_path / "last.ckpt")
    loaded = loopzoo.load(tmp_path / "last.ckpt")
    assert torch.equal(_outputs(model)[0], _outputs(loaded)[0])


def test_a_checkpoint_without_architecture_is_a_clear_error(build, tmp_path):
    torch.save({"state_dict": build("gru").state_dict()}, tmp_path / "bare.ckpt")
    with pytest.raises(ArtifactError, match="no architecture found"):
        loopzoo.load(tmp_path / "bare.ckpt")
    (tmp_path / "junk.ckpt").write_bytes(b"not a checkpoint at all")
    with pytest.raises(ArtifactError, match="junk.ckpt"):
        loopzoo.load(tmp_path / "junk.ckpt")


class _Payload:
    """Unpickling this object calls os.mkdir: the shape of a malicious checkpoint."""

    def __init__(self, marker: Path) -> None:
        self.marker = marker

    def __reduce__(self):
        return (os.mkdir, (str(self.marker),))


def test_a_crafted_pickle_with_code_is_refused_and_never_runs(build, tmp_path):
    model = build("hidden-feedback")
    marker = tmp_path / "payload-ran"
    checkpoint = {
        "state_dict": model.state_dict(),
        "loopzoo": {"topology": model.topology, "options": model.options},
        "callbacks": _Payload(marker),
    }
    torch.save(checkpoint, tmp_path / "evil.ckpt")
    with pytest.raises(ArtifactError, match=r"weights_only=True"):
        loopzoo.load(tmp_path / "evil.ckpt")
    assert not marker.exists()
    # The file really carries code: an unrestricted unpickle runs it.
    torch.load(tmp_path / "evil.ckpt", weights_only=False)
    assert marker.is_dir()


def test_a_save_interrupted_between_its_two_files_is_detected(build, tmp_path):
    loopzoo.save(build("hidden-feedback", seed=0), tmp_path / "artifact")
    old_description = (tmp_path / "artifact" / DESCRIPTION_FILE).read_bytes()
    loopzoo.save(build("hidden-feedback", seed=1), tmp_path / "artifact")
    # As if the second save had stopped after its weights: new weights, old description.
    (tmp_path / "artifact" / DESCRIPTION_FILE).write_bytes(old_description)
    with pytest.raises(ArtifactError, match="SHA-256 does not match"):
        loopzoo.load(tmp_path / "artifact")


def test_the_description_file_path_loads_its_artifact(build, tmp_path):
    model = build("gru")
    loopzoo.save(model, tmp_path / "artifact")
    loaded = loopzoo.load(tmp_path / "artifact" / DESCRIPTION_FILE)
    assert torch.equal(_outputs(model)[0], _outputs(loaded)[0])


def test_loading_and_streaming_need_only_torch_and_safetensors(build, tmp_path):
    loopzoo.save(build("hidden-feedback"), tmp_path / "artifact")
    script = (
        "import sys, loopzoo\n"
        "from loopzoo.serve.streaming import StreamRunner\n"
        f"runner = StreamRunner(loopzoo.load({str(tmp_path / 'artifact')!r}))\n"
        "runner.start(0); runner.push(0, [0.0, 1.0, 2.0])\n"
        "heavy = {'lightning', 'hydra', 'onnx', 'onnxruntime', 'onnxscript', 'statsmodels',\n"
        "         'sklearn', 'scipy', 'pandas', 'matplotlib'}\n"
        "print(sorted({m.split('.')[0] for m in sys.modules} & heavy))\n"
    )
    completed = subprocess.run(
        [sys.executable, "-c", script], capture_output=True, text=True, check=True, timeout=120
    )
    assert completed.stdout.strip() == "[]"


def test_former_module_paths_still_import_the_same_objects():
    import loopzoo.artifacts
    import loopzoo.streaming
    from loopzoo.streaming import StreamRunner

    import loopzoo.serve

    assert StreamRunner is loopzoo.serve.StreamRunner
    assert loopzoo.streaming.StreamRunner is loopzoo.serve.StreamRunner
    assert loopzoo.artifacts.ArtifactError is loopzoo.serve.ArtifactError
    assert loopzoo.artifacts.load is loopzoo.load is loopzoo.serve.load


# Issue 15 item 2: a description edited to a huge size must be refused from the files' headers,
# before any module is built, so the refusal costs neither gigabytes nor seconds (``fresh_load``
# in tests/conftest.py measures it in a process of its own).


def test_a_huge_hidden_size_in_model_json_is_refused_without_building_it(artifact, fresh_load):
    # hidden_size 30000 would hold a 30000 x 30000 float32 matrix: 3.6 GB.
    _edit_description(artifact, options={"input_size": 3, "output_size": 2, "hidden_size": 30000})
    message, extra_mb = fresh_load(artifact)
    assert "expects float32[30000" in message and "weights.safetensors (header)" in message
    assert extra_mb < LOAD_BOUND_MB, f"loading took {extra_mb} MB more before refusing"


def test_a_consistent_edit_of_options_and_tensors_is_refused_by_the_weights_header(artifact,
                                                                                  fresh_load):
    description = json.loads((artifact / DESCRIPTION_FILE).read_text())
    with torch.device("meta"):
        huge = loopzoo.create("hidden-feedback", input_size=3, output_size=2, hidden_size=30000)
    _edit_description(
        artifact, options=huge.options,
        tensors={n: {"shape": list(t.shape), "dtype": "float32"}
                 for n, t in huge.state_dict().items()},
    )
    assert description["tensors"] != read_description(artifact)["tensors"]
    message, extra_mb = fresh_load(artifact)
    assert "field 'tensors' expects float32[30000" in message
    assert extra_mb < LOAD_BOUND_MB, f"loading took {extra_mb} MB more before refusing"


def test_a_checkpoint_with_a_huge_size_is_refused_before_building(build, tmp_path, fresh_load):
    model = build("hidden-feedback")
    path = tmp_path / "model.ckpt"
    torch.save({"state_dict": model.state_dict(),
                "loopzoo": {"topology": "hidden-feedback",
                            "options": {**model.options, "hidden_size": 40000}}}, path)
    message, extra_mb = fresh_load(path)
    assert "expects float32[40000" in message
    assert extra_mb < LOAD_BOUND_MB, f"loading took {extra_mb} MB more before refusing"


@pytest.mark.parametrize(
    "entry",
    [[6], {"shape": "6", "dtype": "float32"}, {"shape": [6, -1], "dtype": "float32"},
     {"shape": [6]}],
)
def test_a_malformed_tensors_entry_is_refused(artifact, entry):
    description = json.loads((artifact / DESCRIPTION_FILE).read_text())
    name = sorted(description["tensors"])[0]
    _edit_description(artifact, tensors={**description["tensors"], name: entry})
    with pytest.raises(ArtifactError, match=f"field 'tensors' entry '{name}'"):
        loopzoo.load(artifact)


def test_a_tensors_field_that_disagrees_with_the_weights_is_refused(artifact):
    description = json.loads((artifact / DESCRIPTION_FILE).read_text())
    tensors = description["tensors"]
    name = sorted(tensors)[0]
    _edit_description(artifact, tensors={**tensors, name: {**tensors[name], "dtype": "float64"}})
    with pytest.raises(ArtifactError, match="field 'tensors' expects float64"):
        loopzoo.load(artifact)
    _edit_description(artifact, tensors={k: v for k, v in tensors.items() if k != name})
    with pytest.raises(ArtifactError, match=f"unexpected \\['{name}'\\]"):
        loopzoo.load(artifact)
