"""Declared constructor options: each topology lists its options with a default and a check."""

from __future__ import annotations

import math
import numbers
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any

__all__ = [
    "DROPOUT",
    "NONLINEARITY",
    "Option",
    "boolean",
    "choice",
    "integer",
    "is_real",
    "real",
    "resolve_options",
    "check_dropout_layers",
    "num_layers",
    "size",
]

Check = Callable[[str, Any], Any]


@dataclass(frozen=True)
class Option:
    """One constructor option: its default, a check returning the accepted value, a help line."""

    default: Any
    check: Check
    help: str


def _is_int(value: Any) -> bool:
    return isinstance(value, numbers.Integral) and not isinstance(value, bool)


def is_real(value: Any) -> bool:
    """A real number (Python or NumPy), not a bool."""
    return isinstance(value, numbers.Real) and not isinstance(value, bool)


def integer(minimum: int, maximum: int | None = None) -> Check:
    """Accept a Python int in [minimum, maximum]."""
    accepted = f"an integer >= {minimum}" if maximum is None else (
        f"an integer in [{minimum}, {maximum}]"
    )

    def check(name: str, value: Any) -> int:
        if not _is_int(value) or value < minimum or (maximum is not None and value > maximum):
            raise ValueError(f"{name} must be {accepted}, got {value!r}")
        return int(value)

    return check


def real(low: float, high: float, *, low_open: bool = False, high_open: bool = False) -> Check:
    """Accept a finite real number in the interval from low to high (ends open or closed)."""
    interval = f"{'(' if low_open else '['}{low}, {high}{')' if high_open else ']'}"

    def check(name: str, value: Any) -> float:
        ok = is_real(value) and math.isfinite(value)
        if ok:
            above = value > low if low_open else value >= low
            below = value < high if high_open else value <= high
            ok = above and below
        if not ok:
            raise ValueError(f"{name} must be a real number in {interval}, got {value!r}")
        return float(value)

    return check


def choice(*choices: str) -> Check:
    """Accept one of the given strings."""

    def check(name: str, value: Any) -> str:
        if value not in choices:
            raise ValueError(
                f"{name} must be one of {', '.join(repr(c) for c in choices)}, got {value!r}"
            )
        return value

    return check


def boolean() -> Check:
    """Accept True or False only (not 0/1, not strings)."""

    def check(name: str, value: Any) -> bool:
        if not isinstance(value, bool):
            raise ValueError(f"{name} must be True or False, got {value!r}")
        return value

    return check


size = integer(1)
"""Check for input_size, output_size and hidden_size: a positive integer."""


def resolve_options(
    owner: str, specs: Mapping[str, Option], given: Mapping[str, Any]
) -> dict[str, Any]:
    """Defaults filled in and every given value checked; unknown names are refused.

    >>> resolve_options("demo", {"depth": Option(1, integer(1), "layers")}, {"depth": 2})
    {'depth': 2}
    """
    unknown = sorted(set(given) - set(specs))
    if unknown:
        accepted = ", ".join(["input_size", "output_size", "hidden_size", *sorted(specs)])
        raise ValueError(
            f"{owner} got unknown option(s) {', '.join(repr(u) for u in unknown)}; "
            f"accepted options: {accepted}"
        )
    return {
        name: spec.check(f"{owner} option {name}", given.get(name, spec.default))
        for name, spec in specs.items()
    }


NONLINEARITY = Option("tanh", choice("tanh", "relu"), "f in the recurrence: 'tanh' or 'relu'")
"""The nonlinearity option shared by the tanh/relu recurrences."""

DROPOUT = Option(0.0, real(0.0, 1.0, high_open=True), "dropout between layers while training")
"""Dropout on the signal passed between stacked layers (never on the recurrence itself)."""


def num_layers(default: int) -> Option:
    """The number-of-layers option with its default."""
    return Option(default, integer(1), "stacked recurrent layers")


def check_dropout_layers(owner: str, rate: float, layers: int) -> None:
    """Dropout acts between layers, so it needs at least two."""
    if rate > 0.0 and layers == 1:
        raise ValueError(
            f"{owner} option dropout={rate} acts between layers; it needs num_layers >= 2 "
            "(or dropout=0.0)"
        )
