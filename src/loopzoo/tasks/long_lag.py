"""Long-lag memory probes: the adding problem and the copy memory task.

Both as defined by Arjovsky, Shah & Bengio, "Unitary Evolution Recurrent Neural Networks"
(ICML 2016), with their published memoryless baselines.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from loopzoo._checks import integer
from loopzoo.tasks._base import (
    ClassificationTask,
    RegressionTask,
    Split,
    make_split,
    one_hot,
    sequence_spans,
    split_generators,
)
from loopzoo.tasks._catalog import TASKS
from loopzoo.tasks._options import SplitSizes
from loopzoo.tasks._rows import ComparisonRow
from loopzoo.tasks._scaling import Standardizer
from loopzoo.tasks._scoring import IMPOSSIBLE_LOGIT

__all__ = ["AddingTask", "CopyTask"]


@dataclasses.dataclass(frozen=True)
class AddingOptions(SplitSizes):
    length: int = 100  # T, the number of steps; the two marked values sit T/2 apart on average

    def __post_init__(self) -> None:
        super().__post_init__()
        integer("length", self.length, minimum=2, maximum=100_000)
        self.check_volume("adding", self.length, channels=4)  # x 2, y 1, mask 1


@TASKS.register("adding")
class AddingTask(RegressionTask):
    """Adding problem, two-channel variant: remember two marked values over a long lag.

    x[:, t] = (u_t, m_t) with u_t ~ U[0, 1] and m_t = 1 at exactly two steps, one uniform in the
    first half and one in the second; the target at the last step is the sum of the two marked
    u_t. Shapes: x (N, T, 2), y (N, T, 1), only step T - 1 masked.
    Baseline "memoryless": always predict 1, MSE = Var(U1 + U2) = 1/6.

    Example:
        >>> task = loopzoo.tasks.create("adding", length=200, seed=1)
    """

    name = "adding"
    Options = AddingOptions
    input_size = 2
    output_size = 1

    def __init__(self, seed: int = 0, **options: object) -> None:
        super().__init__(seed, **options)
        self.scaler = Standardizer.identity(1)

    def _make_splits(self) -> dict[str, Split]:
        sizes = self.options.sizes()
        spans = sequence_spans(sizes)
        splits = {}
        for name, rng in split_generators(self.name, self.seed).items():
            splits[name] = self._generate(rng, sizes[name], spans[name])
        return splits

    def _generate(self, rng: np.random.Generator, count: int, span: np.ndarray) -> Split:
        steps = self.options.length
        half = steps // 2
        values = rng.uniform(0.0, 1.0, size=(count, steps))
        first = rng.integers(0, half, size=count)
        second = rng.integers(half, steps, size=count)
        rows = np.arange(count)
        markers = np.zeros((count, steps))
        markers[rows, first] = 1.0
        markers[rows, second] = 1.0
        y = np.zeros((count, steps, 1))
        y[:, -1, 0] = values[rows, first] + values[rows, second]
        mask = np.zeros((count, steps), dtype=bool)
        mask[:, -1] = True
        return make_split(np.stack([values, markers], axis=-1), y, mask,
                          np.full(count, steps), span, classes=False)

    def baselines(self) -> dict[str, ComparisonRow]:
        test = self.split("test")
        return {"memoryless": ComparisonRow(
            self.score_in_data_units(np.ones(tuple(test.y.shape)), test))}


# Copy-task alphabet in Arjovsky et al.'s layout: 0 blank, 1..8 data symbols, 9 delimiter.
BLANK, DELIMITER, DATA_SYMBOLS, RECALLED = 0, 9, 8, 10


@dataclasses.dataclass(frozen=True)
class CopyOptions(SplitSizes):
    length: int = 100  # T, the lag; each sequence has T + 20 steps

    def __post_init__(self) -> None:
        super().__post_init__()
        integer("length", self.length, minimum=1, maximum=100_000)
        self.check_volume("copy", self.length + 20, channels=12)  # x 10, y 1, mask 1


@TASKS.register("copy")
class CopyTask(ClassificationTask):
    """Copy memory task: reproduce 10 data symbols after a lag of T blanks.

    Input (T + 20 steps, one-hot over 10 symbols): 10 data symbols drawn uniformly from 8, T - 1
    blanks, the delimiter, 10 blanks. Target: blank for the first T + 10 steps, then the 10 data
    symbols in order. Every step is scored (mean cross-entropy over all T + 20 steps).
    Shapes: x (N, T + 20, 10), y (N, T + 20).
    Baseline "memoryless": blank, then uniform over the data symbols: 10 ln 8 / (T + 20) nats.

    Example:
        >>> task = loopzoo.tasks.create("copy", length=200)
        >>> task.memoryless_cross_entropy()   # 0.0945
    """

    name = "copy"
    Options = CopyOptions
    input_size = 10
    output_size = 10

    def _make_splits(self) -> dict[str, Split]:
        sizes = self.options.sizes()
        spans = sequence_spans(sizes)
        return {name: self._generate(rng, sizes[name], spans[name])
                for name, rng in split_generators(self.name, self.seed).items()}

    def _generate(self, rng: np.random.Generator, count: int, span: np.ndarray) -> Split:
        lag = self.options.length
        steps = lag + 2 * RECALLED
        data = rng.integers(1, DATA_SYMBOLS + 1, size=(count, RECALLED))
        inputs = np.full((count, steps), BLANK)
        inputs[:, :RECALLED] = data
        inputs[:, RECALLED + lag - 1] = DELIMITER
        targets = np.full((count, steps), BLANK)
        targets[:, -RECALLED:] = data
        return make_split(one_hot(inputs, self.output_size), targets,
                          np.ones((count, steps), dtype=bool), np.full(count, steps), span,
                          classes=True)

    def memoryless_cross_entropy(self) -> float:
        """The published memoryless figure 10 ln 8 / (T + 20) for this task's length."""
        return RECALLED * math.log(DATA_SYMBOLS) / (self.options.length + 2 * RECALLED)

    def baselines(self) -> dict[str, ComparisonRow]:
        test = self.split("test")
        steps = test.mask.shape[1]
        logits = np.full((len(test), steps, self.output_size), IMPOSSIBLE_LOGIT)
        logits[:, : steps - RECALLED, BLANK] = 0.0
        logits[:, steps - RECALLED :, 1 : DATA_SYMBOLS + 1] = 0.0
        return {"memoryless": ComparisonRow(self.score(logits, test))}
