"""One-sample-at-a-time inference over many independent streams, built on ``model.step``.

Each stream (a sensor, a user session, a socket) has an id and its own recurrent state. ``push``
advances one stream by one sample; ``push_many`` advances several streams in one batched step,
which is where batching pays: one ``step`` call instead of one per stream.

A model loaded from an artifact that describes its data (``model.predictor``) is served the way
it was trained, in data units (see ``StreamRunner``): a series model keeps a rolling window per
stream and reads it from the zero state for every forecast; a text model takes one symbol per
push and restarts from the zero state every ``chunk`` symbols; a sequence-class model scales each
row. A model without a description streams continuously in model units, as before.
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
from loopzoo.serve.artifacts import tensor_mismatch
from loopzoo.serve.preprocessing import NextSymbolReading, SequenceClassReading, SeriesReading

__all__ = ["StreamRunner", "STREAM_STATE_FORMAT"]

STREAM_STATE_FORMAT = "loopzoo.stream-state/1"

Sample = torch.Tensor | np.ndarray | Sequence[float] | str


class StreamRunner:
    """Runs ``model.step`` for many streams, each with its own state, one sample at a time.

    For every stream, pushing x_1, x_2, ... returns the same y_t as ``model(x)[0][0, t]`` on the
    whole sequence (up to float rounding), because both run the same recurrence from
    ``model.init_state``. Samples are (input_size,) vectors; outputs are (output_size,)
    inference-mode tensors. The runner puts ``model`` in eval mode.

    For a model whose ``predictor`` describes its data, samples and outputs are in data units and
    every output equals the predictor's for the same history:

    - series: a sample is one raw row of the artifact's columns; the output is the forecast
      (channels,) float64 from the last ``window`` rows (plus one when differencing), read from
      the zero state as in training; ``None`` until the stream has that many rows;
    - next-symbol: a sample is one symbol (a 1-character string); the output is the next
      symbol's probabilities (alphabet,) float64; the state restarts every ``chunk`` symbols;
    - sequence-classes: a sample is one raw row of the feature columns; the output is the class
      probabilities (classes,) float64 of the sequence so far. A stream is one sequence.

    ``state``, ``save_state`` and ``restore_state`` are for continuous (model-unit) streams only.

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
        predictor = getattr(model, "predictor", None)
        if predictor is not None and predictor.refusal:
            raise ValueError(f"StreamRunner: {predictor.refusal}")
        self._reading = None if predictor is None or predictor.kind == "arrays" else (
            predictor.reading)
        self._history: dict[Hashable, list[np.ndarray]] = {}  # series: the rolling window
        self._count: dict[Hashable, int] = {}  # next-symbol: symbols pushed since the start

    @property
    def active(self) -> list[Hashable]:
        """Ids of the started streams, in start order."""
        return list(self._states)

    def start(self, stream_id: Hashable) -> None:
        """Begin a stream at the model's initial state; an id already running is an error."""
        if stream_id in self._states:
            raise ValueError(f"stream {stream_id!r} is already started; reset() restarts it")
        self._states[stream_id] = self._initial
        self._history[stream_id], self._count[stream_id] = [], 0

    def stop(self, stream_id: Hashable) -> None:
        """Forget a stream and its state."""
        self._require(stream_id)
        del self._states[stream_id], self._history[stream_id], self._count[stream_id]

    def reset(self, stream_id: Hashable) -> None:
        """Put a running stream back to the model's initial state."""
        self._require(stream_id)
        self._states[stream_id] = self._initial
        self._history[stream_id], self._count[stream_id] = [], 0

    def push(self, stream_id: Hashable, sample: Sample) -> torch.Tensor | None:
        """Advance one stream by one sample and return its output (see the class docstring)."""
        return self.push_many({stream_id: sample})[stream_id] if self._reading else (
            self._push_one(stream_id, sample))

    def _push_one(self, stream_id: Hashable, sample: Sample) -> torch.Tensor:
        state = self._require(stream_id)
        x_t = self._as_row(sample, f"sample for stream {stream_id!r}")
        with torch.inference_mode():
            y_t, state = self._advance(x_t, state)
        self._states[stream_id] = state
        return y_t[0]

    def push_many(
        self, samples: Mapping[Hashable, Sample]
    ) -> dict[Hashable, torch.Tensor | None]:
        """Advance each listed stream by its sample in one batched step; outputs by stream id."""
        ids = list(samples)
        if not ids:
            return {}
        states = [self._require(stream_id) for stream_id in ids]
        if isinstance(self._reading, SeriesReading):
            return self._push_windows(samples, ids)
        if self._reading is not None:
            x_t = torch.cat([self._encode(samples[i], f"samples[{i!r}]") for i in ids])
            states = [self._initial if self._restarts(i) else s
                      for i, s in zip(ids, states, strict=True)]
        else:
            x_t = self._as_batch(samples, ids)
        with torch.inference_mode():
            batched = tuple(torch.cat(parts) for parts in zip(*states, strict=True))
            y_t, batched = self._advance(x_t, batched)
            per_stream = zip(*(part.split(1) for part in batched), strict=True)
        for stream_id, state in zip(ids, per_stream, strict=True):
            self._states[stream_id] = tuple(state)
            self._count[stream_id] += 1
        if self._reading is not None:  # class outputs in data units: probabilities
            y_t = torch.softmax(y_t.to(torch.float64), -1)
        return dict(zip(ids, y_t.unbind(0), strict=True))

    def _restarts(self, stream_id: Hashable) -> bool:
        """A text model restarts from the zero state at every chunk boundary, as trained."""
        chunk = getattr(self._reading, "chunk", None)
        return bool(chunk) and self._count[stream_id] > 0 and self._count[stream_id] % chunk == 0

    def _encode(self, sample: Sample, name: str) -> torch.Tensor:
        """A data-unit sample as a (1, input_size) model input (symbol one-hot, scaled row)."""
        reading = self._reading
        if isinstance(reading, NextSymbolReading):
            if not isinstance(sample, str) or sample not in reading.alphabet:
                raise ValueError(f"{name} must be one symbol of the model's alphabet of "
                                 f"{len(reading.alphabet)}, got {sample!r}")
            row = torch.zeros(1, len(reading.alphabet), dtype=self._dtype)
            row[0, reading.alphabet.index(sample)] = 1.0
            return row
        assert isinstance(reading, SequenceClassReading)
        raw = self._as_row(sample, name, data_units=True)
        return torch.as_tensor(reading.inputs.to_model(raw.numpy()), dtype=self._dtype)

    def _push_windows(self, samples: Mapping[Hashable, Sample],
                      ids: list[Hashable]) -> dict[Hashable, torch.Tensor | None]:
        """Series: append each row to its stream's window; forecast the full windows at once."""
        reading = self._reading
        assert isinstance(reading, SeriesReading)
        rows = {i: self._as_row(samples[i], f"samples[{i!r}]" if len(ids) > 1 else
                                f"sample for stream {i!r}", data_units=True)[0].numpy()
                for i in ids}
        ready = []
        for stream_id in ids:
            history = self._history[stream_id]
            history.append(rows[stream_id])
            del history[: -reading.rows_needed]
            if len(history) == reading.rows_needed:
                ready.append(stream_id)
        outputs: dict[Hashable, torch.Tensor | None] = dict.fromkeys(ids)
        if not ready:
            return outputs
        windows = [np.stack(self._history[i]) for i in ready]
        x = np.concatenate([reading.windows(w)[0] for w in windows])
        with torch.inference_mode():
            last = self.model(torch.as_tensor(x, dtype=self._dtype))[0][:, -1].numpy()
        origin = np.array([reading.rows_needed - 1])
        for row, (stream_id, window) in enumerate(zip(ready, windows, strict=True)):
            forecast = reading.forecasts(last[row : row + 1], window, origin)[0]
            outputs[stream_id] = torch.from_numpy(forecast)
        return outputs

    def state(self, stream_id: Hashable) -> tuple[torch.Tensor, ...]:
        """A copy of the stream's state: a tuple of (1, ...) tensors as ``model.init_state(1)``."""
        self._continuous_only("state")
        return tuple(t.clone() for t in self._require(stream_id))

    def save_state(self, stream_id: Hashable) -> bytes:
        """The stream's state as safetensors bytes, tagged with the topology and options."""
        self._continuous_only("save_state")
        tensors = {f"state_{i}": t.contiguous() for i, t in enumerate(self._require(stream_id))}
        return safetensors_save(tensors, metadata=self._state_metadata())

    def restore_state(self, stream_id: Hashable, data: bytes) -> None:
        """Set (or start) a stream from ``save_state`` bytes, after checking they fit this model."""
        self._continuous_only("restore_state")
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
            problem = tensor_mismatch(tensor, reference)
            if problem is not None:
                raise ValueError(f"state data for stream {stream_id!r}: {name} {problem}")
            state.append(tensor)
        self._states[stream_id] = tuple(state)
        self._history[stream_id], self._count[stream_id] = [], 0

    def _continuous_only(self, method: str) -> None:
        if self._reading is not None:
            raise ValueError(
                f"{method} is for models streamed continuously in model units; this "
                f"{self._reading.kind} model is served as trained (its stream holds a window, "
                "a chunk position or a sequence), which a saved state does not capture")

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

    def _as_row(self, sample: Sample, name: str, data_units: bool = False) -> torch.Tensor:
        """One (input_size,) sample as a finite (1, input_size) tensor of the model's dtype
        (float64, copied, for a raw data-unit row)."""
        try:
            row = (torch.as_tensor(sample, dtype=self._dtype) if not data_units  # the fast path
                   else torch.from_numpy(np.array(sample, dtype=np.float64)))
        except (TypeError, ValueError, RuntimeError):
            raise TypeError(
                f"{name} must be {self.model.input_size} numbers (a tensor, array or list), got "
                f"{type(sample).__name__} {sample!r:.60}"
            ) from None
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
