"""Pareto front of (cost, loss) points where lower is better on both axes."""

from __future__ import annotations

from collections.abc import Sequence

__all__ = ["pareto_front"]


def pareto_front(points: Sequence[tuple[float, float]]) -> list[bool]:
    """For each (cost, loss) point, whether no other point is at least as good on both and
    strictly better on one. Example: ``pareto_front([(1, 3), (2, 1), (3, 2)]) == [True, True,
    False]``. Negate a score that is maximised before calling.
    """
    flags = []
    for i, (cost, loss) in enumerate(points):
        dominated = any(
            other_cost <= cost and other_loss <= loss and (other_cost < cost or other_loss < loss)
            for j, (other_cost, other_loss) in enumerate(points)
            if j != i
        )
        flags.append(not dominated)
    return flags
