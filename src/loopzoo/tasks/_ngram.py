"""Interpolated n-gram models over symbol ids, as compared by Chen & Goodman (1998).

Chen & Goodman, "An Empirical Study of Smoothing Techniques for Language Modeling", Harvard
TR-10-98, 1998. Every method interpolates each order with the next lower one, down to the
uniform distribution over the C classes:

    p_k(w | h) = (max(c_k(h w) - D_k(c_k(h w)), 0) + gamma_k(h) p_{k-1}(w | h')) / sum_v c_k(h v)
    gamma_k(h) = sum over counts j of D_k(j) * |{w : c_k(h w) = j}|,

and p_k = p_{k-1} for a context h never seen at order k. ``method``:

- "absolute-discounting": c_k are the raw counts at every order, one discount per order
  D = n1 / (n1 + 2 n2) (Ney, Essen & Kneser 1994; n_j: n-grams of the order seen j times);
- "kneser-ney": the highest order uses raw counts, every lower order the continuation counts
  N1+(. h w) (how many distinct symbols precede h w), one discount per order as above;
- "modified-kneser-ney": as "kneser-ney" with three discounts per order, for counts 1, 2 and
  3 or more: D_j = j - (j + 1) Y n_{j+1} / n_j, Y = n1 / (n1 + 2 n2) (Chen & Goodman).

Contexts are padded with a start symbol (id C), so a sequence's first symbols are predicted from
the fact that the sequence starts there, as a recurrent model does from its initial state.
"""

from __future__ import annotations

import dataclasses

import numpy as np

__all__ = ["METHODS", "NGramModel", "contexts"]

METHODS = ("absolute-discounting", "kneser-ney", "modified-kneser-ney")
_BATCH = 8192  # positions per block when forming full distributions (bounds memory)


def contexts(inputs: np.ndarray, mask: np.ndarray, width: int, start: int) -> np.ndarray:
    """(N, T) symbol ids (negative: padding) -> (M, width) the ``width`` symbols up to and
    including each masked position's current symbol, oldest first, padded with ``start``."""
    padded = np.concatenate([np.full((len(inputs), width - 1), start, dtype=np.int64),
                             inputs.astype(np.int64)], axis=1)
    rows, steps = np.nonzero(mask)
    return np.stack([padded[rows, steps + j] for j in range(width)], axis=1)


@dataclasses.dataclass(frozen=True)
class _Level:
    """Counts of one order: sorted n-gram keys with their counts, and per context key the
    total count and how many continuations have count 1, 2 and 3 or more."""

    keys: np.ndarray
    counts: np.ndarray
    context_keys: np.ndarray
    totals: np.ndarray
    types: np.ndarray  # (contexts, 3)
    discounts: np.ndarray  # (3,): D for count 1, 2, 3+

    def lookup(self, keys: np.ndarray) -> np.ndarray:
        found = np.searchsorted(self.keys, keys).clip(max=max(len(self.keys) - 1, 0))
        hit = (self.keys[found] == keys) if len(self.keys) else np.zeros(keys.shape, bool)
        return np.where(hit, self.counts[found] if len(self.keys) else 0, 0)

    def context(self, keys: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(totals, gammas) for context keys; unseen contexts get total 0."""
        found = np.searchsorted(self.context_keys, keys).clip(max=len(self.context_keys) - 1)
        hit = self.context_keys[found] == keys
        totals = np.where(hit, self.totals[found], 0)
        gammas = np.where(hit, self.types[found] @ self.discounts, 0.0)
        return totals, gammas

    def discount(self, counts: np.ndarray) -> np.ndarray:
        return self.discounts[np.clip(counts, 1, 3) - 1] * (counts > 0)


def _discounts(counts: np.ndarray, modified: bool) -> np.ndarray:
    """Discounts for counts 1, 2, 3+ estimated from the count-of-counts n1..n4.

    Without singletons Y is undefined and 1/2 is used; a modified discount whose estimate is
    not positive (possible on small data) falls back to Y, so no seen context ever gives an
    unseen symbol zero probability.
    """
    n = [int((counts == j).sum()) for j in (1, 2, 3, 4)]
    y = n[0] / (n[0] + 2 * n[1]) if n[0] else 0.5
    if not modified:
        return np.full(3, y)
    values = [j - (j + 1) * y * n[j] / n[j - 1] if n[j - 1] else y for j in (1, 2, 3)]
    return np.array([min(v, j) if v > 0 else y for j, v in enumerate(values, start=1)])


def _level(grams: np.ndarray, counts: np.ndarray, base: int, modified: bool) -> _Level:
    """A level from unique n-gram keys (sorted) and their (raw or continuation) counts."""
    context_keys, inverse = np.unique(grams // base, return_inverse=True)
    totals = np.bincount(inverse, weights=counts).astype(np.int64)
    types = np.stack([np.bincount(inverse, weights=(counts == j) if j < 3 else (counts >= 3),
                                  minlength=len(context_keys)) for j in (1, 2, 3)], axis=1)
    return _Level(grams, counts, context_keys, totals, types, _discounts(counts, modified))


class NGramModel:
    """An interpolated n-gram model of ``order`` over ``classes`` symbols.

    Fitted from training events: (M, order - 1) contexts (see ``contexts``, start id = classes)
    and (M,) next symbols. ``log_probs`` gives full next-symbol distributions.

    Example:
        >>> model = NGramModel(classes=3, order=2, method="kneser-ney")
        >>> model.fit(np.array([[0], [1], [0]]), np.array([1, 0, 2]))
        >>> model.log_probs(np.array([[0]])).exp().sum()   # 1.0
    """

    def __init__(self, classes: int, order: int, method: str) -> None:
        if method not in METHODS:
            raise ValueError(f"n-gram method must be one of {', '.join(METHODS)}, got {method!r}")
        if order < 1:
            raise ValueError(f"n-gram order must be at least 1, got {order}")
        self.classes, self.order, self.method = classes, order, method
        self.base = classes + 1  # symbol ids and the start id
        self.levels: list[_Level] = []

    def _keys(self, context: np.ndarray, targets: np.ndarray | None, k: int) -> np.ndarray:
        """Keys of the order-k n-grams (context's last k - 1 symbols, then the target)."""
        key = np.zeros(len(context), dtype=np.int64)
        for j in range(context.shape[1] - (k - 1), context.shape[1]):
            key = key * self.base + context[:, j]
        return key if targets is None else key * self.base + targets

    def fit(self, context: np.ndarray, targets: np.ndarray) -> NGramModel:
        """Count the events; ``context`` needs at least ``order - 1`` columns."""
        if context.shape[1] < self.order - 1:
            raise ValueError(f"order {self.order} needs {self.order - 1} context symbols, "
                             f"got {context.shape[1]}")
        modified = self.method == "modified-kneser-ney"
        raw = [np.unique(self._keys(context, targets, k), return_counts=True)
               for k in range(1, self.order + 1)]
        self.levels = []
        for k in range(1, self.order + 1):
            grams, counts = raw[k - 1]
            if self.method != "absolute-discounting" and k < self.order:
                # continuation count of (h w): distinct (v h w) seen, v one symbol further back
                longer = raw[k][0]
                grams, counts = np.unique(longer % self.base ** k, return_counts=True)
            self.levels.append(_level(grams, counts, self.base, modified))
        return self

    def log_probs(self, context: np.ndarray) -> np.ndarray:
        """(M, order - 1 or more) contexts -> (M, classes) natural-log next-symbol probabilities."""
        out = np.empty((len(context), self.classes))
        for first in range(0, len(context), _BATCH):
            out[first : first + _BATCH] = np.log(self._probs(context[first : first + _BATCH]))
        return out

    def _probs(self, context: np.ndarray) -> np.ndarray:
        probs = np.full((len(context), self.classes), 1.0 / self.classes)
        symbols = np.arange(self.classes)
        for k, level in enumerate(self.levels, start=1):
            history = self._keys(context, None, k)
            totals, gammas = level.context(history)
            counts = level.lookup(history[:, None] * self.base + symbols[None, :])
            seen = totals > 0
            kept = np.maximum(counts - level.discount(counts), 0.0)
            mixed = (kept + gammas[:, None] * probs) / np.maximum(totals, 1)[:, None]
            probs = np.where(seen[:, None], mixed, probs)
        return probs
