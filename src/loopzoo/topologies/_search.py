"""Ranges a topology declares for tuning: which options are worth searching, and over what.

Each topology class lists ``tunable = {"option": <range>}`` beside its ``option_specs``; the
harness adds the optimiser's ranges and hands the whole space to a tuner. Declarations are plain
data (no tuning library is imported here), checked against the option's own check, and
describable for a run record.

An edge of a range is either *soft* (an arbitrary choice: a value chosen there suggests the range
should be wider) or *hard* (a limit of the option itself, such as ``num_layers >= 1`` or a
``scale <= 1``). ``at_edge`` reports only soft edges.

Example::

    tunable = {
        "num_layers": IntegerRange(1, 3, hard=("low",)),
        "dropout": RealRange(0.0, 0.3, hard=("low",), only_if={"num_layers": (2, 3)}),
    }
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

__all__ = ["EDGE_SHARE", "Choices", "IntegerRange", "RealRange", "SearchRange", "check_range"]

EDGE_SHARE = 0.05
"""A real value within this share of its range's width (on the log scale for log ranges) of a
soft edge counts as at that edge (common practice for flagging a search that should be widened)."""

_EDGES = ("low", "high")


def _check_common(hard: tuple[str, ...], only_if: Mapping[str, tuple[Any, ...]]) -> None:
    for edge in hard:
        if edge not in _EDGES:
            raise ValueError(f"hard edge {edge!r} is not one of {', '.join(_EDGES)}")
    for name, values in only_if.items():
        if not isinstance(values, tuple) or not values:
            raise ValueError(f"only_if[{name!r}] must be a non-empty tuple of values")


@dataclass(frozen=True)
class RealRange:
    """Real values in [low, high], sampled uniformly (on the log scale with ``log``)."""

    low: float
    high: float
    log: bool = False
    hard: tuple[str, ...] = ()
    only_if: Mapping[str, tuple[Any, ...]] = field(default_factory=dict)

    def __post_init__(self) -> None:
        _check_common(self.hard, self.only_if)

    def describe(self) -> dict[str, Any]:
        """``{"low", "high", "log"}`` (plus ``hard``, ``only_if``) for a record."""
        described: dict[str, Any] = {"low": self.low, "high": self.high, "log": self.log}
        return _with_condition(described, self.hard, self.only_if)

    def at_edge(self, value: Any) -> bool:
        """True when ``value`` lies within ``EDGE_SHARE`` of the range of a soft edge."""
        scale = math.log if self.log else float
        low, high, at = scale(self.low), scale(self.high), scale(float(value))
        margin = EDGE_SHARE * (high - low)
        return (("low" not in self.hard and at <= low + margin)
                or ("high" not in self.hard and at >= high - margin))


@dataclass(frozen=True)
class IntegerRange:
    """Integers low, low + 1, ..., high."""

    low: int
    high: int
    hard: tuple[str, ...] = ()
    only_if: Mapping[str, tuple[Any, ...]] = field(default_factory=dict)

    def __post_init__(self) -> None:
        _check_common(self.hard, self.only_if)

    def describe(self) -> dict[str, Any]:
        """``{"low", "high", "log": False, "integer": True}`` (plus ``hard``, ``only_if``)."""
        described = {"low": self.low, "high": self.high, "log": False, "integer": True}
        return _with_condition(described, self.hard, self.only_if)

    def at_edge(self, value: Any) -> bool:
        """True when ``value`` equals a soft edge."""
        return (("low" not in self.hard and value == self.low)
                or ("high" not in self.hard and value == self.high))


@dataclass(frozen=True)
class Choices:
    """One of a few unordered values; never at an edge."""

    choices: tuple[Any, ...]
    only_if: Mapping[str, tuple[Any, ...]] = field(default_factory=dict)

    def __post_init__(self) -> None:
        _check_common((), self.only_if)

    def describe(self) -> dict[str, Any]:
        """``{"choices": [...]}`` (plus ``only_if``) for a record."""
        return _with_condition({"choices": list(self.choices)}, (), self.only_if)

    def at_edge(self, value: Any) -> bool:
        """Unordered choices have no edges."""
        return False


SearchRange = RealRange | IntegerRange | Choices


def _with_condition(described: dict[str, Any], hard: tuple[str, ...],
                    only_if: Mapping[str, tuple[Any, ...]]) -> dict[str, Any]:
    if hard:
        described["hard"] = list(hard)
    if only_if:
        described["only_if"] = {name: list(values) for name, values in only_if.items()}
    return described


def check_range(field_name: str, search: SearchRange) -> None:
    """Refuse an empty or inverted range, a log range reaching 0, or an empty / repeated choice
    list; ``ValueError`` naming ``field_name`` and what is accepted."""
    if isinstance(search, Choices):
        if not search.choices:
            raise ValueError(f"{field_name}: the choices are empty; accepted: a non-empty list")
        if len(set(map(repr, search.choices))) != len(search.choices):
            raise ValueError(f"{field_name}: the choices {list(search.choices)} repeat a value")
        return
    numbers = (search.low, search.high)
    integer = isinstance(search, IntegerRange)
    kind = "integers" if integer else "finite numbers"
    valid = all(isinstance(v, int) and not isinstance(v, bool) for v in numbers) if integer else (
        all(isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)
            for v in numbers))
    if not valid:
        raise ValueError(f"{field_name}: low = {search.low!r}, high = {search.high!r}; "
                         f"accepted: {kind} with low < high")
    if search.low >= search.high:
        what = "empty" if search.low == search.high else "inverted"
        raise ValueError(f"{field_name}: the range low = {search.low!r}, high = {search.high!r} "
                         f"is {what}; accepted: low < high")
    if getattr(search, "log", False) and search.low <= 0:
        raise ValueError(f"{field_name}: a log range needs low > 0, got low = {search.low!r}")
