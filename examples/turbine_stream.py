"""Shared pieces of the turbine-gearbox examples: reading the readings CSV, scaling, alarms.

Scenario (invented for the demo): a wind farm logs one reading per turbine every ten seconds,
interleaved in arrival order: ``time_s, turbine, vibration_mm_s, bearing_temp_c, rotor_rpm``.
A recurrent model predicts each turbine's next vibration level; a reading that lands far from its
prediction (in units of the training residual's spread) raises an alarm.
"""

from __future__ import annotations

import csv
import math
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

__all__ = [
    "COLUMNS",
    "FEATURES",
    "OUTPUT_COLUMNS",
    "TARGET",
    "AlarmScorer",
    "Reading",
    "read_readings",
    "scale",
]

FEATURES = ("vibration_mm_s", "bearing_temp_c", "rotor_rpm")
TARGET = "vibration_mm_s"
COLUMNS = ("time_s", "turbine", *FEATURES)


@dataclass(frozen=True)
class Reading:
    """One CSV row: when, which turbine, and its feature values in FEATURES order."""

    time_s: float
    turbine: str
    values: tuple[float, ...]


def read_readings(path: str | Path) -> Iterator[Reading]:
    """Yield the rows of a readings CSV in file order; a bad row is an error naming its line."""
    with open(path, newline="", encoding="utf-8") as handle:
        reader = csv.DictReader(handle)
        missing = [c for c in COLUMNS if c not in (reader.fieldnames or [])]
        if missing:
            raise ValueError(f"{path}: missing column(s) {missing}; expected {list(COLUMNS)}")
        for line, row in enumerate(reader, start=2):
            try:
                numbers = [float(row[c]) for c in ("time_s", *FEATURES)]
            except (TypeError, ValueError):
                raise ValueError(f"{path}, line {line}: a numeric field is empty or not a number: "
                                 f"{row}") from None
            if not all(math.isfinite(v) for v in numbers):
                raise ValueError(f"{path}, line {line}: NaN or infinite value in {row}")
            yield Reading(numbers[0], row["turbine"], tuple(numbers[1:]))


def scale(values: tuple[float, ...], metadata: dict[str, Any]) -> list[float]:
    """Standardise features with the training means and spreads stored in the artifact."""
    return [
        (v - m) / s
        for v, m, s in zip(values, metadata["feature_mean"], metadata["feature_std"], strict=True)
    ]


class AlarmScorer:
    """Compares each turbine's new vibration reading with the prediction made one reading before.

    ``z = (observed - predicted) / residual_std``; |z| above ``threshold`` is an alarm.
    """

    def __init__(self, metadata: dict[str, Any], threshold: float) -> None:
        if not threshold > 0:
            raise ValueError(f"alarm threshold must be > 0, got {threshold}")
        self.metadata = metadata
        self.threshold = threshold
        self._pending: dict[str, float] = {}

    def score(self, reading: Reading, scaled_prediction: float) -> dict[str, Any]:
        """The output row for ``reading``, given the model's (scaled) prediction of the next one."""
        observed = reading.values[FEATURES.index(TARGET)]
        predicted_next = scaled_prediction * self.metadata["target_std"] + self.metadata[
            "target_mean"
        ]
        previous = self._pending.get(reading.turbine)
        self._pending[reading.turbine] = predicted_next
        z = None if previous is None else (observed - previous) / self.metadata["residual_std"]
        return {
            "time_s": reading.time_s,
            "turbine": reading.turbine,
            "vibration_mm_s": observed,
            "predicted_next": round(predicted_next, 6),
            "z": "" if z is None else round(z, 3),
            "alarm": int(z is not None and abs(z) > self.threshold),
        }


OUTPUT_COLUMNS = ("time_s", "turbine", "vibration_mm_s", "predicted_next", "z", "alarm")
