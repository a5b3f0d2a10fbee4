"""Errors for bad harness input, caught by the command line and shown without a traceback."""

from __future__ import annotations

from loopzoo.engine.errors import ConfigError, as_config_errors

__all__ = ["ConfigError", "OutDirError", "as_config_errors"]


class OutDirError(ValueError):
    """An output directory that holds records this run must not be mixed with."""
