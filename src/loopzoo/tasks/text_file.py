"""The user's own UTF-8 text file as a next-character task."""

from __future__ import annotations

import dataclasses
import os
from pathlib import Path

from loopzoo._checks import invalid
from loopzoo.tasks._catalog import TASKS
from loopzoo.tasks._files import read_input_file
from loopzoo.tasks._text import CharacterTask, TextOptions

__all__ = ["TextFileTask"]


@dataclasses.dataclass(frozen=True)
class TextFileOptions(TextOptions):
    path: str | os.PathLike[str] | None = None  # the UTF-8 text file (required)

    def __post_init__(self) -> None:
        super().__post_init__()
        if self.path is None:
            raise ValueError("text needs path=<a UTF-8 text file>")
        if not isinstance(self.path, str | os.PathLike):
            raise invalid("path", self.path, "a file path")


def read_text(path: Path) -> tuple[str, dict[str, object]]:
    """The file's text and identity (``read_input_file``); clear errors for a missing,
    unreadable, non-UTF-8 or empty file."""
    data, file = read_input_file(path, "text file")
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as error:
        raise ValueError(f"text file {str(path)!r} is not UTF-8: byte {error.start} "
                         f"({data[error.start:error.start + 1]!r}) cannot be decoded; "
                         "save the file as UTF-8") from None
    if not text.strip():
        raise ValueError(f"text file {str(path)!r} is empty (no characters besides whitespace)")
    return text, {**file, "rows": len(text.splitlines())}


@TASKS.register("text")
class TextFileTask(CharacterTask):
    """Next-character prediction on a UTF-8 text file, split in time (train, val, test).

    x[:, t] = one_hot(c_t), y[:, t] = c_{t+1}; chunks of ``length``; metric bits per character;
    baselines "unigram" and "bigram".

    Example:
        >>> task = loopzoo.tasks.create("text", path="notes.txt", length=128)
    """

    name = "text"
    Options = TextFileOptions
    file_options = ("path",)

    def __init__(self, seed: int = 0, **options: object) -> None:
        super().__init__(seed, **options)
        path = Path(self.options.path)
        self.source = str(path)
        self.text, file = read_text(path)
        self._files = [{"role": "path", **file}]
        self._prepare_text()
