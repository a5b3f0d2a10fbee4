"""A small name -> builder registry shared by topologies and tasks."""

from __future__ import annotations

import difflib
from collections.abc import Callable, Sequence
from typing import Generic, TypeVar

__all__ = ["Registry", "near_names", "unknown_choice"]

T = TypeVar("T")


def near_names(value: object, choices: Sequence[str]) -> str:
    """`` Did you mean 'a', 'b'?`` for the choices closest to ``value`` (difflib), else ""."""
    near = difflib.get_close_matches(str(value), list(choices), n=3)
    return f". Did you mean {', '.join(repr(n) for n in near)}?" if near else ""


def unknown_choice(field: str, value: object, choices: list[str]) -> ValueError:
    """Build the error for a name outside ``choices``, naming the field and the nearest names."""
    hint = near_names(value, choices) or "."
    return ValueError(f"unknown {field} {value!r}; available: {', '.join(choices)}{hint}")


class Registry(Generic[T]):
    """Maps names to builders; refuses duplicates and reports unknown names with the known ones."""

    def __init__(self, kind: str) -> None:
        self.kind = kind
        self._builders: dict[str, T] = {}

    def register(self, name: str) -> Callable[[T], T]:
        """Decorator registering ``builder`` under ``name``."""

        def decorate(builder: T) -> T:
            if name in self._builders:
                raise ValueError(f"{self.kind} {name!r} is already registered")
            self._builders[name] = builder
            return builder

        return decorate

    def names(self) -> list[str]:
        """Registered names in registration order."""
        return list(self._builders)

    def get(self, name: str) -> T:
        """The builder registered under ``name``; a ValueError listing the names otherwise."""
        try:
            return self._builders[name]
        except KeyError:
            raise unknown_choice(self.kind, name, self.names()) from None
        except TypeError:
            kind = type(name).__name__
            raise TypeError(f"{self.kind} name must be a string, got {kind}") from None
