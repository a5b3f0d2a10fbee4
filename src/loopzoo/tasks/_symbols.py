"""Next-symbol tasks: symbol strings -> one-hot inputs and next-symbol targets; n-gram baselines
and a compressor's rate."""

from __future__ import annotations

import lzma
import math
from abc import abstractmethod
from collections.abc import Mapping, Sequence
from typing import Any, ClassVar

import numpy as np

from loopzoo.tasks._base import SPLITS, ClassificationTask, Split, make_split, one_hot
from loopzoo.tasks._ngram import METHODS, NGramModel, contexts
from loopzoo.tasks._rows import ComparisonRow, LazyRows, Stopwatch

__all__ = ["NGRAM_ORDERS", "NextSymbolTask", "encode_next_symbol"]

NGRAM_ORDERS = (2, 3, 4, 5)  # orders the "ngram" row chooses from on the validation part


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
    Baselines, all fitted on the training part and reading the same strings as the topologies:
    "unigram" and "bigram" (symbol frequencies of the training targets, without and with the
    current symbol as context, add-one (Laplace) smoothed) and "ngram" (``NGramModel``: method
    and order 2-5 chosen by validation bits per character). Reference (``bounds``):
    "compressor", lzma's rate on the test part given the training part as history.
    """

    next_symbol: ClassVar[bool] = True
    metric = "bits_per_char"
    alphabet: tuple[str, ...]
    _rows: LazyRows | None = None

    @property
    def input_size(self) -> int:  # type: ignore[override]
        return len(self.alphabet)

    @property
    def output_size(self) -> int:  # type: ignore[override]
        return len(self.alphabet)

    def preprocessing(self) -> dict[str, Any]:
        """The alphabet (one class per symbol); each string is read whole from the zero state."""
        return {"kind": "next-symbol", "alphabet": list(self.alphabet), "chunk": None}

    targets_observed = True

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

    def baselines(self) -> Mapping[str, ComparisonRow]:
        if self._rows is None:
            self._rows = LazyRows({"unigram": lambda: self._frequency_rows()["unigram"],
                                   "bigram": lambda: self._frequency_rows()["bigram"],
                                   "ngram": self._ngram_row})
        return self._rows

    def _frequency_rows(self) -> dict[str, ComparisonRow]:
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
        varies = self.seed_changes_data
        return {"unigram": ComparisonRow(self.score(unigram_logits, test), seed_dependent=varies),
                "bigram": ComparisonRow(self.score(bigram_logits, test), seed_dependent=varies)}

    def _events(self, name: str) -> tuple[np.ndarray, np.ndarray]:
        """Contexts (M, max order - 1) and next symbols (M,) of a split's scored positions."""
        part = self.split(name)
        mask = part.mask.numpy()
        width = max(NGRAM_ORDERS) - 1
        return (contexts(part.x.argmax(-1).numpy(), mask, width, start=len(self.alphabet)),
                part.y.numpy()[mask])

    def _ngram_row(self) -> ComparisonRow:
        watch = Stopwatch()
        with watch.running():
            train_context, train_targets = self._events("train")
            val_context, val_targets = self._events("val")
            val_bits, models = {}, {}
            for method in METHODS:
                for order in NGRAM_ORDERS:
                    model = NGramModel(len(self.alphabet), order, method).fit(train_context,
                                                                              train_targets)
                    picked = model.log_probs(val_context)[np.arange(len(val_targets)),
                                                          val_targets]
                    key = f"{method}/{order}"
                    val_bits[key] = float(-picked.mean() / math.log(2))
                    models[key] = model
            best = min(val_bits, key=val_bits.get)
        model = models[best]
        test = self.split("test")
        logits = np.zeros((*test.mask.shape, len(self.alphabet)))
        logits[test.mask.numpy()] = model.log_probs(self._events("test")[0])
        details = {"method": model.method, "order": model.order,
                   "discounts": [level.discounts.tolist() for level in model.levels],
                   "chosen_on": "validation bits per character", "val_bits_per_char": val_bits}
        return ComparisonRow(self.score(logits, test), details=details,
                             fit_seconds=watch.seconds, seed_dependent=self.seed_changes_data)

    def _stream(self, name: str) -> str:
        """A split's symbols as one string (the strings one after another)."""
        part = self.split(name)
        inputs, targets = part.x.argmax(-1).numpy(), part.y.numpy()
        symbols = []
        for row, length in enumerate(part.lengths.tolist()):
            symbols += [self.alphabet[i] for i in inputs[row, :length]]
            symbols.append(self.alphabet[targets[row, length - 1]])
        return "".join(symbols)

    def bounds(self) -> dict[str, ComparisonRow]:
        """"compressor": 8 x (lzma size of train + test - lzma size of train) / scored test
        positions, a general-purpose compressor's rate given the training part as history
        (a reference line, not a model: it is never ranked or recommended)."""
        history = self._stream("train").encode()
        following = self._stream("test").encode()
        watch = Stopwatch()
        with watch.running():
            extra = _compressed_size(history + following) - _compressed_size(history)
        bits = 8 * extra / int(self.split("test").mask.sum())
        return {"compressor": ComparisonRow(
            {"bits_per_char": bits, "cross_entropy": bits * math.log(2)}, kind="reference",
            details={"compressor": "lzma (xz), preset 9 extreme", "history": "the training part",
                     "test_bytes": len(following), "extra_compressed_bytes": extra},
            fit_seconds=watch.seconds, seed_dependent=self.seed_changes_data)}


def _compressed_size(data: bytes) -> int:
    return len(lzma.compress(data, preset=9 | lzma.PRESET_EXTREME))
