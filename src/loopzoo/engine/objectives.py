"""Training losses on the scored (masked) positions of a batch."""

from __future__ import annotations

import torch
import torch.nn.functional as F

__all__ = ["masked_loss"]


def masked_loss(
    kind: str, prediction: torch.Tensor, target: torch.Tensor, mask: torch.Tensor
) -> torch.Tensor:
    """Mean loss over the positions where ``mask`` is True.

    Regression: mean squared error over the scored positions and output channels, in the task's
    scaled training units. Classification: mean cross-entropy of the logits over scored positions.

    Shapes: prediction (N, L, C); target (N, L, C) float or (N, L) long; mask (N, L) bool.
    A batch with no scored position gives a zero loss that still reaches every parameter.

    Example::

        loss = masked_loss("regression", y_hat, y, mask)
    """
    if kind == "regression":
        picked, wanted = prediction[mask], target[mask]
        if picked.numel() == 0:
            return prediction.sum() * 0.0
        return F.mse_loss(picked, wanted.to(picked.dtype))
    if kind == "classification":
        picked, wanted = prediction[mask], target[mask]
        if picked.numel() == 0:
            return prediction.sum() * 0.0
        return F.cross_entropy(picked, wanted.long())
    raise ValueError(f"task kind {kind!r} is not supported; accepted: regression, classification")
