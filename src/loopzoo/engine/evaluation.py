"""Whole-split evaluation: predictions in batches, scored by the task's own ``score``."""

from __future__ import annotations

import math
from typing import Any

import torch

__all__ = ["NonFinitePrediction", "SplitScorer", "better"]


class NonFinitePrediction(ArithmeticError):
    """A model produced NaN or infinite outputs on an evaluation split."""


def better(candidate: float, incumbent: float | None, goal: str) -> bool:
    """Whether ``candidate`` improves on ``incumbent`` for ``goal`` ``"min"`` or ``"max"``."""
    if incumbent is None or not math.isfinite(incumbent):
        return math.isfinite(candidate)
    return candidate < incumbent if goal == "min" else candidate > incumbent


class SplitScorer:
    """Scores a model on one full split with ``task.score``.

    Feedback topologies are scored free running (their own outputs fed back,
    ``teacher_forcing=0.0``) and, with ``measured=True`` (the task's targets are observed later,
    and the model's ``delay`` feeds each back only once it is), with the measured values fed back
    (``1.0``, the series-parallel configuration); the gap between the two is the exposure bias.
    Other topologies are scored once under ``"plain"``.

    Example::

        scores = SplitScorer(task, task.split("val"), feeds_back=False).score(model)
        scores["plain"]["mse"]
    """

    def __init__(self, task: Any, split: Any, *, feeds_back: bool, measured: bool = False,
                 batch_size: int = 512) -> None:
        self.task = task
        self.split = split
        self.feeds_back = feeds_back
        self.measured = measured
        self.batch_size = batch_size

    @torch.no_grad()
    def predict(self, model: torch.nn.Module, teacher_forcing: float | None) -> torch.Tensor:
        """Model outputs on the whole split, (N, L, output_size); raises on non-finite values."""
        was_training = model.training
        model.eval()
        outputs = []
        for start in range(0, len(self.split.x), self.batch_size):
            rows = slice(start, start + self.batch_size)
            if teacher_forcing is None:
                out, _ = model(self.split.x[rows])
            else:
                out, _ = model(
                    self.split.x[rows], targets=self.split.y[rows], teacher_forcing=teacher_forcing
                )
            outputs.append(out)
        model.train(was_training)
        prediction = torch.cat(outputs)
        if not torch.isfinite(prediction).all():
            raise NonFinitePrediction("the model produced non-finite outputs on an evaluation "
                                      "split")
        return prediction

    def score(self, model: torch.nn.Module) -> dict[str, dict[str, float]]:
        """Metric groups: ``plain``, or for feedback ``free_running`` and, if measured,
        ``measured_feedback``."""
        if not self.feeds_back:
            return {"plain": self._scored(self.predict(model, None))}
        groups = {"free_running": self._scored(self.predict(model, 0.0))}
        if self.measured:
            groups["measured_feedback"] = self._scored(self.predict(model, 1.0))
        return groups

    def _scored(self, prediction: torch.Tensor) -> dict[str, float]:
        scores = self.task.score(prediction, self.split)
        return {name: float(value) for name, value in scores.items()}
