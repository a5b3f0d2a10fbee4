"""Whole-sequence classification: one class per sequence, scored at its last valid step."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from loopzoo.tasks._base import ClassificationTask, Split, make_split
from loopzoo.tasks._rows import ComparisonRow, LazyRows, Stopwatch
from loopzoo.tasks._scoring import IMPOSSIBLE_LOGIT

__all__ = ["SequenceClassTask", "encode_sequences", "stratified_parts"]

CLASS_BOOSTING_ROUNDS = 100  # most boosting iterations; the count is chosen on validation


def encode_sequences(sequences: Sequence[np.ndarray], labels: np.ndarray,
                     span: np.ndarray) -> Split:
    """(L_i, F) feature arrays and one label each -> a Split padded to the longest sequence.

    y holds the label at every valid step; only the last valid step is masked.
    """
    lengths = np.array([len(s) for s in sequences], dtype=np.int64)
    count, steps, features = len(sequences), int(lengths.max()), sequences[0].shape[1]
    x = np.zeros((count, steps, features), dtype=np.float32)
    y = np.zeros((count, steps), dtype=np.int64)
    mask = np.zeros((count, steps), dtype=bool)
    for row, (values, label) in enumerate(zip(sequences, labels, strict=True)):
        x[row, : len(values)] = values
        y[row, : len(values)] = label
        mask[row, len(values) - 1] = True
    return make_split(x, y, mask, lengths, span, classes=True)


def stratified_parts(labels: np.ndarray, fractions: dict[str, float],
                     rng: np.random.Generator,
                     names: Sequence[str] | None = None) -> dict[str, np.ndarray]:
    """Seeded split of item indices, each class divided in the given proportions.

    ``fractions`` gives the val and test shares; train takes the rest. Indices are sorted.
    Every class must reach each part (at least one item in train, val and test): a class too
    small for that is refused with a ``ValueError`` naming it (``names[label]`` if given).
    """
    parts: dict[str, list[int]] = {"train": [], "val": [], "test": []}
    for label in np.unique(labels):
        members = rng.permutation(np.flatnonzero(labels == label))
        n_val = round(len(members) * fractions["val"])
        n_test = round(len(members) * fractions["test"])
        if min(n_val, n_test, len(members) - n_val - n_test) < 1:
            name = repr(names[label]) if names is not None else f"number {label}"
            raise ValueError(
                f"class {name} has {len(members)} sequence(s): too few to appear in the "
                f"train, val and test parts at val_fraction={fractions['val']} and "
                f"test_fraction={fractions['test']}; add sequences of it or drop the class"
            )
        parts["val"] += list(members[:n_val])
        parts["test"] += list(members[n_val : n_val + n_test])
        parts["train"] += list(members[n_val + n_test :])
    return {name: np.sort(np.array(items, dtype=np.int64)) for name, items in parts.items()}


class SequenceClassTask(ClassificationTask):
    """Sequence classification; baselines scored at each test sequence's last valid step.

    "logistic": scikit-learn LogisticRegression (max_iter=5000, otherwise its defaults) on the
    flattened input sequences of the training part, zero-padded to the longest training
    sequence (steps of longer test sequences are beyond its reach and cut). "boosted-trees":
    scikit-learn HistGradientBoostingClassifier on the same features, the iteration count (at
    most ``CLASS_BOOSTING_ROUNDS``) chosen by validation cross-entropy. "prior": the training
    class frequencies, add-one smoothed, for every sequence.
    """

    metric = "accuracy"
    goal = "max"
    _rows: LazyRows | None = None

    @staticmethod
    def _flat(split: Split, steps: int) -> tuple[np.ndarray, np.ndarray]:
        """(N, steps * I) zero-padded inputs (cut after ``steps``) and the (N,) labels."""
        labels = split.y[np.arange(len(split)), split.lengths - 1].numpy()
        x = np.zeros((len(split), steps, split.x.shape[2]))
        kept = min(steps, split.x.shape[1])
        x[:, :kept] = split.x[:, :kept].numpy()
        return x.reshape(len(split), -1), labels

    def _at_last_step(self, split: Split, log_probs: np.ndarray) -> np.ndarray:
        logits = np.zeros((*split.mask.shape, self.output_size))
        logits[split.mask.numpy()] = log_probs
        return logits

    def baselines(self) -> Mapping[str, ComparisonRow]:
        if self._rows is None:
            self._rows = LazyRows({"logistic": self._logistic_row,
                                   "boosted-trees": self._boosted_trees_row,
                                   "prior": self._prior_row})
        return self._rows

    def _parts(self) -> dict[str, tuple[np.ndarray, np.ndarray]]:
        """Flattened inputs (padded / cut to the longest training sequence) and labels."""
        steps = self.split("train").x.shape[1]
        return {name: self._flat(self.split(name), steps) for name in ("train", "val", "test")}

    def _scored(self, model: Any, log_probs_of: np.ndarray) -> dict[str, float]:
        """Test metrics of a fitted classifier's (N, fitted classes) log-probabilities; classes
        absent from the training part keep an impossible logit."""
        test = self.split("test")
        log_probs = np.full((len(test), self.output_size), IMPOSSIBLE_LOGIT)
        log_probs[:, model.classes_] = log_probs_of
        return self.score(self._at_last_step(test, log_probs), test)

    def _logistic_row(self) -> ComparisonRow:
        from sklearn.linear_model import LogisticRegression
        from threadpoolctl import threadpool_limits

        parts = self._parts()
        watch = Stopwatch()
        # One BLAS thread: threaded BLAS on busy shared cores slows this fit badly
        # (benchmarks/RESULTS.md, "Task baselines").
        with watch.running(), threadpool_limits(limits=1):
            model = LogisticRegression(max_iter=5000).fit(*parts["train"])
            log_probs = model.predict_log_proba(parts["test"][0])
        return ComparisonRow(self._scored(model, log_probs), fit_seconds=watch.seconds)

    def _boosted_trees_row(self) -> ComparisonRow:
        from sklearn.ensemble import HistGradientBoostingClassifier
        from threadpoolctl import threadpool_limits

        parts = self._parts()
        (val_x, val_labels), watch = parts["val"], Stopwatch()
        with watch.running(), threadpool_limits(limits=1):
            model = HistGradientBoostingClassifier(
                max_iter=CLASS_BOOSTING_ROUNDS, early_stopping=False, random_state=0,
            ).fit(*parts["train"])
            column = {label: i for i, label in enumerate(model.classes_)}
            known = np.array([label in column for label in val_labels])
            picked = np.array([column.get(label, 0) for label in val_labels])
            rows = np.arange(len(val_labels))
            losses = [float(-np.mean(np.log(np.clip(p[rows, picked], 1e-12, 1))[known]))
                      for p in model.staged_predict_proba(val_x)]
            best = int(np.argmin(losses))
            probs = next(p for i, p in enumerate(model.staged_predict_proba(parts["test"][0]))
                         if i == best)
        details = {"iterations": best + 1, "max_iterations": CLASS_BOOSTING_ROUNDS,
                   "chosen_on": "validation cross-entropy"}
        metrics = self._scored(model, np.log(np.clip(probs, 1e-300, 1)))
        return ComparisonRow(metrics, details=details, fit_seconds=watch.seconds)

    def _prior_row(self) -> ComparisonRow:
        test = self.split("test")
        train_labels = self._parts()["train"][1]
        counts = np.bincount(train_labels, minlength=self.output_size) + 1.0
        prior = np.broadcast_to(np.log(counts / counts.sum()), (len(test), self.output_size))
        return ComparisonRow(self.score(self._at_last_step(test, prior), test))
