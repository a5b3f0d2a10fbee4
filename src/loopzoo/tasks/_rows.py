"""Rows a task compares the topologies with: classical baselines, bounds and reference rates.

``task.baselines()`` returns the rows one could ship instead of a topology (kind "baseline");
``task.bounds()`` the lines no model can be shipped as: exact optima and noise floors (kind
"bound") and rates of a general-purpose tool such as a compressor (kind "reference"). Each is
scored on the test split by ``task.score``, or skipped with the reason when the data cannot
support it (a series too short for the season, a constant series), so the other rows go on.
"""

from __future__ import annotations

import dataclasses
import time
from collections.abc import Callable, Iterator, Mapping
from contextlib import contextmanager
from typing import Any

__all__ = ["KINDS", "ComparisonRow", "LazyRows", "Stopwatch", "skipped"]

KINDS = ("baseline", "bound", "reference")


@dataclasses.dataclass(frozen=True)
class ComparisonRow:
    """One row of the comparison that is not a trained topology.

    metrics: the test metrics (keys of ``task.score``), empty when skipped. kind: "baseline",
    "bound" or "reference". status: "ok" or "skipped" (then ``reason`` says why).
    details: what was chosen on train / val (orders, penalties, model forms), JSON values.
    fit_seconds: wall time of fitting, selecting and forecasting the test points (None for
    rows with nothing to fit).
    seed_dependent: False when the value is the same for every seed (the data and the fit do
    not depend on it), so one value stands for all seeds.
    """

    metrics: dict[str, float]
    kind: str = "baseline"
    status: str = "ok"
    reason: str | None = None
    details: dict[str, Any] = dataclasses.field(default_factory=dict)
    fit_seconds: float | None = None
    seed_dependent: bool = True

    def __post_init__(self) -> None:
        if self.kind not in KINDS:
            raise ValueError(f"row kind must be one of {', '.join(KINDS)}, got {self.kind!r}")
        if self.status not in ("ok", "skipped"):
            raise ValueError(f"row status must be 'ok' or 'skipped', got {self.status!r}")
        if self.status == "skipped" and not self.reason:
            raise ValueError("a skipped row needs a reason")


def skipped(reason: str, *, kind: str = "baseline", seed_dependent: bool = True,
            details: dict[str, Any] | None = None) -> ComparisonRow:
    """A row that could not be computed on this data, with the reason."""
    return ComparisonRow(metrics={}, kind=kind, status="skipped", reason=reason,
                         details=details or {}, seed_dependent=seed_dependent)


class Stopwatch:
    """Accumulated wall time of the ``with watch.running():`` blocks (fitting, selecting)."""

    def __init__(self) -> None:
        self.seconds = 0.0

    @contextmanager
    def running(self) -> Iterator[None]:
        start = time.perf_counter()
        try:
            yield
        finally:
            self.seconds += time.perf_counter() - start


class LazyRows(Mapping[str, ComparisonRow]):
    """Rows computed on first access, each once: asking for one row fits only that row."""

    def __init__(self, makers: dict[str, Callable[[], ComparisonRow]]) -> None:
        self._makers = makers
        self._made: dict[str, ComparisonRow] = {}

    def __getitem__(self, name: str) -> ComparisonRow:
        if name not in self._made:
            self._made[name] = self._makers[name]()
        return self._made[name]

    def __iter__(self) -> Iterator[str]:
        return iter(self._makers)

    def __len__(self) -> int:
        return len(self._makers)
