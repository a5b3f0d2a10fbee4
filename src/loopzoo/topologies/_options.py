"""Declared constructor options: each topology lists its options with a default and a check."""

from __future__ import annotations

import functools
import numbers
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any

from loopzoo import _checks as checks

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


def is_real(value: Any) -> bool:
    """A real number (Python or NumPy), not a bool."""
    return isinstance(value, numbers.Real) and not isinstance(value, bool)


def integer(minimum: int, maximum: int | None = None) -> Check:
    """Accept an integer in [minimum, maximum] (the rules of ``loopzoo._checks.integer``)."""
    return functools.partial(_named, checks.integer, minimum=minimum, maximum=maximum)


def real(low: float, high: float, *, low_open: bool = False, high_open: bool = False) -> Check:
    """Accept a finite real number in the interval from low to high (ends open or closed)."""
    return functools.partial(_named, checks.real, low=low, high=high, low_open=low_open,
                             high_open=high_open)


def choice(*choices: str) -> Check:
    """Accept one of the given strings."""
    return functools.partial(_named, checks.choice, choices=choices)


def boolean() -> Check:
    """Accept True or False only (not 0/1, not strings)."""
    return functools.partial(_named, checks.boolean)


def _named(check: Callable[..., Any], name: str, value: Any, **rules: Any) -> Any:
    return check(name, value, **rules)


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
