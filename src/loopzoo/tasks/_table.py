"""Reading a user's table (CSV or Parquet) with pandas, with errors that name the file, the line
(CSV) or row (Parquet) and the column; time columns of numbers or ISO 8601 dates.

``read_table(path)`` is the one entry point: tasks use it for training files, and anything that
reads a user's table later (e.g. rows to predict on) should use it too, so both see the same
cells, the same missing values and the same time parsing.
"""

from __future__ import annotations

import dataclasses
import io
import math
import os
import re
import warnings
from pathlib import Path
from typing import Any

import numpy as np

from loopzoo.tasks._files import read_input_file

__all__ = ["MISSING", "Table", "TimeColumn", "read_table"]

# Cells read as a missing value rather than as text.
MISSING = {"", "nan", "na", "n/a", "null", "none", "nat", "<na>"}
_PARQUET_MAGIC = b"PAR1"
# An explicit UTC offset or "Z" at the end of the time part of an ISO 8601 timestamp.
_ZONE = re.compile(r"(?:Z|[+-]\d{2}(?::?\d{2})?)$", re.IGNORECASE)
_ACCEPTED_TIMES = ("a time column holds numbers, or ISO 8601 dates or timestamps "
                   "(YYYY-MM-DD, optionally with Thh:mm[:ss] and a zone), all of one kind")


def _pandas() -> Any:
    try:
        import pandas
    except ImportError:  # pragma: no cover - pandas is in the harness extra
        raise ImportError("reading tables needs pandas (and pyarrow for Parquet): "
                          "pip install 'loopzoo[harness]'") from None
    return pandas


@dataclasses.dataclass(frozen=True)
class TimeColumn:
    """A parsed time column: ``values`` float64 (numbers) or datetime64[ns] (UTC if zoned)."""

    name: str
    kind: str  # "number" or "datetime"
    values: np.ndarray
    dates_only: bool = False  # every value is a midnight: shown as YYYY-MM-DD

    def label(self, index: int) -> str | int | float:
        """Value ``index`` for messages and records: a number, or an ISO 8601 string."""
        return self._show(self.values[index])

    def _show(self, value: Any) -> str | int | float:
        if self.kind == "number":
            return int(value) if float(value).is_integer() else float(value)
        text = np.datetime_as_string(value, unit="s")
        return text[:10] if self.dates_only else text

    def following(self, ordered: np.ndarray, count: int) -> list[str | int | float] | None:
        """Labels of the ``count`` times after the last of ``ordered``, continuing its regular
        spacing (an equal number step, or the calendar frequency pandas infers: months, weeks);
        None when the times are not regular (fewer than 3, or unequal steps)."""
        values = self.values[ordered]
        if len(values) < 3:
            return None
        if self.kind == "number":
            steps = np.diff(values)
            if not np.allclose(steps, steps[0], rtol=1e-9, atol=0.0):
                return None
            return [self._show(values[-1] + k * steps[0]) for k in range(1, count + 1)]
        pd = _pandas()
        with warnings.catch_warnings():  # pandas 3 warns that an offset object will come
            warnings.simplefilter("ignore", FutureWarning)
            warnings.simplefilter("ignore", DeprecationWarning)
            frequency = pd.infer_freq(pd.DatetimeIndex(values))
        if frequency is None:
            return None
        future = pd.date_range(pd.Timestamp(values[-1]), periods=count + 1, freq=frequency)[1:]
        return [self._show(np.datetime64(t.to_datetime64(), "ns")) for t in future]


@dataclasses.dataclass(frozen=True)
class Table:
    """A user's table: ``frame`` holds the cells (CSV: text; Parquet: as stored), one row per data
    row; ``lines[i]`` is the file line of row i for CSV (the header is line 1), None for Parquet
    (row i is then "row i + 1"). ``file`` is ``{"path", "sha256", "bytes"}`` of the bytes read."""

    path: Path
    frame: Any  # pandas.DataFrame
    lines: tuple[int, ...] | None
    file: dict[str, object]

    @property
    def header(self) -> tuple[str, ...]:
        """The column names, in file order."""
        return tuple(self.frame.columns)

    def __len__(self) -> int:
        return len(self.frame)

    def where(self, row: int) -> str:
        """``"line 17"`` (CSV) or ``"row 16"`` (Parquet) for data row ``row`` (0-based)."""
        return f"line {self.lines[row]}" if self.lines is not None else f"row {row + 1}"

    def describe_file(self) -> dict[str, object]:
        """The file's identity and size: ``{"path", "sha256", "bytes", "rows"}``."""
        return {**self.file, "rows": len(self)}

    def column(self, field: str, name: str) -> int:
        """Index of column ``name``, named by option ``field``; the available ones otherwise."""
        if name not in self.header:
            raise ValueError(f"{self.path}: column {name!r} (option {field}) is not in the file; "
                             f"available columns: {', '.join(map(repr, self.header))}")
        return self.header.index(name)

    def _cells(self, name: str) -> list[Any]:
        return self.frame[name].tolist()

    def texts(self, field: str, name: str, what: str = "value") -> list[str]:
        """The stripped cells of a column as text; a missing cell is an error naming its row."""
        self.column(field, name)
        cells = []
        for row, cell in enumerate(self._cells(name)):
            text = _text(cell)
            if text.lower() in MISSING:
                raise ValueError(f"{self.path}: {self.where(row)}, column {name!r}: missing {what} "
                                 f"({text!r}); every row needs one")
            cells.append(text)
        return cells

    def numbers(self, field: str, name: str) -> np.ndarray:
        """A column as float64; a missing or non-numeric cell is an error naming row and column."""
        self.column(field, name)
        series = self.frame[name]
        prefix = f"{self.path}: {{}}, column {name!r}: "
        if _is_numeric(series):
            values = series.to_numpy(dtype=np.float64, na_value=np.nan)
            for row in np.flatnonzero(~np.isfinite(values)):
                value = values[row]
                raise ValueError(prefix.format(self.where(row)) + (
                    "missing value (NaN); every row needs one" if math.isnan(value)
                    else f"{value!r} is not a finite number"))
            return values
        values = []
        for row, cell in enumerate(self.texts(field, name)):
            value = _number(cell)
            if value is None or not math.isfinite(value):
                problem = "is not a number" if value is None else "is not a finite number"
                raise ValueError(prefix.format(self.where(row)) + f"{cell!r} {problem}")
            values.append(value)
        return np.array(values, dtype=np.float64)

    def times(self, field: str, name: str) -> TimeColumn:
        """A time column: numbers, or ISO 8601 dates / timestamps; mixed or unparseable cells are
        an error naming the first row that differs from the column's kind."""
        pd = _pandas()
        self.column(field, name)
        series = self.frame[name]
        if pd.api.types.is_datetime64_any_dtype(series.dtype):
            if series.isna().any():
                row = int(np.flatnonzero(series.isna().to_numpy())[0])
                raise ValueError(f"{self.path}: {self.where(row)}, column {name!r}: missing time; "
                                 "every row needs one")
            if getattr(series.dt, "tz", None) is not None:
                series = series.dt.tz_convert("UTC").dt.tz_localize(None)
            values = series.to_numpy(dtype="datetime64[ns]")
            return TimeColumn(name, "datetime", values, _midnights(values))
        if _is_numeric(series):
            return TimeColumn(name, "number", self.numbers(field, name))
        return self._parse_times(name, self.texts(field, name, what="time"))

    def _parse_times(self, name: str, cells: list[str]) -> TimeColumn:
        pd = _pandas()
        numbers = np.array([_number(cell) for cell in cells], dtype=np.float64)
        is_number = np.isfinite(numbers)
        if is_number.all():
            return TimeColumn(name, "number", numbers)
        parsed = pd.to_datetime(pd.Series(cells, dtype=object), format="ISO8601", errors="coerce",
                                utc=True)
        is_date = parsed.notna().to_numpy() & ~is_number
        if is_date.all():
            zoned = np.array([bool(_ZONE.search(_time_part(cell))) for cell in cells])
            if zoned.any() and not zoned.all():
                row = int(np.flatnonzero(zoned != zoned[0])[0])
                kind = "has a UTC offset" if zoned[row] else "has no UTC offset"
                raise ValueError(f"{self.path}: {self.where(row)}, column {name!r}: {cells[row]!r} "
                                 f"{kind} but {cells[0]!r} on {self.where(0)} does not agree; "
                                 "give every time with an offset or none")
            values = parsed.dt.tz_localize(None).to_numpy(dtype="datetime64[ns]")
            return TimeColumn(name, "datetime", values, _midnights(values))
        numbers_win = is_number.sum() >= is_date.sum()
        expected = is_number if numbers_win else is_date
        row = int(np.flatnonzero(~expected)[0])
        others = int(expected.sum())
        kind = "a number" if numbers_win else "an ISO 8601 date or timestamp"
        raise ValueError(f"{self.path}: {self.where(row)}, column {name!r}: {cells[row]!r} is not "
                         f"{kind} like the {others} other times of the column; {_ACCEPTED_TIMES}")

    def order(self, times: TimeColumn, rows: np.ndarray) -> tuple[np.ndarray, int]:
        """``rows`` sorted by ``times`` (stable) and how many rows moved; repeated times are an
        error naming both rows."""
        ordered = rows[np.argsort(times.values[rows], kind="stable")]
        keys = times.values[ordered]
        same = np.flatnonzero(keys[1:] == keys[:-1])
        if same.size:
            first, second = sorted((int(ordered[same[0]]), int(ordered[same[0] + 1])))
            unit, a, b = (("lines", self.lines[first], self.lines[second]) if self.lines
                          else ("rows", first + 1, second + 1))
            raise ValueError(f"{self.path}: {unit} {a} and {b} have the same {times.name!r} value "
                             f"{times.label(second)!r}; times must be unique")
        return ordered, int((ordered != rows).sum())

    def warn_unsorted(self, times: TimeColumn, moved: int, total: int) -> None:
        """Say that ``moved`` of ``total`` rows were out of time order and have been sorted."""
        if moved:
            warnings.warn(f"{self.path}: {moved} of {total} rows are not in {times.name!r} order; "
                          f"they are sorted by {times.name!r}", UserWarning, stacklevel=3)

    def spacing(self, times: TimeColumn, ordered: np.ndarray) -> dict[str, Any]:
        """Whether the ordered times are evenly spaced (a warning when they are not).

        Dates are regular when pandas infers a calendar frequency (``pandas.infer_freq``: daily,
        month start, ...), so months of 28 to 31 days count as regular; numbers when every step
        is equal. Irregular: the most common step, how many steps differ, and the first one.
        """
        pd = _pandas()
        values = times.values[ordered]
        if len(values) < 3:
            return {"regular": None, "reason": "fewer than 3 times"}
        if times.kind == "datetime":
            with warnings.catch_warnings():  # pandas 3 warns that an offset object will come
                warnings.simplefilter("ignore", FutureWarning)
                warnings.simplefilter("ignore", DeprecationWarning)
                frequency = pd.infer_freq(pd.DatetimeIndex(values))
            if frequency is not None:  # a string (pandas <= 3) or an offset (later)
                return {"regular": True, "frequency": getattr(frequency, "freqstr", frequency)}
            steps = np.diff(values).astype("timedelta64[s]").astype(np.int64)
            show = _duration
        else:
            steps = np.diff(values)
            if np.allclose(steps, steps[0], rtol=1e-9, atol=0.0):
                return {"regular": True, "step": float(steps[0])}
            show = float
        kinds, counts = np.unique(steps, return_counts=True)
        common = kinds[np.argmax(counts)]
        differ = np.flatnonzero(steps != common)
        first = int(differ[0])
        facts = {"regular": False, "most_common_step": show(common),
                 "steps_differing": int(differ.size), "steps": int(steps.size),
                 "first_differing_after": times.label(ordered[first]),
                 "first_differing_step": show(steps[first])}
        warnings.warn(f"{self.path}: column {times.name!r} is irregular: {differ.size} of "
                      f"{steps.size} steps differ from the most common step {show(common)} (the "
                      f"first after {times.label(ordered[first])}: {show(steps[first])}); the "
                      "model reads rows as equally spaced steps", UserWarning, stacklevel=2)
        return facts


def _duration(seconds: np.integer) -> str:
    """Seconds as ``"1 days 00:00:00"`` (pandas' Timedelta text)."""
    return str(_pandas().Timedelta(int(seconds), unit="s"))


def _is_numeric(series: Any) -> bool:
    """A column stored as numbers (Parquet), not as text or booleans."""
    types = _pandas().api.types
    return types.is_numeric_dtype(series.dtype) and not types.is_bool_dtype(series.dtype)


def _midnights(values: np.ndarray) -> bool:
    return bool((values == values.astype("datetime64[D]")).all())


def _time_part(cell: str) -> str:
    """The part of an ISO 8601 timestamp after the date ("" for a date alone)."""
    for separator in ("T", "t", " "):
        if separator in cell:
            return cell.split(separator, 1)[1]
    return ""


def _text(cell: Any) -> str:
    """A cell as stripped text; a missing value (None, NaN, NaT) as ""."""
    if cell is None or (isinstance(cell, float) and math.isnan(cell)):
        return ""
    if _pandas().isna(cell) is True:
        return ""
    return str(cell).strip()


def _number(cell: str) -> float | None:
    """``float(cell)`` or None."""
    try:
        return float(cell)
    except ValueError:
        return None


def read_table(path: str | os.PathLike[str]) -> Table:
    """Read a CSV or Parquet file (Parquet is recognised by its content, not its name).

    CSV: UTF-8 (a byte-order mark is allowed), a header row of distinct non-empty names, then
    rows with as many cells as the header; blank lines are skipped. Every cell is kept as text,
    converted when a column is used (``numbers``, ``times``, ``texts``), so errors name the line.
    Parquet: read with pyarrow; column names must be distinct.
    """
    data, file = read_input_file(path, "table file")
    path = Path(path)
    if data[:4] == _PARQUET_MAGIC:
        frame, lines = _parquet(path, data), None
    else:
        frame, lines = _csv(path, data)
    if len(frame) == 0:
        raise ValueError(f"table file {str(path)!r} has a header but no data rows")
    return Table(path=path, frame=frame, lines=lines, file=file)


def _parquet(path: Path, data: bytes) -> Any:
    pd = _pandas()
    try:
        frame = pd.read_parquet(io.BytesIO(data), engine="pyarrow")
    except ImportError:
        raise ImportError("reading Parquet needs pyarrow: pip install pyarrow") from None
    except Exception as error:  # pyarrow's errors have no common base besides Exception
        raise ValueError(f"Parquet file {str(path)!r} cannot be read: {error}") from None
    names = [str(name) for name in frame.columns]
    _check_header(path, names, "the header")
    frame.columns = names
    return frame.reset_index(drop=True)


def _check_header(path: Path, names: list[str], where: str) -> None:
    for i, name in enumerate(names):
        if not name:
            raise ValueError(f"{path}: {where}: column {i + 1} has an empty name")
    duplicates = sorted({name for name in names if names.count(name) > 1})
    if duplicates:
        raise ValueError(f"{path}: {where}: column names repeat: "
                         f"{', '.join(map(repr, duplicates))}")


def _csv(path: Path, data: bytes) -> tuple[Any, tuple[int, ...]]:
    pd = _pandas()
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as error:
        raise ValueError(f"CSV file {str(path)!r} is not UTF-8: byte {error.start} cannot be "
                         "decoded; save the file as UTF-8") from None
    if not text.strip():
        raise ValueError(f"CSV file {str(path)!r} is empty; expected a header row of column "
                         "names, then data rows")
    try:
        # The python engine marks cells missing from a short row as NaN (empty cells stay ""),
        # so a short row is caught; every cell is read as text, so errors can quote it.
        raw = pd.read_csv(io.StringIO(text), header=None, dtype=str, keep_default_na=False,
                          skip_blank_lines=False, engine="python")
    except pd.errors.ParserError as error:
        raise ValueError(f"{path}: {_parser_message(str(error))}") from None
    except pd.errors.EmptyDataError:
        raise ValueError(f"CSV file {str(path)!r} is empty; expected a header row of column "
                         "names, then data rows") from None
    cells = raw.to_numpy(dtype=object)
    # Physical line of each parsed row: quoted cells may span lines.
    spans = [1 + sum(cell.count("\n") for cell in row if isinstance(cell, str)) for row in cells]
    lines = np.cumsum([1, *spans[:-1]])
    while len(cells) and all(_text(cell) == "" for cell in cells[0]):  # blank lines before it
        cells, lines = cells[1:], lines[1:]
    header = [_text(cell) for cell in cells[0]]
    _check_header(path, header, f"line {lines[0]}")
    keep = []
    for row in range(1, len(cells)):
        present = [cell for cell in cells[row] if isinstance(cell, str)]
        if not any(cell.strip() for cell in present):
            continue  # blank lines carry no data
        if len(present) != len(header):
            raise ValueError(f"{path}: line {lines[row]} has {len(present)} cells; the header "
                             f"has {len(header)} columns")
        keep.append(row)
    frame = pd.DataFrame(cells[keep] if keep else np.empty((0, len(header)), dtype=object),
                         columns=header, dtype=object)
    return frame, tuple(int(lines[row]) for row in keep)


def _parser_message(message: str) -> str:
    """pandas' tokenizer message in the reader's words (line numbers kept)."""
    too_many = re.search(r"Expected (\d+) fields in line (\d+), saw (\d+)", message)
    if too_many:
        columns, line, cells = too_many.groups()
        return f"line {line} has {cells} cells; the header has {columns} columns"
    return message.replace("Error tokenizing data. ", "").strip()
