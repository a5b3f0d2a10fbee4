"""Per-channel standardisation fitted on the training part only, inverted for reported errors."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import torch

__all__ = ["Standardizer"]


@dataclass(frozen=True)
class Standardizer:
    """z = (v - mean) / std per channel (last axis); v = z * std + mean.

    A channel that is constant on the training part keeps std 1, so it is only shifted.
    """

    mean: tuple[float, ...]
    std: tuple[float, ...]
    method: str = "standardise, fitted on the training part"

    @classmethod
    def identity(cls, channels: int) -> Standardizer:
        """No scaling: the task's units are the data's units."""
        return cls(mean=(0.0,) * channels, std=(1.0,) * channels, method="none")

    @classmethod
    def fit(cls, values: np.ndarray) -> Standardizer:
        """Fit on ``values`` (..., C): the training part's observations only."""
        flat = np.asarray(values, dtype=np.float64).reshape(-1, np.shape(values)[-1])
        mean = flat.mean(axis=0)
        std = flat.std(axis=0)
        std = np.where(std > 0, std, 1.0)
        return cls(mean=tuple(float(m) for m in mean), std=tuple(float(s) for s in std))

    def transform(self, values: np.ndarray) -> np.ndarray:
        """Data units -> scaled units, (..., C)."""
        return (np.asarray(values, dtype=np.float64) - np.array(self.mean)) / np.array(self.std)

    def inverse(self, scaled: torch.Tensor) -> torch.Tensor:
        """Scaled units -> data units, (..., C) float64."""
        mean = torch.tensor(self.mean, dtype=torch.float64)
        std = torch.tensor(self.std, dtype=torch.float64)
        return scaled.to(torch.float64) * std + mean

    def describe(self) -> dict[str, object]:
        """JSON-serialisable form for the run record."""
        return {"method": self.method, "mean": list(self.mean), "std": list(self.std)}
