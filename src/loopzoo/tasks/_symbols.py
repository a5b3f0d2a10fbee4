"""Next-symbol tasks: symbol strings -> one-hot inputs and next-symbol targets; n-gram baselines."""

from __future__ import annotations

from abc import abstractmethod
from collections.abc import Sequence
from typing import Any, ClassVar

import numpy as np

from loopzoo.tasks._base import SPLITS, ClassificationTask, Split, make_split, one_hot

__all__ = ["NextSymbolTask", "encode_next_symbol"]


def encode_next_symbol(sequences: Sequence[np.ndarray], classes: int,
                       span: np.ndarray) -> Split:
    """Symbol id strings (each of length >= 2) -> a Split predicting s[t + 1] from s[: t + 1].

    x[i, t] = one_hot(s_i[t]), y[i, t] = s_i[t + 1] for t < len(s_i) - 1; shorter strings are
    padded (zero inputs, target 0, unmasked) to the longest one.
    """
    lengths = np.array([len(s) - 1 for s in sequences], dtype=np.int64)
    steps = int(lengths.max())
    inputs = np.full((len(sequences), steps), -1, dtype=np.int64)
    targets = np.zeros((len(sequences), steps), dtype=np.int64)
    for row, symbols in enumerate(sequences):
        inputs[row, : len(symbols) - 1] = symbols[:-1]
        targets[row, : len(symbols) - 1] = symbols[1:]
    return make_split(one_hot(inputs, classes), targets, inputs >= 0, lengths, span, classes=True)


class NextSymbolTask(ClassificationTask):
    """Predict the next symbol of each string, scored in bits per character.

    Subclasses set ``alphabet`` (one entry per class) and implement ``_symbol_strings``.
    Baselines "unigram" and "bigram": symbol frequencies of the training targets, without and
    with the current symbol as context, add-one (Laplace) smoothed so unseen pairs stay finite.
    """

    next_symbol: ClassVar[bool] = True
    metric = "bits_per_char"
    alphabet: tuple[str, ...]

    @property
    def input_size(self) -> int:  # type: ignore[override]
        return len(self.alphabet)

    @property
    def output_size(self) -> int:  # type: ignore[override]
        return len(self.alphabet)

    def preprocessing(self) -> dict[str, Any]:
        """The alphabet (one class per symbol); each string is read whole from the zero state."""
        return {"kind": "next-symbol", "alphabet": list(self.alphabet), "chunk": None}

    def observed_after(self) -> tuple[int | None, ...]:
        """The next symbol is the next step's input: observed one step later."""
        return (1,)

    @abstractmethod
    def _symbol_strings(self) -> dict[str, tuple[list[np.ndarray], np.ndarray]]:
        """Per split: the id strings and their (N, 2) spans."""

    def _make_splits(self) -> dict[str, Split]:
        strings = self._symbol_strings()
        return {name: encode_next_symbol(strings[name][0], len(self.alphabet), strings[name][1])
                for name in SPLITS}

    def baselines(self) -> dict[str, dict[str, float]]:
        train, test = self.split("train"), self.split("test")
        classes = len(self.alphabet)
        mask = train.mask.numpy()
        current, following = train.x.argmax(-1).numpy()[mask], train.y.numpy()[mask]
        unigram = np.bincount(following, minlength=classes) + 1.0
        pairs = np.ones((classes, classes))
        np.add.at(pairs, (current, following), 1.0)
        unigram_logits = np.broadcast_to(np.log(unigram / unigram.sum()),
                                         (*test.mask.shape, classes))
        bigram_logits = np.log(pairs / pairs.sum(axis=1, keepdims=True))[test.x.argmax(-1).numpy()]
        return {"unigram": self.score(unigram_logits, test),
                "bigram": self.score(bigram_logits, test)}
