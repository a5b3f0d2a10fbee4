"""Errors for bad harness input, caught by the command line and shown without a traceback."""

from __future__ import annotations

__all__ = ["ConfigError", "OutDirError"]


class ConfigError(ValueError):
    """A config that cannot run (unknown key or name, impossible budget), found before training."""


class OutDirError(ValueError):
    """An output directory that holds records this run must not be mixed with."""
