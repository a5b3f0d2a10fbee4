"""One-sample-at-a-time inference over many independent streams, built on ``model.step``.

Each stream (a sensor, a user session, a socket) has an id and its own recurrent state. ``push``
advances one stream by one sample; ``push_many`` advances several streams in one batched step,
which is where batching pays: one ``step`` call instead of one per stream.
"""

from __future__ import annotations

import json
import math
from collections.abc import Hashable, Mapping, Sequence
from typing import Any

import numpy as np
import torch
from safetensors import SafetensorError
from safetensors.torch import load as safetensors_load
from safetensors.torch import save as safetensors_save

from loopzoo._registry import unknown_choice

__all__ = ["StreamRunner", "STREAM_STATE_FORMAT"]

STREAM_STATE_FORMAT = "loopzoo.stream-state/1"

Sample = torch.Tensor | np.ndarray | Sequence[float]


class StreamRunner:
    """Runs ``model.step`` for many streams, each with its own state, one sample at a time.

    For every stream, pushing x_1, x_2, ... returns the same y_t as ``model(x)[0][0, t]`` on the
    whole sequence (up to float rounding), because both run the same recurrence from
    ``model.init_state``. Samples are (input_size,) vectors; outputs are (output_size,)
    inference-mode tensors. The runner puts ``model`` in eval mode.

    Example::

        runner = StreamRunner(loopzoo.load("runs/pump/artifact"))
        runner.start("pump-7")
        y = runner.push("pump-7", [0.12, -0.40, 0.03])     # -> tensor of shape (output_size,)
        saved = runner.save_state("pump-7")                # bytes; restore_state(...) resumes
        ys = runner.push_many({"pump-7": s7, "pump-9": s9})  # one batched step
    """

    def __init__(self, model: torch.nn.Module) -> None:
        for attribute in ("step", "init_state", "input_size", "output_size", "topology"):
            if not hasattr(model, attribute):
                raise TypeError(
                    f"StreamRunner needs a loopzoo module; {type(model).__name__} has no "
                    f"{attribute!r}"
                )
        self.model = model.eval()
        # The runner checks every sample and owns every state, so it calls the topology's step
        # on checked arguments (``step_unchecked``) and skips re-checking them on each sample.
        self._advance = getattr(model, "step_unchecked", model.step)
        self._initial = tuple(t.detach() for t in model.init_state(1))
        self._sample_shape = torch.Size([model.input_size])
        self._dtype = self._initial[0].dtype if self._initial else torch.float32
        self._states: dict[Hashable, tuple[torch.Tensor, ...]] = {}

    @property
    def active(self) -> list[Hashable]:
        """Ids of the started streams, in start order."""
        return list(self._states)

    def start(self, stream_id: Hashable) -> None:
        """Begin a stream at the model's initial state; an id already running is an error."""
        if stream_id in self._states:
            raise ValueError(f"stream {stream_id!r} is already started; reset() restarts it")
        self._states[stream_id] = self._initial

    def stop(self, stream_id: Hashable) -> None:
        """Forget a stream and its state."""
        self._require(stream_id)
        del self._states[stream_id]

    def reset(self, stream_id: Hashable) -> None:
        """Put a running stream back to the model's initial state."""
        self._require(stream_id)
        self._states[stream_id] = self._initial

    def push(self, stream_id: Hashable, sample: Sample) -> torch.Tensor:
        """Advance one stream by one (input_size,) sample and return its (output_size,) output."""
        state = self._require(stream_id)
        x_t = self._as_row(sample, "sample")
        with torch.inference_mode():
            y_t, state = self._advance(x_t, state)
        self._states[stream_id] = state
        return y_t[0]

    def push_many(self, samples: Mapping[Hashable, Sample]) -> dict[Hashable, torch.Tensor]:
        """Advance each listed stream by its sample in one batched step; outputs by stream id."""
        ids = list(samples)
        if not ids:
            return {}
        states = [self._require(stream_id) for stream_id in ids]
        x_t = self._as_batch(samples, ids)
        with torch.inference_mode():
            batched = tuple(torch.cat(parts) for parts in zip(*states, strict=True))
            y_t, batched = self._advance(x_t, batched)
            per_stream = zip(*(part.split(1) for part in batched), strict=True)
        for stream_id, state in zip(ids, per_stream, strict=True):
            self._states[stream_id] = tuple(state)
        return dict(zip(ids, y_t.unbind(0), strict=True))

    def state(self, stream_id: Hashable) -> tuple[torch.Tensor, ...]:
        """A copy of the stream's state: a tuple of (1, ...) tensors as ``model.init_state(1)``."""
        return tuple(t.clone() for t in self._require(stream_id))

    def save_state(self, stream_id: Hashable) -> bytes:
        """The stream's state as safetensors bytes, tagged with the topology and options."""
        tensors = {f"state_{i}": t.contiguous() for i, t in enumerate(self._require(stream_id))}
        return safetensors_save(tensors, metadata=self._state_metadata())

    def restore_state(self, stream_id: Hashable, data: bytes) -> None:
        """Set (or start) a stream from ``save_state`` bytes, after checking they fit this model."""
        if not isinstance(data, bytes | bytearray):
            raise TypeError(f"state data must be bytes, got {type(data).__name__}")
        try:
            tensors = safetensors_load(bytes(data))
            metadata = _read_metadata(bytes(data))
        except (SafetensorError, ValueError) as error:
            raise ValueError(f"state data for stream {stream_id!r} is not valid: {error}") from None
        if metadata != self._state_metadata():
            raise ValueError(
                f"state data for stream {stream_id!r} was saved by {metadata}; this runner "
                f"runs {self._state_metadata()}"
            )
        expected = [f"state_{i}" for i in range(len(self._initial))]
        if sorted(tensors) != sorted(expected):
            raise ValueError(
                f"state data for stream {stream_id!r} holds {sorted(tensors)}; expected {expected}"
            )
        state = []
        for name, reference in zip(expected, self._initial, strict=True):
            tensor = tensors[name]
            if tensor.shape != reference.shape or tensor.dtype != reference.dtype:
                raise ValueError(
                    f"state data for stream {stream_id!r}: {name} is {tensor.dtype}"
                    f"{list(tensor.shape)}; expected {reference.dtype}{list(reference.shape)}"
                )
            if tensor.is_floating_point() and not bool(torch.isfinite(tensor).all()):
                raise ValueError(f"state data for stream {stream_id!r}: {name} has NaN or inf")
            state.append(tensor)
        self._states[stream_id] = tuple(state)

    def _state_metadata(self) -> dict[str, str]:
        options = getattr(self.model, "options", {})
        return {
            "format": STREAM_STATE_FORMAT,
            "topology": self.model.topology,
            "options": json.dumps(options, sort_keys=True, default=str),
        }

    def _require(self, stream_id: Hashable) -> tuple[torch.Tensor, ...]:
        try:
            return self._states[stream_id]
        except KeyError:
            raise unknown_choice(
                "stream", stream_id, [str(i) for i in self._states]
            ) from None
        except TypeError:
            raise TypeError(
                f"stream id must be hashable, got {type(stream_id).__name__}"
            ) from None

    def _as_row(self, sample: Sample, name: str) -> torch.Tensor:
        """One (input_size,) sample as a finite (1, input_size) tensor of the model's dtype."""
        row = torch.as_tensor(sample, dtype=self._dtype)
        if row.shape != self._sample_shape:
            raise ValueError(
                f"{name} has shape {tuple(row.shape)}; expected ({self.model.input_size},) "
                f"for a model with input_size={self.model.input_size}"
            )
        if row.requires_grad:
            row = row.detach()
        if not _all_finite(row):
            raise ValueError(f"{name} contains NaN or infinite values")
        return row.unsqueeze(0)

    def _as_batch(self, samples: Mapping[Hashable, Sample], ids: list[Hashable]) -> torch.Tensor:
        """The samples of ``ids`` as one checked (B, input_size) batch.

        Checked as a whole first (one stack, one finiteness test); only a batch that fails is
        checked sample by sample, so the error names the offending stream.
        """
        try:
            batch = torch.stack([torch.as_tensor(samples[i], dtype=self._dtype) for i in ids])
        except (RuntimeError, TypeError, ValueError):
            batch = None
        if batch is not None:
            batch = batch.detach()
            if batch.shape[1:] == self._sample_shape and _all_finite(batch):
                return batch
        return torch.cat([self._as_row(samples[i], f"samples[{i!r}]") for i in ids])

def _all_finite(values: torch.Tensor) -> bool:
    """True if no value is NaN or infinite.

    A finite sum proves every value finite and costs far less than an elementwise test; the exact
    test runs only when the sum is not finite (NaN, inf, or overflow of the sum itself).
    """
    array = values.numpy()
    return math.isfinite(array.sum()) or bool(np.isfinite(array).all())


def _read_metadata(data: bytes) -> dict[str, str]:
    """The ``__metadata__`` of a safetensors buffer (its JSON header), without reading tensors."""
    if len(data) < 8:
        raise ValueError("fewer than 8 bytes; not a safetensors buffer")
    length = int.from_bytes(data[:8], "little")
    header: Any = json.loads(data[8 : 8 + length].decode("utf-8"))
    return dict(header.get("__metadata__", {}))
