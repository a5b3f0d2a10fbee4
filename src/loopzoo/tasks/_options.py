"""Task options: unknown names refused, list-valued options and sizes checked (single values go
through ``loopzoo._checks``, the rules every option shares)."""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from typing import Any, TypeVar

from loopzoo._checks import fraction, integer, invalid
from loopzoo._registry import unknown_choice

__all__ = [
    "SplitSizes",
    "build_options",
    "check_int_list",
    "check_split_fractions",
    "check_volume",
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
    return integer("seed", seed, minimum=0)


def check_split_fractions(val_fraction: object, test_fraction: object) -> None:
    """The validation and test parts of a file: each a fraction, together below 1."""
    fraction("val_fraction", val_fraction)
    fraction("test_fraction", test_fraction)
    if val_fraction + test_fraction >= 1:  # type: ignore[operator]
        raise invalid("val_fraction + test_fraction", f"{val_fraction} + {test_fraction}",
                      "a sum below 1 (the rest is the training part)")


def check_int_list(field: str, value: object, minimum: int = 1) -> tuple[int, ...]:
    """A non-empty, strictly increasing sequence of ints >= minimum (an int alone is one item)."""
    items = [value] if isinstance(value, int | float) and not isinstance(value, bool) else value
    if isinstance(items, str) or not isinstance(items, Sequence) or len(items) == 0:
        raise invalid(field, value, "a non-empty list of integers")
    numbers = tuple(integer(f"{field}[{i}]", item, minimum=minimum)
                    for i, item in enumerate(items))
    if any(b <= a for a, b in zip(numbers, numbers[1:], strict=False)):
        raise invalid(field, list(numbers), "a strictly increasing list")
    return numbers


def check_str_list(field: str, value: object, allow_empty: bool = False) -> tuple[str, ...]:
    """A list of distinct non-empty strings (a string alone is one item)."""
    items = [value] if isinstance(value, str) else value
    if not isinstance(items, Sequence) or (len(items) == 0 and not allow_empty):
        raise invalid(field, value, "a column name or a list of them")
    names = tuple(items)
    for i, name in enumerate(names):
        if not isinstance(name, str) or not name:
            raise invalid(f"{field}[{i}]", name, "a non-empty string")
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
            integer(name, getattr(self, name), minimum=1, maximum=1_000_000)

    def sizes(self) -> dict[str, int]:
        """Sequences per split name."""
        return {"train": self.train_size, "val": self.val_size, "test": self.test_size}

    def check_volume(self, task: str, steps: int, channels: int) -> None:
        """Refuse sizes whose (N, steps, channels) tensors over all splits would not fit."""
        sequences = self.train_size + self.val_size + self.test_size
        check_volume(task, sequences * steps * channels,
                     f"{sequences} sequences of {steps} steps")
