"""The topology registry: ``available``, ``create`` and ``width_for_budget``."""

from __future__ import annotations

from typing import Any

from loopzoo._registry import Registry

__all__ = ["TOPOLOGIES", "available", "create"]

TOPOLOGIES: Registry[Any] = Registry("topology")


def available() -> list[str]:
    """Registered topology names."""
    return TOPOLOGIES.names()


def create(name: str, **options: Any) -> Any:
    """Build the topology registered as ``name`` with its constructor options."""
    return TOPOLOGIES.get(name)(**options)
