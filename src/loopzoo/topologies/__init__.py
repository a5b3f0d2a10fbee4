"""The topology zoo: ``available``, ``create``, ``width_for_budget`` and ``parameter_count``.

Importing a topology module registers it; every module follows the interface of
``loopzoo.topologies._base.RecurrentTopology``.
"""

from __future__ import annotations

from typing import Any

# Registration order is the order `available()` lists: the design's order, not alphabetical.
# isort: off
from loopzoo.topologies import (  # noqa: F401  (importing a module registers it)
    hidden_feedback,
    output_feedback,
    stacked,
    deep_transition,
    residual_skip,
    torch_gated,
)

# isort: on
from loopzoo.topologies._base import TOPOLOGIES, RecurrentTopology
from loopzoo.topologies._budget import parameter_count, width_for_budget

__all__ = [
    "TOPOLOGIES",
    "RecurrentTopology",
    "available",
    "create",
    "parameter_count",
    "width_for_budget",
]


def available() -> list[str]:
    """Registered topology names."""
    return TOPOLOGIES.names()


def create(name: str, **sizes_and_options: Any) -> RecurrentTopology:
    """Build the topology registered as ``name``.

    Keyword arguments: input_size, output_size, hidden_size (positive ints) and the topology's
    own options; unknown options are refused with the accepted list.

    >>> model = create("hidden-feedback", input_size=3, output_size=2, hidden_size=16)
    >>> model.topology, model.options["nonlinearity"]
    ('hidden-feedback', 'tanh')
    """
    builder = TOPOLOGIES.get(name)
    try:
        return builder(**sizes_and_options)
    except (RuntimeError, MemoryError) as error:
        # Sizes that pass their checks can still ask for more memory than there is.
        count = parameter_count(name, **sizes_and_options)
        sizes = ", ".join(f"{k}={v}" for k, v in sizes_and_options.items())
        raise ValueError(
            f"cannot build {name!r} with {sizes}: its {count:,} parameters "
            f"({4 * count / 2**30:,.1f} GiB as float32) do not fit in memory; choose smaller "
            "sizes (loopzoo.width_for_budget finds a hidden_size for a parameter budget)"
        ) from error
