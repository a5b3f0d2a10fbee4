"""Character streams as next-character tasks: chronological parts cut into fixed-length chunks."""

from __future__ import annotations

import dataclasses
from typing import Any

import numpy as np

from loopzoo._checks import integer
from loopzoo.tasks._base import SPLITS, part_bounds, shortest_record
from loopzoo.tasks._options import check_split_fractions, check_volume
from loopzoo.tasks._symbols import NextSymbolTask

__all__ = ["CharacterTask", "TextOptions"]


@dataclasses.dataclass(frozen=True)
class TextOptions:
    length: int = 64  # characters predicted per chunk (the last chunk of a part may be shorter)
    val_fraction: float = 0.1  # share of the characters, taken after the training part
    test_fraction: float = 0.1  # share of the characters at the end

    def __post_init__(self) -> None:
        integer("length", self.length, minimum=1, maximum=1_000_000)
        check_split_fractions(self.val_fraction, self.test_fraction)


class CharacterTask(NextSymbolTask):
    """Next-character prediction over one text, split in time: train, then val, then test.

    Each part is cut into chunks of ``length`` + 1 characters that overlap by one (the target of
    a chunk's last step is the next chunk's first input), so every character after the first of
    a part is predicted exactly once. The alphabet is every character of the whole text, so no
    val / test character lacks a class; only the training part is used by the baselines.
    Subclasses provide the text as ``self.text`` (set before ``_prepare_text``) and a ``source``.
    """

    seed_changes_data = False
    text: str
    source: str

    def _prepare_text(self) -> None:
        """Check the text is long enough and fix the alphabet and part boundaries."""
        total = len(self.text)
        self._bounds = part_bounds(total, self.options.val_fraction, self.options.test_fraction)
        shortest = min(end - start for start, end in self._bounds.values())
        if shortest < 2:
            needed = shortest_record(2, self.options.val_fraction, self.options.test_fraction)
            raise ValueError(f"{self.source}: the text has {total} characters; each of train, val "
                             f"and test needs at least 2, so at least {needed} characters are "
                             f"needed with val_fraction={self.options.val_fraction} and "
                             f"test_fraction={self.options.test_fraction}")
        self.alphabet = tuple(sorted(set(self.text)))
        # one-hot inputs: a value per character and class
        check_volume(self.name, total * (len(self.alphabet) + 2),
                     f"{total} characters of {len(self.alphabet)} kinds")

    def _symbol_strings(self) -> dict[str, tuple[list[np.ndarray], np.ndarray]]:
        index = {char: i for i, char in enumerate(self.alphabet)}
        ids = np.array([index[char] for char in self.text], dtype=np.int64)
        step = self.options.length
        strings = {}
        for name in SPLITS:
            start, end = self._bounds[name]
            # chunk k covers characters [first, last] inclusive; a last chunk of 1 is dropped
            firsts = list(range(start, end - 1, step))
            lasts = [min(first + step, end - 1) for first in firsts]
            strings[name] = ([ids[a : b + 1] for a, b in zip(firsts, lasts, strict=True)],
                             np.array([firsts, lasts], dtype=np.int64).T)
        return strings

    def preprocessing(self) -> dict[str, Any]:
        """The alphabet; the text is read in chunks of ``length`` characters from the zero state."""
        return {**super().preprocessing(), "chunk": self.options.length}

    def _stream(self, name: str) -> str:
        start, end = self._bounds[name]
        return self.text[start:end]

    def _facts(self) -> dict[str, Any]:
        return {"source": self.source, "characters": len(self.text),
                "alphabet_size": len(self.alphabet),
                "alphabet_from": "the whole text (a class for every character)",
                "parts": {name: {"first_char": a, "end_char": b}
                          for name, (a, b) in self._bounds.items()}}
