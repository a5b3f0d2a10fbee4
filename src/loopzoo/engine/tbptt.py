"""Truncated back-propagation through time: chunk spans and state detaching."""

from __future__ import annotations

import torch

__all__ = ["chunk_spans", "detach_state"]


def chunk_spans(length: int, chunk: int | None) -> list[tuple[int, int]]:
    """Half-open time spans ``[start, stop)`` covering ``length`` steps in chunks of ``chunk``.

    ``None`` (full BPTT) or a chunk at least as long as the sequence gives one span.

    Example::

        chunk_spans(10, 4)   # [(0, 4), (4, 8), (8, 10)]
    """
    if chunk is None or chunk >= length:
        return [(0, length)]
    return [(start, min(start + chunk, length)) for start in range(0, length, chunk)]


def detach_state(state: tuple[torch.Tensor, ...]) -> tuple[torch.Tensor, ...]:
    """The same state cut from the graph, so the next chunk's gradient stops at its boundary."""
    return tuple(part.detach() for part in state)
