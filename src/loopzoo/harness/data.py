"""Batches from a task split, fetched as whole index batches instead of sample by sample."""

from __future__ import annotations

from typing import Any

import torch
from torch.utils.data import DataLoader, Dataset, Sampler

__all__ = ["Batch", "SeededShuffle", "SplitDataset", "training_loader"]

Batch = tuple[torch.Tensor, torch.Tensor, torch.Tensor]


class SplitDataset(Dataset):
    """A task split as a dataset of ``(x, y, mask)``; ``__getitems__`` slices a whole batch.

    Slicing the stored tensors once per batch avoids the per-sample indexing and stacking of the
    default collate, which would otherwise dominate the step time of small recurrent models.
    """

    def __init__(self, split: Any) -> None:
        self.x: torch.Tensor = split.x
        self.y: torch.Tensor = split.y
        self.mask: torch.Tensor = split.mask

    def __len__(self) -> int:
        return int(self.x.shape[0])

    def __getitem__(self, index: int) -> Batch:
        return self.x[index], self.y[index], self.mask[index]

    def __getitems__(self, indices: list[int]) -> Batch:
        rows = torch.as_tensor(indices, dtype=torch.long)
        return self.x[rows], self.y[rows], self.mask[rows]


class SeededShuffle(Sampler[int]):
    """A new permutation of ``range(size)`` per pass, the pass-th one drawn from ``seed``.

    Holds only integers, so it pickles into ddp_spawn workers (a ``torch.Generator`` does not
    pickle through torch's shared-memory reducer on this stack).
    """

    def __init__(self, size: int, seed: int) -> None:
        self.size = size
        self.seed = seed
        self.passes = 0

    def __len__(self) -> int:
        return self.size

    def __iter__(self):
        generator = torch.Generator().manual_seed(self.seed * 1_000_003 + self.passes)
        self.passes += 1
        return iter(torch.randperm(self.size, generator=generator).tolist())


def _keep_batch(batch: Batch) -> Batch:
    # The dataset already returns a stacked batch; a module-level function pickles for ddp_spawn.
    return batch


def training_loader(split: Any, batch_size: int, seed: int) -> DataLoader:
    """Shuffled batches of ``split`` in an order fixed by ``seed`` (partial last batch dropped)."""
    return DataLoader(
        SplitDataset(split),
        batch_size=batch_size,
        sampler=SeededShuffle(len(split.x), seed),
        drop_last=len(split.x) > batch_size,
        collate_fn=_keep_batch,
        num_workers=0,
    )
