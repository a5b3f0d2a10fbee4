"""Running parity: the XOR of all bits so far, a probe that needs exact memory of the whole past."""

from __future__ import annotations

import dataclasses

import numpy as np

from loopzoo._checks import integer
from loopzoo.tasks._base import (
    ClassificationTask,
    Split,
    make_split,
    sequence_spans,
    split_generators,
)
from loopzoo.tasks._catalog import TASKS
from loopzoo.tasks._options import SplitSizes
from loopzoo.tasks._rows import ComparisonRow
from loopzoo.tasks._scoring import IMPOSSIBLE_LOGIT

__all__ = ["ParityTask"]


@dataclasses.dataclass(frozen=True)
class ParityOptions(SplitSizes):
    length: int = 20  # T; one flipped bit anywhere flips every later target

    def __post_init__(self) -> None:
        super().__post_init__()
        integer("length", self.length, minimum=1, maximum=100_000)
        self.check_volume("parity", self.length, channels=3)  # x 1, y 1, mask 1


@TASKS.register("parity")
class ParityTask(ClassificationTask):
    """Running XOR of a fair bit stream, scored at every step.

    x[:, t, 0] = b_t ~ Bernoulli(1/2); y[:, t] = b_0 xor ... xor b_t (class 0 or 1).
    Shapes: x (N, T, 1), y (N, T).
    Baseline "memoryless": the best guess from the current bit alone, exact at t = 0
    (y_0 = b_0) and a coin flip afterwards (y_t is independent of b_t for t > 0), so its
    cross-entropy is (T - 1) ln 2 / T.

    Example:
        >>> task = loopzoo.tasks.create("parity", length=40, seed=2)
    """

    name = "parity"
    metric = "accuracy"
    goal = "max"
    Options = ParityOptions
    input_size = 1
    output_size = 2

    def _make_splits(self) -> dict[str, Split]:
        sizes = self.options.sizes()
        spans = sequence_spans(sizes)
        splits = {}
        for name, rng in split_generators(self.name, self.seed).items():
            count, steps = sizes[name], self.options.length
            bits = rng.integers(0, 2, size=(count, steps))
            parity = np.bitwise_xor.accumulate(bits, axis=1)
            splits[name] = make_split(bits[..., None], parity, np.ones((count, steps), dtype=bool),
                                      np.full(count, steps), spans[name], classes=True)
        return splits

    def baselines(self) -> dict[str, ComparisonRow]:
        test = self.split("test")
        logits = np.zeros((*test.mask.shape, 2))
        first_bit = test.x[:, 0, 0].numpy().astype(np.int64)
        logits[np.arange(len(test)), 0, 1 - first_bit] = IMPOSSIBLE_LOGIT
        return {"memoryless": ComparisonRow(self.score(logits, test))}
