"""The embedded Reber grammar: next-symbol prediction of variable-length strings.

Grammar (Reber 1967, as used by Cleeremans, Servan-Schreiber & McClelland 1989): states 0-6,
each choice with probability 1/2. The embedded form wraps a Reber string as B (T|P) ... (T|P) E
with the same T or P, so predicting the second-to-last symbol needs the second one remembered.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from loopzoo._checks import boolean
from loopzoo.tasks._base import SPLITS, sequence_spans, split_generators
from loopzoo.tasks._catalog import TASKS
from loopzoo.tasks._options import SplitSizes
from loopzoo.tasks._rows import ComparisonRow
from loopzoo.tasks._scoring import IMPOSSIBLE_LOGIT
from loopzoo.tasks._symbols import NextSymbolTask

__all__ = ["REBER_TRANSITIONS", "ReberTask"]

# state -> the (symbol, next state) choices, each taken with probability 1/2; None ends a string.
REBER_TRANSITIONS: dict[int, tuple[tuple[str, int | None], ...]] = {
    0: (("B", 1),),
    1: (("T", 2), ("P", 3)),
    2: (("S", 2), ("X", 4)),
    3: (("T", 3), ("V", 5)),
    4: (("X", 3), ("S", 6)),
    5: (("P", 4), ("V", 6)),
    6: (("E", None),),
}
ALPHABET = ("B", "T", "P", "S", "X", "V", "E")


def _sample_reber(rng: np.random.Generator) -> tuple[list[str], list[frozenset[str]]]:
    """One Reber string and, per symbol, the set the grammar allowed at that position."""
    symbols, allowed, state = [], [], 0
    while state is not None:
        choices = REBER_TRANSITIONS[state]
        allowed.append(frozenset(symbol for symbol, _ in choices))
        symbol, state = choices[int(rng.integers(len(choices)))]
        symbols.append(symbol)
    return symbols, allowed


@dataclasses.dataclass(frozen=True)
class ReberOptions(SplitSizes):
    embedded: bool = True  # False: plain Reber strings, which need no long memory

    def __post_init__(self) -> None:
        super().__post_init__()
        boolean("embedded", self.embedded)


@TASKS.register("reber")
class ReberTask(NextSymbolTask):
    """Next-symbol prediction on (embedded) Reber strings of variable length.

    x[:, t] = one_hot(s_t) over B T P S X V E; y[:, t] = s_{t+1}; lengths = len(s) - 1.
    Baselines as for every next-symbol task; bounds: "optimal", the automaton's exact
    next-symbol distribution (1/2 on each of two allowed symbols at a branching step, 1 on a
    forced one), whose mean loss per predicted symbol is ``optimal_cross_entropy``, and the
    compressor's rate.

    Example:
        >>> task = loopzoo.tasks.create("reber", seed=0)
        >>> task.optimal_cross_entropy("test")   # about 0.44 nats per symbol
    """

    name = "reber"
    Options = ReberOptions
    alphabet = ALPHABET

    def __init__(self, seed: int = 0, **options: object) -> None:
        super().__init__(seed, **options)
        self._allowed: dict[str, list[list[frozenset[str]]]] = {}

    def _sample(self, rng: np.random.Generator) -> tuple[list[str], list[frozenset[str]]]:
        symbols, allowed = _sample_reber(rng)
        if not self.options.embedded:
            return symbols, allowed
        wrap = "TP"[int(rng.integers(2))]
        return (["B", wrap, *symbols, wrap, "E"],
                [frozenset("B"), frozenset("TP"), *allowed, frozenset(wrap), frozenset("E")])

    def _symbol_strings(self) -> dict[str, tuple[list[np.ndarray], np.ndarray]]:
        sizes = self.options.sizes()
        spans = sequence_spans(sizes)
        index = {symbol: i for i, symbol in enumerate(ALPHABET)}
        strings = {}
        for name, rng in split_generators(self.name, self.seed).items():
            drawn = [self._sample(rng) for _ in range(sizes[name])]
            self._allowed[name] = [allowed for _, allowed in drawn]
            ids = [np.array([index[s] for s in symbols]) for symbols, _ in drawn]
            strings[name] = (ids, spans[name])
        return strings

    def optimal_cross_entropy(self, split: str) -> float:
        """Mean loss (nats) per predicted symbol of the automaton's exact predictor on ``split``:
        ln 2 for each branching step, 0 for each forced one."""
        self.split(split)
        costs = [math.log(len(allowed))
                 for string in self._allowed[split] for allowed in string[1:]]
        return float(np.mean(costs))

    def bounds(self) -> dict[str, ComparisonRow]:
        test = self.split("test")
        logits = np.full((*test.mask.shape, len(ALPHABET)), IMPOSSIBLE_LOGIT)
        for row, string in enumerate(self._allowed["test"]):
            for step, allowed in enumerate(string[1:]):
                logits[row, step, [ALPHABET.index(s) for s in allowed]] = 0.0
        optimal = ComparisonRow(self.score(logits, test), kind="bound",
                                details={"what": "the grammar's exact next-symbol distribution"})
        return {**super().bounds(), "optimal": optimal}

    def _facts(self) -> dict[str, object]:
        return {"optimal_cross_entropy": {name: self.optimal_cross_entropy(name)
                                          for name in SPLITS}}
