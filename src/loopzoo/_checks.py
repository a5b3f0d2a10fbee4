"""One way to check a given value: the rules and the wording every option and setting uses.

Topology options, task options, training settings and tuning settings are all checked here, so a
value means the same everywhere (2.0 is the integer 2, 2.5 and True are not integers) and every
refusal reads ``<field> = <value> is invalid; accepted: <what is accepted>``, with the nearest
names for an unknown choice.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Sequence
from typing import Any

from loopzoo._registry import near_names

__all__ = ["invalid", "integer", "real", "fraction", "choice", "boolean"]


def invalid(field: str, value: Any, accepted: str) -> ValueError:
    """The refusal of ``value`` for ``field``, saying what is accepted."""
    return ValueError(f"{field} = {value!r} is invalid; accepted: {accepted}")


def _bounds(minimum: float | None, maximum: float | None) -> str:
    if minimum is not None and maximum is not None:
        return f" in [{minimum}, {maximum}]"
    if minimum is not None:
        return f" >= {minimum}"
    return f" <= {maximum}" if maximum is not None else ""


def integer(field: str, value: Any, *, minimum: int | None = None,
            maximum: int | None = None) -> int:
    """``value`` as an int in [minimum, maximum]: an integer, or a float without a fraction
    (YAML and JSON may write 2 as 2.0); bools, strings and fractions are refused."""
    number = None
    whole = isinstance(value, numbers.Integral) or (
        isinstance(value, numbers.Real) and math.isfinite(value) and float(value).is_integer())
    if whole and not isinstance(value, bool):
        number = int(value)
    if number is None or (minimum is not None and number < minimum) or (
            maximum is not None and number > maximum):
        raise invalid(field, value, "an integer" + _bounds(minimum, maximum))
    return number


def real(field: str, value: Any, *, low: float | None = None, high: float | None = None,
         low_open: bool = False, high_open: bool = False) -> float:
    """``value`` as a finite float between ``low`` and ``high`` (each end open or closed)."""
    ok = isinstance(value, numbers.Real) and not isinstance(value, bool) and math.isfinite(value)
    if ok and low is not None:
        ok = value > low if low_open else value >= low
    if ok and high is not None:
        ok = value < high if high_open else value <= high
    if not ok:
        if low is not None and high is not None:
            where = f" in {'(' if low_open else '['}{low}, {high}{')' if high_open else ']'}"
        elif low is not None:
            where = f" {'>' if low_open else '>='} {low}"
        elif high is not None:
            where = f" {'<' if high_open else '<='} {high}"
        else:
            where = ""
        raise invalid(field, value, "a finite number" + where)
    return float(value)


def fraction(field: str, value: Any) -> float:
    """``value`` as a float strictly between 0 and 1."""
    return real(field, value, low=0.0, high=1.0, low_open=True, high_open=True)


def choice(field: str, value: Any, choices: Sequence[str]) -> str:
    """``value`` if it is one of ``choices``; otherwise the refusal lists them and the nearest."""
    if isinstance(value, str) and value in choices:
        return value
    accepted = "one of " + ", ".join(repr(c) for c in choices)
    raise invalid(field, value, accepted + near_names(value, choices))


def boolean(field: str, value: Any) -> bool:
    """True or False only (not 0 / 1, not strings)."""
    if not isinstance(value, bool):
        raise invalid(field, value, "true or false")
    return value
