"""The topology zoo: ``available``, ``create``, ``width_for_budget`` and ``parameter_count``.

Importing a topology module registers it; every module follows the interface of
``loopzoo.topologies._base.RecurrentTopology``.
"""

from __future__ import annotations

import os
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
    need = _memory_need(name, sizes_and_options)
    if need is not None:
        raise _too_large(name, sizes_and_options, need)
    try:
        return builder(**sizes_and_options)
    except (RuntimeError, MemoryError) as error:  # fits the machine, but not what is free now
        raise _too_large(name, sizes_and_options, _describe_count(name, sizes_and_options)) \
            from error


def _describe_count(name: str, sizes_and_options: dict[str, Any]) -> str:
    count = parameter_count(name, **sizes_and_options)
    return f"its {count:,} parameters ({4 * count / 2**30:,.1f} GiB as float32)"


def _memory_need(name: str, sizes_and_options: dict[str, Any]) -> str | None:
    """Why the parameters cannot fit in this machine's memory, or None if they can.

    Counted on the meta device before anything is allocated, so an impossible size is refused
    at once instead of after the allocator has claimed gigabytes.
    """
    try:
        count = parameter_count(name, **sizes_and_options)
    except RuntimeError:  # even the tensors' byte counts overflow a 64-bit size
        return "its parameters (more bytes than a 64-bit size can count)"
    if 4 * count <= os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES"):
        return None
    return f"its {count:,} parameters ({4 * count / 2**30:,.1f} GiB as float32)"


def _too_large(name: str, sizes_and_options: dict[str, Any], need: str) -> ValueError:
    sizes = ", ".join(f"{k}={v}" for k, v in sizes_and_options.items())
    return ValueError(
        f"cannot build {name!r} with {sizes}: {need} do not fit in memory; choose smaller "
        "sizes (loopzoo.width_for_budget finds a hidden_size for a parameter budget)"
    )
