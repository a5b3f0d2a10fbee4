"""Reading a user's CSV file with errors that name the file, line and column."""

from __future__ import annotations

import csv
import dataclasses
import io
import math
from pathlib import Path

import numpy as np

__all__ = ["CsvTable", "read_csv_table"]

# Cells read as a missing value rather than as text.
MISSING = {"", "nan", "na", "n/a", "null", "none"}


@dataclasses.dataclass(frozen=True)
class CsvTable:
    """A CSV file's header and data rows; ``lines[i]`` is the file line of row i (header: 1)."""

    path: Path
    header: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]
    lines: tuple[int, ...]

    def column(self, field: str, name: str) -> int:
        """Index of column ``name``, named by option ``field``; the available ones otherwise."""
        if name not in self.header:
            raise ValueError(f"{self.path}: column {name!r} (option {field}) is not in the file; "
                             f"available columns: {', '.join(map(repr, self.header))}")
        return self.header.index(name)

    def texts(self, field: str, name: str, what: str = "value") -> list[str]:
        """The stripped cells of a column; a missing cell is an error naming its line."""
        index = self.column(field, name)
        cells = [row[index].strip() for row in self.rows]
        for cell, line in zip(cells, self.lines, strict=True):
            if cell.lower() in MISSING:
                raise ValueError(f"{self.path}: line {line}, column {name!r}: missing {what} "
                                 f"({cell!r}); every row needs one")
        return cells

    def numbers(self, field: str, name: str) -> np.ndarray:
        """A column as float64; a missing or non-numeric cell is an error naming line and column."""
        values = []
        for cell, line in zip(self.texts(field, name), self.lines, strict=True):
            try:
                value = float(cell)
            except ValueError:
                raise ValueError(f"{self.path}: line {line}, column {name!r}: {cell!r} is not a "
                                 "number") from None
            if not math.isfinite(value):
                raise ValueError(f"{self.path}: line {line}, column {name!r}: {cell!r} is not a "
                                 "finite number")
            values.append(value)
        return np.array(values, dtype=np.float64)

    def sort_keys(self, field: str, name: str) -> list[float] | list[str]:
        """A time column as sort keys: numbers if every cell is one, else the text (ISO 8601
        timestamps sort correctly as text)."""
        cells = self.texts(field, name, what="time")
        try:
            return [float(cell) for cell in cells]
        except ValueError:
            return cells


def read_csv_table(path: Path) -> CsvTable:
    """Parse ``path``: a header row of distinct names, then rows with as many cells."""
    if not path.exists():
        raise FileNotFoundError(f"CSV file {str(path)!r} does not exist")
    if not path.is_file():
        raise ValueError(f"CSV path {str(path)!r} is not a file")
    data = path.read_bytes()
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as error:
        raise ValueError(f"CSV file {str(path)!r} is not UTF-8: byte {error.start} cannot be "
                         "decoded; save the file as UTF-8") from None
    reader = csv.reader(io.StringIO(text))
    try:
        header = tuple(cell.strip() for cell in next(reader))
    except StopIteration:
        raise ValueError(f"CSV file {str(path)!r} is empty; expected a header row of column "
                         "names, then data rows") from None
    except csv.Error as error:
        raise ValueError(f"{path}: line 1: {error}") from None
    for i, name in enumerate(header):
        if not name:
            raise ValueError(f"{path}: line 1: column {i + 1} has an empty name")
    duplicates = sorted({name for name in header if header.count(name) > 1})
    if duplicates:
        raise ValueError(f"{path}: line 1: column names repeat: {', '.join(map(repr, duplicates))}")
    rows, lines = [], []
    try:
        for row in reader:
            if not any(cell.strip() for cell in row):
                continue  # blank lines carry no data
            if len(row) != len(header):
                raise ValueError(f"{path}: line {reader.line_num} has {len(row)} cells; the "
                                 f"header has {len(header)} columns")
            rows.append(tuple(row))
            lines.append(reader.line_num)
    except csv.Error as error:
        raise ValueError(f"{path}: line {reader.line_num}: {error}") from None
    if not rows:
        raise ValueError(f"CSV file {str(path)!r} has a header but no data rows")
    return CsvTable(path=path, header=header, rows=tuple(rows), lines=tuple(lines))
