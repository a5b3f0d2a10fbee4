"""The error for a config that cannot run, shared by the engine and the orchestration above it."""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager

__all__ = ["ConfigError", "as_config_errors"]


class ConfigError(ValueError):
    """A config that cannot run (unknown key or name, impossible budget), found before training."""


@contextmanager
def as_config_errors() -> Iterator[None]:
    """Within the block, a ValueError from a value check (``loopzoo._checks``, a registry, a
    task or topology option) is re-raised as a ConfigError with the same message."""
    try:
        yield
    except ConfigError:
        raise
    except ValueError as error:
        raise ConfigError(str(error)) from None
