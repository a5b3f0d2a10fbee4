"""The task registry: ``available`` and ``create``."""

from __future__ import annotations

from typing import Any

from loopzoo._registry import Registry

__all__ = ["TASKS", "available", "create"]

TASKS: Registry[Any] = Registry("task")


def available() -> list[str]:
    """Registered task names."""
    return TASKS.names()


def create(name: str, **options: Any) -> Any:
    """Build the task registered as ``name`` with its options (``seed``, sizes, paths)."""
    return TASKS.get(name)(**options)
