"""Errors for bad harness input, caught by the command line and shown without a traceback."""

from __future__ import annotations

from loopzoo.engine.errors import ConfigError

__all__ = ["ConfigError", "OutDirError"]


class OutDirError(ValueError):
    """An output directory that holds records this run must not be mixed with."""
