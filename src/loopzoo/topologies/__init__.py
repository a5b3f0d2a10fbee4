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
    return TOPOLOGIES.get(name)(**sizes_and_options)
