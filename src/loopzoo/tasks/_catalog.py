"""The task registry itself, in its own module so task files can register without import cycles."""

from __future__ import annotations

from typing import Any

from loopzoo._registry import Registry

__all__ = ["TASKS"]

TASKS: Registry[Any] = Registry("task")
