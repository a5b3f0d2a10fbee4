"""What lies between raw data and a model, read from an artifact's ``preprocessing`` field.

Tasks describe it with ``task.preprocessing()`` (plain JSON data); ``parse`` checks it against the
model's sizes and returns one of four readings, each of which turns raw values into model inputs
and model outputs into data units exactly as the task did during training and scoring:

- ``series``: forecasts from a window of the last ``window`` rows (one more row when
  ``differences``), each window read from the model's zero state;
- ``next-symbol``: next-symbol probabilities, the text read in chunks of ``chunk`` symbols, each
  from the zero state (``chunk`` null: the whole string from the zero state);
- ``sequence-classes``: one class per sequence, each sequence read from the zero state;
- ``arrays``: model inputs as given, outputs as computed (softmax for ``"outputs": "classes"``);
  what an artifact without a ``preprocessing`` field is.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

__all__ = [
    "KINDS",
    "Affine",
    "ArrayReading",
    "NextSymbolReading",
    "Reading",
    "SequenceClassReading",
    "SeriesReading",
    "arrays_preprocessing",
    "parse",
    "serving_recipe",
]

KINDS = ("series", "next-symbol", "sequence-classes", "arrays")


@dataclass(frozen=True)
class Affine:
    """z = (v - mean) / std per channel (last axis); v = z * std + mean. float64 throughout."""

    mean: np.ndarray
    std: np.ndarray

    def to_model(self, values: np.ndarray) -> np.ndarray:
        return (np.asarray(values, dtype=np.float64) - self.mean) / self.std

    def to_data(self, scaled: np.ndarray) -> np.ndarray:
        return np.asarray(scaled, dtype=np.float64) * self.std + self.mean


@dataclass(frozen=True)
class SeriesReading:
    """Forecasts of ``targets`` at ``horizons`` from windows of ``columns``."""

    columns: tuple[str, ...]
    targets: tuple[str, ...]
    time: str | None
    window: int
    horizons: tuple[int, ...]
    differences: bool
    inputs: Affine
    outputs: Affine
    channels: tuple[str, ...]
    kind = "series"

    @property
    def rows_needed(self) -> int:
        """Rows one forecast reads: the window, plus the row before it when differencing."""
        return self.window + (1 if self.differences else 0)

    def windows(self, values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(L, C) raw rows in time order -> model inputs (N, window, C) float32 and the (N,)
        origins: the row index of each window's last row (every row with a full window)."""
        # with differences, row r holds v[r] - v[r-1]; row 0 has none and is never read
        inputs = np.diff(values, axis=0, prepend=np.nan) if self.differences else values
        scaled = self.inputs.to_model(inputs)
        origins = np.arange(self.rows_needed - 1, len(values))
        steps = origins[:, None] - self.window + 1 + np.arange(self.window)
        return scaled[steps].astype(np.float32), origins

    def forecasts(self, last_outputs: np.ndarray, values: np.ndarray,
                  origins: np.ndarray) -> np.ndarray:
        """(N, channels) model outputs at each window's last step -> data units, (N, channels)."""
        data = self.outputs.to_data(last_outputs)
        if self.differences:
            target_index = [self.columns.index(t) for t in self.targets]
            current = values[origins][:, target_index]
            data = data + np.repeat(current, len(self.horizons), axis=-1)
        return data


@dataclass(frozen=True)
class NextSymbolReading:
    """Next-symbol probabilities over ``alphabet``; state reset every ``chunk`` symbols."""

    alphabet: tuple[str, ...]
    chunk: int | None
    kind = "next-symbol"


@dataclass(frozen=True)
class SequenceClassReading:
    """One of ``classes`` per sequence of ``features`` rows (grouped by ``sequence``)."""

    features: tuple[str, ...]
    sequence: str | None
    time: str | None
    label: str | None
    classes: tuple[str, ...]
    inputs: Affine
    kind = "sequence-classes"


@dataclass(frozen=True)
class ArrayReading:
    """Model inputs as given; outputs as values, or softmax probabilities for classes."""

    outputs: str
    kind = "arrays"


Reading = SeriesReading | NextSymbolReading | SequenceClassReading | ArrayReading


def arrays_preprocessing(classes: bool = False) -> dict[str, Any]:
    """The description of a model read as plain arrays (no scaling, no names)."""
    return {"kind": "arrays", "outputs": "classes" if classes else "values"}


def parse(description: Mapping[str, Any], input_size: int, output_size: int) -> Reading:
    """Check a ``preprocessing`` description against the model's sizes; ValueError naming the
    field and what is accepted otherwise."""
    if not isinstance(description, Mapping):
        raise ValueError(f"preprocessing must be an object, got {type(description).__name__}")
    kind = description.get("kind")
    if kind not in KINDS:
        raise ValueError(f"preprocessing.kind is {kind!r}; accepted: {', '.join(KINDS)}")
    fields = _Fields(description)
    if kind == "series":
        columns = fields.names("columns", count=input_size)
        targets = fields.names("targets")
        unknown = [t for t in targets if t not in columns]
        if unknown:
            raise ValueError(f"preprocessing.targets {unknown} are not among columns {columns}")
        horizons = fields.integers("horizons", minimum=1)
        channels = len(targets) * len(horizons)
        if channels != output_size:
            raise ValueError(f"preprocessing has {len(targets)} target(s) x {len(horizons)} "
                             f"horizon(s) = {channels} outputs; the model has {output_size}")
        return SeriesReading(
            columns=columns, targets=targets, time=fields.optional_name("time"),
            window=fields.integer("window", minimum=1), horizons=horizons,
            differences=fields.flag("differences"),
            inputs=fields.affine("input_scaling", input_size),
            outputs=fields.affine("output_scaling", output_size),
            channels=fields.names("channels", count=output_size))
    if kind == "next-symbol":
        alphabet = fields.names("alphabet", count=input_size, allow_blank=True)
        if output_size != input_size:
            raise ValueError(f"a next-symbol model needs output_size = input_size = "
                             f"{input_size} (the alphabet); it has output_size {output_size}")
        chunk = description.get("chunk")
        if chunk is not None:
            chunk = fields.integer("chunk", minimum=1)
        return NextSymbolReading(alphabet=alphabet, chunk=chunk)
    if kind == "sequence-classes":
        return SequenceClassReading(
            features=fields.names("features", count=input_size),
            sequence=fields.optional_name("sequence"), time=fields.optional_name("time"),
            label=fields.optional_name("label"),
            classes=fields.names("classes", count=output_size, allow_blank=True),
            inputs=fields.affine("input_scaling", input_size))
    outputs = description.get("outputs")
    if outputs not in ("values", "classes"):
        raise ValueError(f"preprocessing.outputs is {outputs!r}; accepted: values, classes")
    return ArrayReading(outputs=outputs)


class _Fields:
    """Typed reads of a description's fields with errors naming ``preprocessing.<field>``."""

    def __init__(self, description: Mapping[str, Any]) -> None:
        self.description = description

    def _get(self, name: str) -> Any:
        if name not in self.description:
            raise ValueError(f"preprocessing.{name} is missing")
        return self.description[name]

    def names(self, name: str, count: int | None = None,
              allow_blank: bool = False) -> tuple[str, ...]:
        value = self._get(name)
        if (not isinstance(value, Sequence) or isinstance(value, str)
                or not all(isinstance(v, str) and (allow_blank or v) for v in value)
                or not value or len(set(value)) != len(value)):
            raise ValueError(f"preprocessing.{name} must be a non-empty list of distinct "
                             f"strings, got {value!r}")
        if count is not None and len(value) != count:
            raise ValueError(f"preprocessing.{name} has {len(value)} entries; the model's size "
                             f"is {count}")
        return tuple(value)

    def optional_name(self, name: str) -> str | None:
        value = self.description.get(name)
        if value is not None and (not isinstance(value, str) or not value):
            raise ValueError(f"preprocessing.{name} must be a column name or null, got {value!r}")
        return value

    def integer(self, name: str, minimum: int) -> int:
        value = self._get(name)
        if type(value) is not int or value < minimum:
            raise ValueError(f"preprocessing.{name} must be an integer >= {minimum}, "
                             f"got {value!r}")
        return value

    def integers(self, name: str, minimum: int) -> tuple[int, ...]:
        value = self._get(name)
        if (not isinstance(value, list) or not value
                or not all(type(v) is int and v >= minimum for v in value)):
            raise ValueError(f"preprocessing.{name} must be a non-empty list of integers >= "
                             f"{minimum}, got {value!r}")
        return tuple(value)

    def flag(self, name: str) -> bool:
        value = self._get(name)
        if not isinstance(value, bool):
            raise ValueError(f"preprocessing.{name} must be true or false, got {value!r}")
        return value

    def affine(self, name: str, channels: int) -> Affine:
        value = self._get(name)
        parts = {}
        for key in ("mean", "std"):
            numbers = value.get(key) if isinstance(value, Mapping) else None
            if (not isinstance(numbers, list) or len(numbers) != channels
                    or not all(isinstance(v, int | float) and not isinstance(v, bool)
                               and math.isfinite(v) for v in numbers)):
                raise ValueError(f"preprocessing.{name}.{key} must be a list of {channels} "
                                 f"finite numbers, got {numbers!r}")
            parts[key] = np.array(numbers, dtype=np.float64)
        if not (parts["std"] > 0).all():
            raise ValueError(f"preprocessing.{name}.std must be positive, got "
                             f"{parts['std'].tolist()}")
        return Affine(mean=parts["mean"], std=parts["std"])


_RECIPES = {
    "series": {
        "input": "x_t = (v_t - input_scaling.mean) / input_scaling.std per column of `columns`, "
                 "where v_t is the raw row (with differences: v_t minus the previous row)",
        "output": "forecast = y_t * output_scaling.std + output_scaling.mean per channel of "
                  "`channels` (each target at each horizon); with differences, add the target's "
                  "raw value of the window's last row",
        "state": "each forecast reads only the last `window` rows (with differences: `window` "
                 "+ 1 raw rows give `window` differences), stepping from the zero state; the "
                 "forecast is y_t after the window's last row",
    },
    "next-symbol": {
        "input": "x_t = one-hot of the symbol's index in `alphabet`",
        "output": "probabilities of the next symbol = softmax(y_t) over `alphabet`",
        "state": "restart from the zero state every `chunk` symbols (chunk null: once per "
                 "string)",
    },
    "sequence-classes": {
        "input": "x_t = (row - input_scaling.mean) / input_scaling.std per column of `features`",
        "output": "class probabilities = softmax(y_t) over `classes`, read after a sequence's "
                  "last row",
        "state": "each sequence (rows sharing a `sequence` id, ordered by `time`) from the zero "
                 "state",
    },
}


def serving_recipe(description: Mapping[str, Any]) -> dict[str, Any] | None:
    """How to serve exported graphs in data units: the artifact's description (exact numbers)
    and the affine maps, encodings and state convention around the graphs, in words. None for
    plain arrays (the graphs' inputs and outputs are then the data's)."""
    kind = description.get("kind")
    if kind not in _RECIPES:
        return None
    return {"preprocessing": dict(description), **_RECIPES[kind]}
