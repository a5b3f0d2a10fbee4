"""The task base: splits, option handling, scoring on masked positions, the run-record summary.

Symbols in shapes: N sequences, T steps, I input size, O output size, C classes.
"""

from __future__ import annotations

import dataclasses
import zlib
from abc import ABC, abstractmethod
from collections.abc import Mapping
from pathlib import Path
from typing import Any, ClassVar

import numpy as np
import torch

from loopzoo._checks import choice
from loopzoo.tasks._options import build_options, check_seed
from loopzoo.tasks._rows import ComparisonRow
from loopzoo.tasks._scaling import Standardizer
from loopzoo.tasks._scoring import classification_metrics, regression_metrics

__all__ = [
    "SPLITS",
    "ClassificationTask",
    "RegressionTask",
    "Split",
    "Task",
    "make_split",
    "one_hot",
    "part_bounds",
    "shortest_record",
    "sequence_spans",
    "split_generators",
]

SPLITS = ("train", "val", "test")


@dataclasses.dataclass(frozen=True, eq=False)
class Split:
    """One part of a task's data.

    x: (N, T, I) float32 inputs. y: (N, T, O) float32 targets (regression, in scaled units) or
    (N, T) int64 class ids (classification). mask: (N, T) bool, the scored positions.
    lengths: (N,) int64 valid lengths; positions at or past a length are padding (zeros, never
    masked). span: (N, 2) int64, the first and last index in the task's source order (time step,
    file row, sequence or draw number) that the sequence's inputs and targets read; sequences of
    different splits never share an index.
    """

    x: torch.Tensor
    y: torch.Tensor
    mask: torch.Tensor
    lengths: torch.Tensor
    span: torch.Tensor

    def __post_init__(self) -> None:
        n, t = self.mask.shape
        if self.x.shape[:2] != (n, t) or self.y.shape[:2] != (n, t):
            raise ValueError(f"split tensors disagree: x {tuple(self.x.shape)}, "
                             f"y {tuple(self.y.shape)}, mask {tuple(self.mask.shape)}")
        if self.lengths.shape != (n,) or self.span.shape != (n, 2):
            raise ValueError(f"split lengths {tuple(self.lengths.shape)} / span "
                             f"{tuple(self.span.shape)} do not match {n} sequences")

    def __len__(self) -> int:
        return int(self.mask.shape[0])


def make_split(x: np.ndarray, y: np.ndarray, mask: np.ndarray, lengths: np.ndarray,
               span: np.ndarray, classes: bool) -> Split:
    """Build a Split from numpy arrays with the contract's dtypes."""
    return Split(
        x=torch.as_tensor(np.ascontiguousarray(x), dtype=torch.float32),
        y=torch.as_tensor(np.ascontiguousarray(y), dtype=torch.int64 if classes else torch.float32),
        mask=torch.as_tensor(np.ascontiguousarray(mask), dtype=torch.bool),
        lengths=torch.as_tensor(np.ascontiguousarray(lengths), dtype=torch.int64),
        span=torch.as_tensor(np.ascontiguousarray(span), dtype=torch.int64),
    )


def split_generators(task: str, seed: int) -> dict[str, np.random.Generator]:
    """One independent random stream per split, so resizing one split leaves the others alone."""
    root = np.random.SeedSequence([zlib.crc32(task.encode()), seed])
    return {name: np.random.default_rng(child) for name, child in zip(SPLITS, root.spawn(3),
                                                                       strict=True)}


def sequence_spans(sizes: dict[str, int]) -> dict[str, np.ndarray]:
    """Spans for generated sequences: one draw number each, numbered train, then val, then test."""
    spans, start = {}, 0
    for name in SPLITS:
        draws = np.arange(start, start + sizes[name], dtype=np.int64)
        spans[name] = np.stack([draws, draws], axis=1)
        start += sizes[name]
    return spans


def part_bounds(total: int, val_fraction: float,
                test_fraction: float) -> dict[str, tuple[int, int]]:
    """Chronological [start, end) of train, val and test for ``total`` steps of a record."""
    val_start = round(total * (1 - val_fraction - test_fraction))
    test_start = round(total * (1 - test_fraction))
    return {"train": (0, val_start), "val": (val_start, test_start), "test": (test_start, total)}


def shortest_record(per_part: int, val_fraction: float, test_fraction: float) -> int:
    """The fewest steps for which ``part_bounds`` gives every part at least ``per_part`` steps."""
    total = 3 * per_part
    while min(b - a for a, b in part_bounds(total, val_fraction,
                                            test_fraction).values()) < per_part:
        total += 1
    return total


def one_hot(ids: np.ndarray, classes: int) -> np.ndarray:
    """(...) int ids -> (..., classes) float32 one-hot; negative ids (padding) give all zeros."""
    encoded = np.zeros((*ids.shape, classes), dtype=np.float32)
    valid = ids >= 0
    encoded[valid, ids[valid]] = 1.0
    return encoded


def _jsonable(value: Any) -> Any:
    if isinstance(value, tuple | list):
        return [_jsonable(v) for v in value]
    if isinstance(value, Path):
        return str(value)
    return value


class Task(ABC):
    """A dataset with fixed train / val / test splits, its metrics, classical rows and bounds.

    Subclasses set the class attributes, an ``Options`` dataclass (validated in its
    ``__post_init__``), ``input_size`` / ``output_size`` in ``__init__``, and implement
    ``_make_splits``, ``_metrics`` and ``baselines`` (and ``bounds`` where one is known).

    Example:
        >>> task = loopzoo.tasks.create("adding", seed=0, length=50)
        >>> split = task.split("test")
        >>> task.score(torch.ones_like(split.y), split)["mse"]   # about 1/6
    """

    name: ClassVar[str]
    kind: ClassVar[str]
    metric: ClassVar[str]
    goal: ClassVar[str]
    Options: ClassVar[type]
    # False for fixed records split chronologically: the seed then only seeds the models.
    seed_changes_data: ClassVar[bool] = True
    # Options naming the user's input files; their content is part of a run's identity.
    file_options: ClassVar[tuple[str, ...]] = ()
    # True when every target is measured some steps later (``observed_after`` has no None), so
    # output feedback can be teacher-forced on observations; readable without building the task.
    targets_observed: ClassVar[bool] = False

    input_size: int
    output_size: int

    def __init__(self, seed: int = 0, **options: Any) -> None:
        self.seed = check_seed(seed)
        self.options = build_options(self.Options, self.name, options)
        self._splits: dict[str, Split] | None = None
        self._files: list[dict[str, Any]] = []  # set by tasks that read the user's files

    def split(self, name: str) -> Split:
        """The "train", "val" or "test" part; built once, then cached."""
        choice("split", name, SPLITS)
        if self._splits is None:
            self._splits = self._make_splits()
        return self._splits[name]

    def score(self, prediction: torch.Tensor | np.ndarray, split: Split | str) -> dict[str, float]:
        """Every metric of the task on ``split``'s masked positions, in the data's own units.

        prediction: (N, T, O) model output, scaled values (regression) or logits (classes).
        """
        part = self.split(split) if isinstance(split, str) else split
        # np.array copies, so read-only (broadcast) arrays become ordinary tensors.
        values = torch.as_tensor(np.array(prediction) if isinstance(prediction, np.ndarray)
                                 else prediction)
        expected = (len(part), part.mask.shape[1], self.output_size)
        if tuple(values.shape) != expected:
            raise ValueError(f"prediction must have shape (N, T, output_size) = {expected} for "
                             f"task {self.name!r}, got {tuple(values.shape)}")
        if not values.is_floating_point():
            raise ValueError(f"prediction must be floating point, got {values.dtype}")
        values = values.detach().to(torch.float64)
        bad = int((~torch.isfinite(values[part.mask])).sum())
        if bad:
            raise ValueError(f"prediction has {bad} non-finite values at scored positions")
        return self._metrics(values, part)

    @abstractmethod
    def baselines(self) -> Mapping[str, ComparisonRow]:
        """Classical rows one could ship instead of a topology, each scored by ``score`` on the
        test split (or skipped with the reason). Expensive rows may be computed on first access
        (``LazyRows``)."""

    def bounds(self) -> dict[str, ComparisonRow]:
        """Lines no model can be shipped as: exact optima and noise floors (kind "bound"),
        reference rates such as a compressor's (kind "reference"). None by default."""
        return {}

    def observed_after(self) -> tuple[int | None, ...]:
        """When each target becomes observable, one entry per target: per output channel for
        regression, one for the class of a classification task.

        An entry d means the target of step t is measured by step t + d (it is then an input or a
        measurement a deployed model has): 1 for next-step prediction, h for a forecast h steps
        ahead. None means it is never observed (a sequence label, a sum of marked values): a
        deployed model never sees it. Output feedback may feed back under teacher forcing only
        what is observed at that step (the series-parallel model of Narendra & Parthasarathy
        1990). The base declares every target never observed; tasks whose targets are measured
        later override this.
        """
        return (None,) * self.target_count

    @property
    def target_count(self) -> int:
        """Targets per step: the output channels for regression, one class for classification."""
        return self.output_size if self.kind == "regression" else 1

    def observability(self) -> str:
        """``observed_after`` in one word for records: "never", "next_step" (every target is
        the next step's input) or "after:<d>" (comma-separated delays, "never" where one is)."""
        delays = self.observed_after()
        if all(d is None for d in delays):
            return "never"
        if all(d == 1 for d in delays):
            return "next_step"
        return "after:" + ",".join("never" if d is None else str(d) for d in delays)

    def describe(self) -> dict[str, Any]:
        """JSON-serialisable options and data facts for the run record."""
        sizes = {}
        for name in SPLITS:
            part = self.split(name)
            sizes[name] = {"sequences": len(part), "steps": int(part.mask.shape[1]),
                           "scored_positions": int(part.mask.sum())}
        options = {f.name: _jsonable(getattr(self.options, f.name))
                   for f in dataclasses.fields(self.options)}
        return {"name": self.name, "kind": self.kind, "seed": self.seed, "options": options,
                "input_size": self.input_size, "output_size": self.output_size,
                "metric": self.metric, "goal": self.goal, "splits": sizes,
                "observable": self.observability(), **self._facts()}

    def data_files(self) -> list[dict[str, Any]]:
        """The user's files this task read, one dict each: ``role`` (the option naming it),
        ``path``, ``sha256`` and ``bytes`` of the content read, ``rows`` (data rows; text lines).
        Empty for generated data and the open datasets."""
        return [dict(file) for file in self._files]

    def _facts(self) -> dict[str, Any]:
        """Task-specific data facts for ``describe``."""
        return {}

    def preprocessing(self) -> dict[str, Any]:
        """What lies between raw data and the model, as plain JSON data for the artifact
        (``loopzoo.serve.preprocessing`` reads it). Here: inputs as given, outputs as computed
        (class probabilities for classification); tasks that scale or encode data override it."""
        return {"kind": "arrays",
                "outputs": "classes" if self.kind == "classification" else "values"}

    @abstractmethod
    def _make_splits(self) -> dict[str, Split]:
        """Build all three splits."""

    @abstractmethod
    def _metrics(self, prediction: torch.Tensor, split: Split) -> dict[str, float]:
        """Metrics for a checked float64 prediction."""


class RegressionTask(Task):
    """Targets are real values; errors are reported in data units (``scaler`` inverted).

    Subclasses set ``scaler`` (for the targets) and may name the output channels (e.g. by
    horizon) in ``channel_names``, which adds a per-channel MSE.
    """

    kind = "regression"
    metric = "mse"
    goal = "min"

    scaler: Standardizer
    channel_names: tuple[str, ...] | None = None

    def _metrics(self, prediction: torch.Tensor, split: Split) -> dict[str, float]:
        return regression_metrics(self.scaler.inverse(prediction), self.scaler.inverse(split.y),
                                  split.mask, self.channel_names)

    def score_in_data_units(self, prediction: np.ndarray, split: Split | str) -> dict[str, float]:
        """``score`` for a prediction given in data units (how the baselines are scored)."""
        return self.score(torch.as_tensor(self.scaler.transform(prediction)), split)


class ClassificationTask(Task):
    """Targets are class ids; ``next_symbol`` tasks also report bits per character."""

    kind = "classification"
    metric = "cross_entropy"
    goal = "min"
    next_symbol: ClassVar[bool] = False

    def _metrics(self, prediction: torch.Tensor, split: Split) -> dict[str, float]:
        return classification_metrics(prediction, split.y, split.mask, self.next_symbol)
