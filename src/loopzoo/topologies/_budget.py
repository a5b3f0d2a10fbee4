"""Parameter counts and the hidden size that meets a parameter budget."""

from __future__ import annotations

from typing import Any

import torch

from loopzoo.topologies._base import TOPOLOGIES

__all__ = ["parameter_count", "width_for_budget"]


def parameter_count(name: str, **sizes_and_options: Any) -> int:
    """Trainable parameters of ``create(name, **sizes_and_options)``, built on the meta device.

    >>> parameter_count("hidden-feedback", input_size=1, output_size=1, hidden_size=2)
    11
    """
    builder = TOPOLOGIES.get(name)
    with torch.device("meta"):  # shapes only: no memory, no initialisation cost
        model = builder(**sizes_and_options)
    return sum(p.numel() for p in model.parameters() if p.requires_grad)


def width_for_budget(
    name: str, *, params: int, input_size: int, output_size: int, **options: Any
) -> int:
    """The hidden_size whose parameter count is closest to ``params``.

    Counts grow with hidden_size, so a doubling search then bisection finds the two sizes around
    the budget. A budget below the smallest model (hidden_size=1) is refused, naming the minimum.

    >>> width_for_budget("hidden-feedback", params=10_000, input_size=3, output_size=2)
    97
    """
    if not isinstance(params, int) or isinstance(params, bool) or params < 1:
        raise ValueError(f"params must be a positive integer, got {params!r}")
    if "hidden_size" in options:
        raise ValueError("width_for_budget solves for hidden_size; do not pass hidden_size")

    def count(hidden: int) -> int:
        return parameter_count(
            name, input_size=input_size, output_size=output_size, hidden_size=hidden, **options
        )

    smallest = count(1)
    if params < smallest:
        raise ValueError(
            f"params={params} is below the smallest {name!r} model for these sizes and options: "
            f"{smallest} parameters at hidden_size=1"
        )
    high = 1
    while count(high) < params:
        high *= 2
    low = max(1, high // 2)  # count(low) <= params <= count(high)
    while high - low > 1:
        middle = (low + high) // 2
        if count(middle) < params:
            low = middle
        else:
            high = middle
    return min((low, high), key=lambda h: (abs(count(h) - params), h))
