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

# Up to this many values a finiteness test sums a Python list (measured: about 1 against 5 us
# for a numpy or torch sum at 8 values; equal to numpy's at about 128).
_PYTHON_SUM_MAX = 64

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
        if self._reading is not None:
            return self.push_many({stream_id: sample})[stream_id]
        state = self._require(stream_id)
        x_t = self._as_row(sample, stream_id)
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
            x_t = torch.cat([self._encode(samples[i], i) for i in ids])
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

    def _encode(self, sample: Sample, stream_id: Hashable) -> torch.Tensor:
        """A data-unit sample as a (1, input_size) model input (symbol one-hot, scaled row)."""
        reading = self._reading
        if isinstance(reading, NextSymbolReading):
            if not isinstance(sample, str) or sample not in reading.alphabet:
                raise ValueError(f"{_sample_name(stream_id, True)} must be one symbol of the "
                                 f"model's alphabet of {len(reading.alphabet)}, got {sample!r}")
            row = torch.zeros(1, len(reading.alphabet), dtype=self._dtype)
            row[0, reading.alphabet.index(sample)] = 1.0
            return row
        assert isinstance(reading, SequenceClassReading)
        raw = self._as_row(sample, stream_id, many=True, data_units=True)
        return torch.as_tensor(reading.inputs.to_model(raw.numpy()), dtype=self._dtype)

    def _push_windows(self, samples: Mapping[Hashable, Sample],
                      ids: list[Hashable]) -> dict[Hashable, torch.Tensor | None]:
        """Series: append each row to its stream's window; forecast the full windows at once."""
        reading = self._reading
        assert isinstance(reading, SeriesReading)
        rows = {i: self._as_row(samples[i], i, many=len(ids) > 1, data_units=True)[0].numpy()
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

    def _as_row(self, sample: Sample, stream_id: Hashable, *, many: bool = False,
                data_units: bool = False) -> torch.Tensor:
        """One (input_size,) sample as a finite (1, input_size) tensor of the model's dtype
        (float64, copied, for a raw data-unit row). Errors name the sample as ``_sample_name``
        does; the name is formatted only on error, as this runs on every push."""
        try:
            if data_units:
                row = torch.from_numpy(np.array(sample, dtype=np.float64))
            elif type(sample) is torch.Tensor and sample.dtype == self._dtype:
                row = sample  # the fast path: as_tensor would return it, after 1 us of parsing
            else:
                row = torch.as_tensor(sample, dtype=self._dtype)
        except (TypeError, ValueError, RuntimeError):
            raise TypeError(
                f"{_sample_name(stream_id, many)} must be {self.model.input_size} numbers (a "
                f"tensor, array or list), got {type(sample).__name__} {sample!r:.60}"
            ) from None
        if row.shape != self._sample_shape:
            raise ValueError(
                f"{_sample_name(stream_id, many)} has shape {tuple(row.shape)}; expected "
                f"({self.model.input_size},) for a model with input_size={self.model.input_size}"
            )
        if row.requires_grad:
            row = row.detach()
        if not _all_finite(row):
            raise ValueError(f"{_sample_name(stream_id, many)} contains NaN or infinite values")
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
        return torch.cat([self._as_row(samples[i], i, many=True) for i in ids])


def _sample_name(stream_id: Hashable, many: bool) -> str:
    """How errors name a sample: as an entry of ``push_many``'s mapping, or of one ``push``."""
    return f"samples[{stream_id!r}]" if many else f"sample for stream {stream_id!r}"


def _all_finite(values: torch.Tensor) -> bool:
    """True if no value is NaN or infinite.

    A finite sum proves every value finite and costs far less than an elementwise test; the exact
    test runs only when the sum is not finite (NaN, inf, or overflow of the sum itself). A short
    row is summed as Python floats, several times cheaper than a tensor sum at this size; the
    tensor sum, unlike numpy's, does not warn when it overflows.
    """
    short_row = values.dim() == 1 and values.numel() <= _PYTHON_SUM_MAX  # len() costs 1 us
    total = sum(values.tolist()) if short_row else values.sum().item()  # no overflow warning
    return math.isfinite(total) or bool(torch.isfinite(values).all())


def _read_metadata(data: bytes) -> dict[str, str]:
    """The ``__metadata__`` of a safetensors buffer (its JSON header), without reading tensors."""
    if len(data) < 8:
        raise ValueError("fewer than 8 bytes; not a safetensors buffer")
    length = int.from_bytes(data[:8], "little")
    header: Any = json.loads(data[8 : 8 + length].decode("utf-8"))
    return dict(header.get("__metadata__", {}))
