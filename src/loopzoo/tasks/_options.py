"""Option checks shared by all tasks: each error names the field, the value and what is accepted."""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Sequence
from typing import Any, TypeVar

from loopzoo._registry import unknown_choice

__all__ = [
    "SplitSizes",
    "build_options",
    "check_choice",
    "check_fraction",
    "check_int",
    "check_int_list",
    "check_volume",
    "check_positive_float",
    "check_seed",
    "check_str_list",
]

OptionsT = TypeVar("OptionsT")


def build_options(options_type: type[OptionsT], task: str, given: dict[str, Any]) -> OptionsT:
    """Instantiate the task's options dataclass, rejecting unknown keys with the accepted ones."""
    accepted = [field.name for field in dataclasses.fields(options_type)]  # type: ignore[arg-type]
    for key in given:
        if key not in accepted:
            raise unknown_choice(f"{task} option", key, accepted)
    return options_type(**given)


# Values (float32) a task may hold across its three splits: 2 GB, a tenth of this kind of machine.
MAX_VALUES = 500_000_000


def check_volume(task: str, values: int, sizes: str) -> None:
    """Refuse sizes whose tensors would not fit: ``values`` counted over x, y and the mask."""
    if values > MAX_VALUES:
        raise ValueError(f"{task} with {sizes} would hold about {values:.2e} values "
                         f"({values * 4 / 1e9:.1f} GB); the limit is {MAX_VALUES:.0e}: use fewer "
                         "or shorter sequences")


def check_seed(seed: object) -> int:
    """A seed is a non-negative int (numpy's SeedSequence refuses negatives)."""
    return check_int("seed", seed, minimum=0)


def check_int(field: str, value: object, minimum: int | None = None,
              maximum: int | None = None) -> int:
    """``value`` as an int in [minimum, maximum]; bools and floats with a fraction are refused."""
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise ValueError(f"{field} must be an integer, got {value!r}")
    if isinstance(value, float) and not value.is_integer():
        raise ValueError(f"{field} must be an integer, got {value!r}")
    number = int(value)
    if minimum is not None and number < minimum:
        raise ValueError(f"{field} must be >= {minimum}, got {number}")
    if maximum is not None and number > maximum:
        raise ValueError(f"{field} must be <= {maximum}, got {number}")
    return number


def check_positive_float(field: str, value: object, allow_zero: bool = False) -> float:
    """``value`` as a finite float > 0 (or >= 0 with ``allow_zero``)."""
    if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value):
        raise ValueError(f"{field} must be a finite number, got {value!r}")
    if value < 0 or (value == 0 and not allow_zero):
        bound = ">= 0" if allow_zero else "> 0"
        raise ValueError(f"{field} must be {bound}, got {value!r}")
    return float(value)


def check_fraction(field: str, value: object) -> float:
    """``value`` as a float strictly between 0 and 1."""
    number = check_positive_float(field, value)
    if number >= 1:
        raise ValueError(f"{field} must be between 0 and 1 (exclusive), got {value!r}")
    return number


def check_choice(field: str, value: object, choices: Sequence[str]) -> str:
    """``value`` if it is one of ``choices``; the unknown-choice error otherwise."""
    if value not in choices:
        raise unknown_choice(field, value, list(choices))
    return str(value)


def check_int_list(field: str, value: object, minimum: int = 1) -> tuple[int, ...]:
    """A non-empty, strictly increasing sequence of ints >= minimum (an int alone is one item)."""
    items = [value] if isinstance(value, int | float) and not isinstance(value, bool) else value
    if isinstance(items, str) or not isinstance(items, Sequence) or len(items) == 0:
        raise ValueError(f"{field} must be a non-empty list of integers, got {value!r}")
    numbers = tuple(check_int(f"{field}[{i}]", item, minimum=minimum)
                    for i, item in enumerate(items))
    if any(b <= a for a, b in zip(numbers, numbers[1:], strict=False)):
        raise ValueError(f"{field} must be strictly increasing, got {list(numbers)}")
    return numbers


def check_str_list(field: str, value: object, allow_empty: bool = False) -> tuple[str, ...]:
    """A list of distinct non-empty strings (a string alone is one item)."""
    items = [value] if isinstance(value, str) else value
    if not isinstance(items, Sequence) or (len(items) == 0 and not allow_empty):
        raise ValueError(f"{field} must be a column name or a list of them, got {value!r}")
    names = tuple(items)
    for i, name in enumerate(names):
        if not isinstance(name, str) or not name:
            raise ValueError(f"{field}[{i}] must be a non-empty string, got {name!r}")
    duplicates = sorted({name for name in names if names.count(name) > 1})
    if duplicates:
        raise ValueError(f"{field} lists {', '.join(map(repr, duplicates))} more than once")
    return names


@dataclasses.dataclass(frozen=True)
class SplitSizes:
    """Sizes of generated splits (sequences per part); tasks with generated data inherit these."""

    train_size: int = 2000  # training sequences; small enough that a tiny model trains in seconds
    val_size: int = 500  # sequences for validation (learning-rate choice, early stopping)
    test_size: int = 1000  # test sequences; many, so test metrics carry little sampling error

    def __post_init__(self) -> None:
        for name in ("train_size", "val_size", "test_size"):
            check_int(name, getattr(self, name), minimum=1, maximum=1_000_000)

    def sizes(self) -> dict[str, int]:
        """Sequences per split name."""
        return {"train": self.train_size, "val": self.val_size, "test": self.test_size}

    def check_volume(self, task: str, steps: int, channels: int) -> None:
        """Refuse sizes whose (N, steps, channels) tensors over all splits would not fit."""
        sequences = self.train_size + self.val_size + self.test_size
        check_volume(task, sequences * steps * channels,
                     f"{sequences} sequences of {steps} steps")
