"""The error for a config that cannot run, shared by the engine and the orchestration above it."""

from __future__ import annotations

__all__ = ["ConfigError"]


class ConfigError(ValueError):
    """A config that cannot run (unknown key or name, impossible budget), found before training."""
