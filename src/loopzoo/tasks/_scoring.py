"""Metrics on the scored (mask) positions: regression errors and next-class losses."""

from __future__ import annotations

import math
from collections.abc import Sequence

import torch

__all__ = ["IMPOSSIBLE_LOGIT", "classification_metrics", "regression_metrics"]

# A finite stand-in for log(0) in baseline logits: exp(-1e4) underflows to exactly 0 in float32
# and float64, so log_softmax gives exact log-probabilities while every score stays finite.
IMPOSSIBLE_LOGIT = -1.0e4


def regression_metrics(prediction: torch.Tensor, target: torch.Tensor, mask: torch.Tensor,
                       channel_names: Sequence[str] | None = None) -> dict[str, float]:
    """MSE, MAE and RMSE over masked positions and all output channels, in the given units.

    prediction, target: (N, T, O); mask: (N, T) bool. With ``channel_names`` (one per channel,
    more than one) each channel's MSE is added as ``mse_{name}``, e.g. ``mse_h5``.
    """
    error = (prediction - target)[mask]  # (M, O)
    mse = float(error.pow(2).mean())
    metrics = {"mse": mse, "rmse": math.sqrt(mse), "mae": float(error.abs().mean())}
    if channel_names is not None and len(channel_names) > 1:
        per_channel = error.pow(2).mean(dim=0)
        metrics.update({f"mse_{name}": float(v)
                        for name, v in zip(channel_names, per_channel, strict=True)})
    return metrics


def classification_metrics(logits: torch.Tensor, target: torch.Tensor, mask: torch.Tensor,
                           next_symbol: bool = False) -> dict[str, float]:
    """Mean cross-entropy (nats) and accuracy over masked positions; bits per symbol if asked.

    logits: (N, T, C); target: (N, T) long class ids; mask: (N, T) bool.
    bits_per_char = cross_entropy / ln 2.
    """
    log_probs = torch.log_softmax(logits[mask], dim=-1)  # (M, C)
    picked = target[mask]
    cross_entropy = float(-log_probs.gather(1, picked[:, None]).mean())
    accuracy = float((log_probs.argmax(dim=-1) == picked).double().mean())
    metrics = {"cross_entropy": cross_entropy, "accuracy": accuracy}
    if next_symbol:
        metrics["bits_per_char"] = cross_entropy / math.log(2)
    return metrics
