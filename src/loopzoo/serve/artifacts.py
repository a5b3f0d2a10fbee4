"""Production artifacts: a trained module as safetensors weights plus a JSON description.

An artifact is a directory::

    artifact/
      weights.safetensors   every tensor of ``model.state_dict()`` (safetensors: no code, no pickle)
      model.json            format tag and version, topology name, constructor options,
                            loopzoo version, tensor names / shapes / dtypes, SHA-256 of the
                            weights file, optional metadata, optional preprocessing (what lies
                            between raw data and the model: ``loopzoo.serve.preprocessing``)

``load`` checks the checksum, the tensor shapes in the weights file's header and the shapes the
topology would build (on the meta device: no memory) against each other BEFORE building the
module, so a damaged or edited artifact is refused fast; it never unpickles anything from an
artifact. It also reads a torch / Lightning checkpoint file, through
``torch.load(weights_only=True)`` only (see ``load``).
"""

from __future__ import annotations

import hashlib
import json
import os
import pickle
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import torch
from safetensors import SafetensorError
from safetensors.torch import load as safetensors_load
from safetensors.torch import save as safetensors_save

from loopzoo import _io
from loopzoo.serve.predictor import Predictor
from loopzoo.serve.preprocessing import parse as parse_preprocessing
from loopzoo.topologies import TOPOLOGIES, create

__all__ = [
    "ArtifactError",
    "ARTIFACT_FORMAT",
    "ARTIFACT_VERSION",
    "WEIGHTS_FILE",
    "DESCRIPTION_FILE",
    "save",
    "load",
    "read_description",
]

ARTIFACT_FORMAT = "loopzoo.artifact"
# Version 2 adds the optional "preprocessing" field; version 1 artifacts still load.
ARTIFACT_VERSION = 2
WEIGHTS_FILE = "weights.safetensors"
DESCRIPTION_FILE = "model.json"

# Where a harness checkpoint may carry the architecture (see DEVELOPERS.md "Production path").
_CHECKPOINT_KEY = "loopzoo"


class ArtifactError(ValueError):
    """An artifact or checkpoint that cannot be loaded: missing, corrupt, truncated, mismatched."""


def save(
    model: torch.nn.Module,
    directory: str | os.PathLike[str],
    metadata: Mapping[str, Any] | None = None,
    *,
    preprocessing: Mapping[str, Any] | None = None,
) -> Path:
    """Write ``model`` as an artifact directory and return its path.

    ``metadata`` (task, metrics, run id, ...) must be JSON-serialisable with finite numbers; it is
    stored as given under ``"metadata"`` in ``model.json``. ``preprocessing`` (a task's
    ``task.preprocessing()``; default: the loaded model's own, if it has one) makes the artifact a
    self-contained predictor (``loopzoo.load(DIR).predictor``). Both files are written atomically,
    weights first; ``model.json`` records the weights' SHA-256, so a save interrupted between
    the two files (or any later damage) is reported by ``load``, never loaded silently.

    Example::

        model = loopzoo.create("hidden-feedback", input_size=3, output_size=1, hidden_size=32)
        loopzoo.save(model, "runs/pump/artifact", metadata={"task": "pump-vibration"})
        same = loopzoo.load("runs/pump/artifact")
    """
    topology = getattr(model, "topology", None)
    options = getattr(model, "options", None)
    if not isinstance(topology, str) or not isinstance(options, Mapping):
        raise TypeError(
            "save expects a loopzoo module with `topology` (str) and `options` (dict); "
            f"got {type(model).__name__} with topology={topology!r}"
        )
    if metadata is not None and not isinstance(metadata, Mapping):
        raise TypeError(f"metadata must be a dict or None, got {type(metadata).__name__}")
    loaded = getattr(model, "predictor", None)
    if preprocessing is None and isinstance(loaded, Predictor) and loaded.kind != "arrays":
        preprocessing = loaded.preprocessing
    if preprocessing is not None:
        preprocessing = _json_checked("preprocessing", dict(preprocessing))
        parse_preprocessing(preprocessing, model.input_size, model.output_size)
    target = Path(directory)
    if target.exists() and not target.is_dir():
        raise ValueError(f"artifact directory {str(target)!r} is an existing file")
    tensors = _state_tensors(model)
    description = {
        "format": ARTIFACT_FORMAT,
        "version": ARTIFACT_VERSION,
        "topology": topology,
        "options": _json_checked("options", dict(options)),
        "loopzoo_version": _loopzoo_version(),
        "tensors": {
            name: {"shape": list(t.shape), "dtype": _dtype_name(t.dtype)}
            for name, t in tensors.items()
        },
        "metadata": _json_checked("metadata", dict(metadata or {})),
    }
    if preprocessing is not None:
        description["preprocessing"] = preprocessing
    weights = safetensors_save(tensors)
    description["weights_sha256"] = hashlib.sha256(weights).hexdigest()
    _io.atomic_write_bytes(target / WEIGHTS_FILE, weights)
    _io.atomic_write_json(target / DESCRIPTION_FILE, description)
    return target


def read_description(directory: str | os.PathLike[str]) -> dict[str, Any]:
    """The checked contents of an artifact's ``model.json`` (topology, options, metadata, ...)."""
    path = Path(directory) / DESCRIPTION_FILE
    if not Path(directory).is_dir():
        raise ArtifactError(f"artifact directory {str(directory)!r} does not exist")
    if not path.is_file():
        raise ArtifactError(f"artifact {str(directory)!r} has no {DESCRIPTION_FILE}")
    try:
        description = json.loads(path.read_text(encoding="utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as error:
        raise ArtifactError(f"{path}: not valid UTF-8 JSON ({error}); is it truncated?") from None
    if not isinstance(description, dict):
        raise ArtifactError(f"{path}: expected a JSON object, got {type(description).__name__}")
    if description.get("format") != ARTIFACT_FORMAT:
        raise ArtifactError(
            f"{path}: field 'format' is {description.get('format')!r}; "
            f"expected {ARTIFACT_FORMAT!r}"
        )
    version = description.get("version")
    if type(version) is not int or not 1 <= version <= ARTIFACT_VERSION:
        raise ArtifactError(
            f"{path}: field 'version' is {version!r}; this loopzoo reads versions "
            f"1..{ARTIFACT_VERSION}"
        )
    for field, kind in (
        ("topology", str),
        ("options", dict),
        ("tensors", dict),
        ("weights_sha256", str),
        ("metadata", dict),
    ):
        if not isinstance(description.get(field), kind):
            raise ArtifactError(
                f"{path}: field {field!r} is {description.get(field)!r}; expected a {kind.__name__}"
            )
    for name, entry in description["tensors"].items():
        shape = entry.get("shape") if isinstance(entry, dict) else None
        if (not isinstance(shape, list) or not all(type(n) is int and n >= 0 for n in shape)
                or not isinstance(entry.get("dtype"), str)):
            raise ArtifactError(
                f"{path}: field 'tensors' entry {name!r} is {entry!r}; expected "
                '{"shape": [non-negative integers], "dtype": "float32" or another dtype name}'
            )
    if "preprocessing" in description and not isinstance(description["preprocessing"], dict):
        raise ArtifactError(f"{path}: field 'preprocessing' is {description['preprocessing']!r}; "
                            "expected an object")
    return description


def load(path: str | os.PathLike[str]) -> torch.nn.Module:
    """Rebuild the module saved at ``path`` in eval mode, after checking every file and tensor.

    The module gets a ``predictor`` attribute (``loopzoo.serve.Predictor``): raw data in,
    predictions in data units out, from the artifact's ``preprocessing`` (plain arrays for an
    artifact or checkpoint without one). Everything is checked before the module is built: the
    weights' SHA-256, the tensor names, shapes and dtypes of the weights file's header against
    ``model.json``'s ``tensors`` and against the shapes the topology and options give.

    ``path`` is an artifact directory written by ``save``, or a torch checkpoint file (a Lightning
    ``.ckpt`` or ``torch.save`` file) read with ``torch.load(weights_only=True)``, which refuses
    pickled code. Such a checkpoint must hold ``state_dict`` and ``{"loopzoo": {"topology": ...,
    "options": {...}}}`` (or the same two keys in ``hyper_parameters``); the state dict may carry
    one common key prefix (e.g. ``model.`` from a LightningModule attribute).

    Raises ``ArtifactError`` (a ``ValueError``) naming the file, field and what was expected.

    Example::

        model = loopzoo.load("runs/pump/artifact")
        y, state = model(x)
        forecasts = model.predictor.predict(new_rows)   # a DataFrame, in data units
    """
    source = Path(path)
    if source.is_dir():
        return _load_artifact(source)
    if source.name == DESCRIPTION_FILE and source.is_file():
        return _load_artifact(source.parent)
    if source.is_file():
        return _load_checkpoint(source)
    raise ArtifactError(f"{str(path)!r} is neither an artifact directory nor a checkpoint file")


def _load_artifact(directory: Path) -> torch.nn.Module:
    description = read_description(directory)
    source = directory / DESCRIPTION_FILE
    weights_path = directory / WEIGHTS_FILE
    if not weights_path.is_file():
        raise ArtifactError(f"artifact {str(directory)!r} has no {WEIGHTS_FILE}")
    weights = weights_path.read_bytes()
    if hashlib.sha256(weights).hexdigest() != description["weights_sha256"]:
        raise ArtifactError(
            f"{weights_path}: SHA-256 does not match 'weights_sha256' in {DESCRIPTION_FILE}; "
            "the file is corrupted, truncated or from another artifact"
        )
    stored = _header_shapes(weights, weights_path)
    described = {name: (entry["dtype"], list(entry["shape"]))
                 for name, entry in description["tensors"].items()}
    _compare(stored, described, f"{weights_path} (header)", f"{source} field 'tensors'")
    options = description["options"]
    shell = _meta_model(description["topology"], options, source)
    _compare(stored, _shapes(shell), f"{weights_path} (header)",
             f"topology {description['topology']!r} with the options in {DESCRIPTION_FILE}")
    preprocessing = description.get("preprocessing")
    if preprocessing is not None:
        try:
            parse_preprocessing(preprocessing, shell.input_size, shell.output_size)
        except ValueError as error:
            raise ArtifactError(f"{source}: {error}") from None
    model = _build(description["topology"], options, source)
    try:
        tensors = safetensors_load(weights)
    except (SafetensorError, ValueError) as error:
        raise ArtifactError(f"{weights_path}: not a valid safetensors file ({error})") from None
    _fill(model, tensors, weights_path)
    refusal = None if preprocessing is not None else _undescribed(description, directory)
    model.predictor = Predictor(model, preprocessing, refusal=refusal)
    return model


def _undescribed(description: dict[str, Any], directory: Path) -> str | None:
    """Why the model must not be served, when its metadata names a task that scales, windows or
    encodes data (it has its own ``preprocessing``) but the artifact does not describe it (an
    artifact from before version 2, or saved without ``preprocessing``); else None."""
    from loopzoo.tasks import TASKS, Task

    name = description["metadata"].get("task")
    try:
        task = TASKS.get(name)
    except (TypeError, ValueError):
        return None
    if task.preprocessing is Task.preprocessing:
        return None
    options = description["metadata"].get("task_options", {})
    return (
        f"artifact {str(directory)!r} was trained on task {name!r}, which scales, windows or "
        "encodes its data, but its model.json does not describe that ('preprocessing' is "
        "missing: written before artifacts carried it), so predictions or a stream would "
        "silently differ from training. Re-save it with the task's description: "
        f"loopzoo.save(model, DIR, metadata, preprocessing=loopzoo.tasks.create({name!r}, "
        f"**{options!r}).preprocessing())"
    )


def _header_shapes(weights: bytes, path: Path) -> dict[str, tuple[str, list[int]]]:
    """Tensor name -> (dtype, shape) from a safetensors file's JSON header, reading no tensor."""
    try:
        length = int.from_bytes(weights[:8], "little")
        if len(weights) < 8 or length > len(weights) - 8:
            raise ValueError("the header length exceeds the file")
        header = json.loads(weights[8 : 8 + length].decode("utf-8"))
        if not isinstance(header, dict):
            raise ValueError("the header is not a JSON object")
        shapes = {}
        for name, entry in header.items():
            if name == "__metadata__":
                continue
            shapes[name] = (_SAFETENSORS_DTYPES.get(entry["dtype"], entry["dtype"]),
                            [int(n) for n in entry["shape"]])
    except (ValueError, KeyError, TypeError, UnicodeDecodeError) as error:
        raise ArtifactError(f"{path}: not a valid safetensors file ({error})") from None
    return shapes


# safetensors header dtype codes -> torch dtype names (as model.json records them)
_SAFETENSORS_DTYPES = {"F64": "float64", "F32": "float32", "F16": "float16", "BF16": "bfloat16",
                       "I64": "int64", "I32": "int32", "I16": "int16", "I8": "int8",
                       "U8": "uint8", "BOOL": "bool"}


def _meta_model(topology: str, options: dict[str, Any], source: Path) -> torch.nn.Module:
    """``create(topology, **options)`` on the meta device: shapes only, no memory, no init."""
    with torch.device("meta"):
        return _build(topology, options, source)


def _shapes(model: torch.nn.Module) -> dict[str, tuple[str, list[int]]]:
    return {name: (_dtype_name(t.dtype), list(t.shape)) for name, t in model.state_dict().items()}


def _compare(found: Mapping[str, tuple[str, list[int]]],
             expected: Mapping[str, tuple[str, list[int]]], found_in: str,
             expected_by: str) -> None:
    missing = sorted(set(expected) - set(found))
    extra = sorted(set(found) - set(expected))
    if missing or extra:
        raise ArtifactError(f"{found_in}: tensors do not match {expected_by}; missing "
                            f"{missing or 'none'}, unexpected {extra or 'none'}")
    for name, (dtype, shape) in expected.items():
        if found[name] != (dtype, shape):
            raise ArtifactError(f"{found_in}: tensor {name!r} is {found[name][0]}{found[name][1]}; "
                                f"{expected_by} expects {dtype}{shape}")


def _load_checkpoint(path: Path) -> torch.nn.Module:
    try:
        checkpoint = torch.load(path, map_location="cpu", weights_only=True)
    except pickle.UnpicklingError as error:
        raise ArtifactError(
            f"{path}: refused by torch.load(weights_only=True); the file holds objects other "
            f"than tensors and plain containers, which loopzoo never unpickles ({error})"
        ) from None
    except (RuntimeError, EOFError, OSError, ValueError) as error:
        raise ArtifactError(f"{path}: not a readable torch checkpoint ({error})") from None
    if not isinstance(checkpoint, dict) or not isinstance(checkpoint.get("state_dict"), dict):
        raise ArtifactError(f"{path}: expected a checkpoint dict with a 'state_dict' entry")
    spec = checkpoint.get(_CHECKPOINT_KEY)
    if not isinstance(spec, dict):
        spec = checkpoint.get("hyper_parameters")
    if not isinstance(spec, dict) or not isinstance(spec.get("topology"), str):
        raise ArtifactError(
            f"{path}: no architecture found; expected checkpoint['{_CHECKPOINT_KEY}'] or "
            "checkpoint['hyper_parameters'] with 'topology' (str) and 'options' (dict)"
        )
    options = spec.get("options")
    if not isinstance(options, dict):
        raise ArtifactError(f"{path}: field 'options' is {options!r}; expected a dict")
    expected = _shapes(_meta_model(spec["topology"], options, path))
    tensors = _strip_common_prefix(checkpoint["state_dict"], set(expected))
    found = {name: (_dtype_name(t.dtype), list(t.shape)) if isinstance(t, torch.Tensor)
             else (type(t).__name__, []) for name, t in tensors.items()}
    _compare(found, expected, str(path), f"topology {spec['topology']!r} with its options")
    model = _build(spec["topology"], options, path)
    _fill(model, tensors, path)
    model.predictor = Predictor(model)
    return model


def _build(topology: str, options: dict[str, Any], source: Path) -> torch.nn.Module:
    try:
        TOPOLOGIES.get(topology)
    except (TypeError, ValueError) as error:
        raise ArtifactError(f"{source}: field 'topology': {error}") from None
    try:
        return create(topology, **options)
    except (TypeError, ValueError) as error:
        raise ArtifactError(
            f"{source}: topology {topology!r} refused the stored 'options' {options!r}: {error}"
        ) from None


def _fill(model: torch.nn.Module, tensors: Mapping[str, Any], source: Path) -> None:
    """Check names, shapes, dtypes and finiteness of ``tensors`` against ``model``, then load."""
    expected = model.state_dict()
    missing = sorted(set(expected) - set(tensors))
    extra = sorted(set(tensors) - set(expected))
    if missing or extra:
        raise ArtifactError(
            f"{source}: tensors do not match topology {model.topology!r}; "
            f"missing {missing or 'none'}, unexpected {extra or 'none'}"
        )
    for name, reference in expected.items():
        tensor = tensors[name]
        if not isinstance(tensor, torch.Tensor):
            kind = type(tensor).__name__
            raise ArtifactError(f"{source}: entry {name!r} is a {kind}, not a tensor")
        problem = tensor_mismatch(tensor, reference)
        if problem is not None:
            raise ArtifactError(f"{source}: tensor {name!r} {problem}")
    model.load_state_dict(dict(tensors), strict=True)
    model.eval()


def _strip_common_prefix(state: dict[str, Any], wanted: set[str]) -> dict[str, Any]:
    """Drop the one key prefix (``model.`` etc.) under which a wrapper stored the tensors."""
    if set(state) == wanted or not wanted:
        return state
    probe = next(iter(sorted(wanted)))
    for key in state:
        if key.endswith("." + probe):
            prefix = key[: -len(probe)]
            if all(prefix + name in state for name in wanted):
                return {k[len(prefix):]: v for k, v in state.items() if k.startswith(prefix)}
    return state


def _state_tensors(model: torch.nn.Module) -> dict[str, torch.Tensor]:
    tensors = {}
    for name, tensor in model.state_dict().items():
        if tensor.is_floating_point() and not bool(torch.isfinite(tensor).all()):
            raise ValueError(
                f"tensor {name!r} of the model contains NaN or infinite values; "
                "a diverged model is not saved as an artifact"
            )
        # Clones: safetensors refuses tensors that share storage (tied or viewed weights).
        tensors[name] = tensor.detach().to("cpu").contiguous().clone()
    return tensors


def _json_checked(field: str, value: dict[str, Any]) -> dict[str, Any]:
    try:
        return json.loads(json.dumps(value, allow_nan=False))
    except (TypeError, ValueError) as error:
        raise ValueError(
            f"{field} must be JSON-serialisable with finite numbers (str, int, float, bool, "
            f"None, lists, dicts): {error}"
        ) from None


def tensor_mismatch(tensor: torch.Tensor, reference: torch.Tensor) -> str | None:
    """What is wrong with a loaded ``tensor`` that should be like ``reference`` (shape, dtype,
    finite values), as the end of a sentence naming it; None when nothing is."""
    if tensor.shape != reference.shape or tensor.dtype != reference.dtype:
        return (f"is {_dtype_name(tensor.dtype)}{list(tensor.shape)}; expected "
                f"{_dtype_name(reference.dtype)}{list(reference.shape)}")
    if tensor.is_floating_point() and not bool(torch.isfinite(tensor).all()):
        return "contains NaN or infinite values"
    return None


def _dtype_name(dtype: torch.dtype) -> str:
    return str(dtype).removeprefix("torch.")


def _loopzoo_version() -> str:
    from loopzoo import __version__

    return __version__
