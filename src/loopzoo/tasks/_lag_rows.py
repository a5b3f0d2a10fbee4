"""Rows fitted on the same lag window the topologies read: ridge regression and gradient-boosted
trees (scikit-learn), each tuned on the validation part and scored by the task on the test part.

The features are the topologies' own inputs (already scaled, or differenced, as the task feeds
them), flattened; the targets are the scaled targets. A caller supplies the three parts and a
scorer that turns (N, outputs) predictions into the task's metrics.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable

import numpy as np

from loopzoo.tasks._rows import ComparisonRow, Stopwatch

__all__ = ["ALPHAS", "BOOSTING_ROUNDS", "LagData", "boosted_trees_row", "ridge_row"]

ALPHAS = tuple(float(a) for a in np.logspace(-3, 4, 15))  # ridge penalties tried on validation
BOOSTING_ROUNDS = 300  # most boosting iterations; the count is chosen on validation


@dataclasses.dataclass(frozen=True)
class LagData:
    """Features (N, F) and scaled targets (N, O) of the three parts, the metric to select on
    (``metric``, minimised) and ``score(part, prediction) -> metrics`` in the task's units."""

    train: tuple[np.ndarray, np.ndarray]
    val: tuple[np.ndarray, np.ndarray]
    test: np.ndarray
    score: Callable[[str, np.ndarray], dict[str, float]]
    metric: str
    seed_dependent: bool
    details: dict = dataclasses.field(default_factory=dict)


def ridge_row(data: LagData) -> ComparisonRow:
    """scikit-learn ``Ridge`` (with intercept) on the lag features; the penalty ``alpha`` with the
    lowest validation metric among ``ALPHAS`` is kept (fitted on the training part only)."""
    from sklearn.linear_model import Ridge
    from threadpoolctl import threadpool_limits

    watch = Stopwatch()
    with watch.running(), threadpool_limits(limits=1):
        fits = {alpha: Ridge(alpha=alpha).fit(*data.train) for alpha in ALPHAS}
        val = {alpha: data.score("val", _outputs(fit.predict(data.val[0])))[data.metric]
               for alpha, fit in fits.items()}
    alpha = min(val, key=val.get)
    details = {**data.details, "alpha": alpha, "alphas_tried": [min(ALPHAS), max(ALPHAS)],
               "chosen_on": f"validation {data.metric}"}
    return ComparisonRow(data.score("test", _outputs(fits[alpha].predict(data.test))),
                         details=details, fit_seconds=watch.seconds,
                         seed_dependent=data.seed_dependent)


def _outputs(prediction: np.ndarray) -> np.ndarray:
    """(N,) or (N, O) -> (N, O): scikit-learn drops the axis of a single output."""
    return prediction.reshape(len(prediction), -1)


def boosted_trees_row(data: LagData) -> ComparisonRow:
    """scikit-learn ``HistGradientBoostingRegressor`` per output (its defaults, learning rate
    0.1, ``BOOSTING_ROUNDS`` iterations, no internal early stopping, fixed random state); each
    output keeps the iteration count with the lowest validation squared error."""
    from sklearn.ensemble import HistGradientBoostingRegressor
    from threadpoolctl import threadpool_limits

    watch = Stopwatch()
    (train_x, train_y), (val_x, val_y) = data.train, data.val
    test, rounds = np.zeros((len(data.test), train_y.shape[1])), []
    with watch.running(), threadpool_limits(limits=1):
        for out in range(train_y.shape[1]):
            model = HistGradientBoostingRegressor(max_iter=BOOSTING_ROUNDS, early_stopping=False,
                                                  random_state=0).fit(train_x, train_y[:, out])
            errors = [float(np.mean((p - val_y[:, out]) ** 2))
                      for p in model.staged_predict(val_x)]
            best = int(np.argmin(errors))
            rounds.append(best + 1)
            test[:, out] = next(p for i, p in enumerate(model.staged_predict(data.test))
                                if i == best)
    details = {**data.details, "iterations": rounds, "max_iterations": BOOSTING_ROUNDS,
               "chosen_on": "validation squared error per output"}
    return ComparisonRow(data.score("test", test), details=details, fit_seconds=watch.seconds,
                         seed_dependent=data.seed_dependent)
