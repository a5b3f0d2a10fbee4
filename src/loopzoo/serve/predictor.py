"""The self-contained predictor: raw data in, predictions in data units out.

``loopzoo.load(ARTIFACT)`` returns the module with a ``predictor`` attribute, a ``Predictor``
built from the artifact's ``preprocessing`` description (see ``loopzoo.serve.preprocessing``)::

    model = loopzoo.load("runs/x/runs/<run_id>/artifact")
    table = model.predictor.predict(frame)      # series: a DataFrame (or an (L, C) array) of rows
    table = model.predictor.predict("some text")  # next-symbol: a string

``predict`` returns a pandas DataFrame (pandas is imported only then): forecasts with their
origins, horizons and times for series; next-symbol scores for text; a label and class
probabilities per sequence. Input the artifact cannot read raises ``PredictionError`` naming the
column or symbol and what the artifact expects.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np
import torch

from loopzoo.serve.preprocessing import (
    ArrayReading,
    NextSymbolReading,
    SequenceClassReading,
    SeriesReading,
    arrays_preprocessing,
    parse,
)

__all__ = ["PredictionError", "Predictor", "Rows"]

_BATCH = 512


class PredictionError(ValueError):
    """Data the artifact cannot predict from; the message names the column or symbol."""


class Rows:
    """Named columns of raw cells and, per row, where it came from (file line or frame row).

    Built from a pandas DataFrame (``Rows.of_frame``) or from a CSV file's header and string
    cells (``Rows.of_cells``, as ``loopzoo.tasks`` reads CSV files).
    """

    def __init__(self, source: str, columns: Mapping[str, list[Any]], places: list[str],
                 ordered: bool = False) -> None:
        self.source = source
        self.columns = dict(columns)
        self.places = places
        self.ordered = ordered  # rows already in time order (an array has no time column)

    @classmethod
    def of_frame(cls, frame: Any, source: str = "data") -> Rows:
        columns = {str(name): frame[name].tolist() for name in frame.columns}
        return cls(source, columns, [f"row {index}" for index in frame.index])

    @classmethod
    def of_cells(cls, source: str, header: tuple[str, ...], rows: tuple[tuple[str, ...], ...],
                 lines: tuple[int, ...]) -> Rows:
        columns = {name: [row[i].strip() for row in rows] for i, name in enumerate(header)}
        return cls(source, columns, [f"line {line}" for line in lines])

    def __len__(self) -> int:
        return len(self.places)

    def require(self, names: tuple[str, ...], role: str, expected: str) -> None:
        """Every column of ``names`` must exist; the error lists what the artifact expects."""
        missing = [name for name in names if name not in self.columns]
        if missing:
            raise PredictionError(
                f"{self.source}: column {missing[0]!r} ({role}) is missing; the artifact "
                f"expects {expected}; the data have columns "
                f"{', '.join(map(repr, self.columns)) or 'none'}")

    def numbers(self, name: str, rows: np.ndarray | None = None) -> np.ndarray:
        """A column as finite float64; a missing or non-numeric cell names its place."""
        cells = self.columns[name]
        values = np.empty(len(cells), dtype=np.float64)
        for i, cell in enumerate(cells):
            try:
                values[i] = float(cell)
            except (TypeError, ValueError):
                values[i] = math.nan
            if not math.isfinite(values[i]):
                raise PredictionError(f"{self.source}: {self.places[i]}, column {name!r}: "
                                      f"{cell!r} is not a finite number")
        return values if rows is None else values[rows]

    def texts(self, name: str) -> list[str]:
        """A column as stripped text; a missing cell names its place."""
        cells = []
        for i, cell in enumerate(self.columns[name]):
            text = "" if cell is None or (isinstance(cell, float) and math.isnan(cell)) else str(
                cell).strip()
            if not text:
                raise PredictionError(f"{self.source}: {self.places[i]}, column {name!r}: "
                                      "missing value")
            cells.append(text)
        return cells

    def time_order(self, name: str, rows: list[int] | None = None) -> list[int]:
        """Row indices sorted by column ``name`` (numbers if every cell is one, else text, as the
        tasks order a time column); repeated times are an error."""
        cells = self.columns[name]
        rows = list(range(len(cells))) if rows is None else rows
        texts = self.texts(name)
        try:
            keys: list[Any] = [float(texts[r]) for r in rows]
        except ValueError:
            keys = [texts[r] for r in rows]
        order = sorted(range(len(rows)), key=keys.__getitem__)
        for before, after in zip(order, order[1:], strict=False):
            if keys[before] == keys[after]:
                raise PredictionError(
                    f"{self.source}: {self.places[rows[before]]} and {self.places[rows[after]]} "
                    f"have the same {name!r} value {texts[rows[after]]!r}; times must be unique")
        return [rows[i] for i in order]


class Predictor:
    """Predictions in data units from raw values, for one model and its preprocessing.

    ``preprocessing`` is the artifact's description (None: plain arrays). The reading convention
    is the one the model was trained with: windows from the zero state for series, chunks from the
    zero state for text, whole sequences from the zero state for sequence classes. ``refusal``
    marks a model trained on data the artifact does not describe: ``predict`` and
    ``StreamRunner`` then refuse with that message instead of serving it differently.
    """

    def __init__(self, model: torch.nn.Module, preprocessing: Mapping[str, Any] | None = None,
                 *, refusal: str | None = None) -> None:
        self.model = model
        self.preprocessing = dict(preprocessing or arrays_preprocessing())
        self.reading = parse(self.preprocessing, model.input_size, model.output_size)
        self.refusal = refusal

    @property
    def kind(self) -> str:
        """"series", "next-symbol", "sequence-classes" or "arrays"."""
        return self.reading.kind

    def predict(self, data: Any, source: str = "data") -> Any:
        """Predictions for raw ``data``; see the module docstring for the kinds.

        series: a DataFrame (or ``Rows``) with the artifact's columns (and time column, if any),
        or an (L, C) array of the columns in artifact order -> a DataFrame with one row per
        forecast origin, target and horizon: ``origin_row`` (0-based, in time order),
        ``origin_time`` and ``time`` (the forecast step's time where that row is in the data) if
        the artifact has a time column, ``target``, ``horizon``, ``forecast``, ``actual`` (the
        value at the forecast step where it is in the data, else NaN).

        next-symbol: a string -> a DataFrame with one row per position: ``position``, ``symbol``,
        ``next_symbol`` (empty at the end), ``bits`` (-log2 of the probability given to the next
        symbol; NaN at the end), ``predicted`` (the most likely next symbol) and ``probability``.

        sequence-classes: a DataFrame (or ``Rows``) with the feature columns and the sequence
        column -> one row per sequence: ``sequence``, ``label`` (predicted class) and
        ``p_<class>`` for each class.

        arrays: an (N, T, I) or (T, I) array of model inputs -> the outputs as an array (softmax
        probabilities for class outputs).
        """
        if self.refusal:
            raise PredictionError(self.refusal)
        reading = self.reading
        if isinstance(reading, SeriesReading):
            return self._forecast(reading, self._rows(data, source, reading.columns))
        if isinstance(reading, NextSymbolReading):
            return self._next_symbols(reading, data, source)
        if isinstance(reading, SequenceClassReading):
            return self._classify(reading, self._rows(data, source, reading.features))
        return self._arrays(reading, data)

    # -- series ---------------------------------------------------------------------------------

    def series_values(self, rows: Rows) -> tuple[np.ndarray, list[int]]:
        """(L, C) raw values of the artifact's columns in time order, and the row order."""
        reading = self.reading
        assert isinstance(reading, SeriesReading)
        time = None if rows.ordered else reading.time
        expected = (f"columns {', '.join(map(repr, reading.columns))}"
                    + (f" and time column {time!r}" if time else ""))
        for name in reading.columns + ((time,) if time else ()):
            role = "time" if name == time else (
                "target" if name in reading.targets else "input")
            rows.require((name,), role, expected)
        order = rows.time_order(time) if time else list(range(len(rows)))
        if len(rows) < reading.rows_needed:
            extra = " (plus 1 before it for its differences)" if reading.differences else ""
            raise PredictionError(
                f"{rows.source}: {len(rows)} rows are too few; the artifact reads windows of "
                f"{reading.window} rows{extra}, so it needs at least {reading.rows_needed}")
        values = np.stack([rows.numbers(name, np.array(order)) for name in reading.columns], 1)
        return values, order

    def forecasts(self, values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(L, C) raw rows in time order -> (N, channels) data-unit forecasts and their (N,)
        origins (the row of each window's last step)."""
        reading = self.reading
        assert isinstance(reading, SeriesReading)
        x, origins = reading.windows(values)
        last = self.outputs(x)[:, -1]
        return reading.forecasts(last, values, origins), origins

    def _forecast(self, reading: SeriesReading, rows: Rows) -> Any:
        import pandas as pd

        values, order = self.series_values(rows)
        forecast, origins = self.forecasts(values)
        records = []
        times = ([rows.columns[reading.time][r] for r in order]
                 if reading.time and not rows.ordered else None)
        for channel, (target, horizon) in enumerate(
                (t, h) for t in reading.targets for h in reading.horizons):
            column = reading.columns.index(target)
            ahead = origins + horizon
            inside = ahead < len(values)
            record = {"origin_row": origins}
            if times is not None:
                record["origin_time"] = [times[o] for o in origins]
                record["time"] = pd.Series([times[a] if ok else None
                                            for a, ok in zip(ahead, inside, strict=True)],
                                           dtype=object)
            record.update(
                target=target, horizon=horizon, forecast=forecast[:, channel],
                actual=np.where(inside, values[np.minimum(ahead, len(values) - 1), column],
                                np.nan))
            records.append(pd.DataFrame(record))
        return (pd.concat(records, ignore_index=True)
                .sort_values(["origin_row", "target", "horizon"], kind="stable")
                .reset_index(drop=True))

    # -- next symbol ----------------------------------------------------------------------------

    def symbol_ids(self, text: Any, source: str = "data") -> np.ndarray:
        """The text's symbols as alphabet indices; a symbol outside the alphabet is an error."""
        reading = self.reading
        assert isinstance(reading, NextSymbolReading)
        if not isinstance(text, str):
            raise PredictionError(f"{source}: a next-symbol artifact reads a string, got "
                                  f"{type(text).__name__}")
        if not text:
            raise PredictionError(f"{source}: the text is empty")
        index = {symbol: i for i, symbol in enumerate(reading.alphabet)}
        for position, symbol in enumerate(text):
            if symbol not in index:
                shown = "".join(reading.alphabet)
                raise PredictionError(
                    f"{source}: symbol {symbol!r} at position {position} is not in the "
                    f"artifact's alphabet of {len(reading.alphabet)} symbols: {shown!r}")
        return np.array([index[s] for s in text], dtype=np.int64)

    def next_symbol_log_probabilities(self, text: Any, source: str = "data") -> np.ndarray:
        """(len(text), alphabet) float64 log-probabilities of the symbol after each position."""
        reading = self.reading
        assert isinstance(reading, NextSymbolReading)
        ids = self.symbol_ids(text, source)
        chunk = reading.chunk or len(ids)
        count = math.ceil(len(ids) / chunk)
        x = np.zeros((count, chunk, len(reading.alphabet)), dtype=np.float32)
        positions = np.arange(len(ids))
        x[positions // chunk, positions % chunk, ids] = 1.0
        logits = self.outputs(x).reshape(count * chunk, -1)[: len(ids)]
        return torch.log_softmax(torch.as_tensor(logits, dtype=torch.float64), -1).numpy()

    def _next_symbols(self, reading: NextSymbolReading, text: Any, source: str) -> Any:
        import pandas as pd

        log_probs = self.next_symbol_log_probabilities(text, source)
        ids = self.symbol_ids(text, source)
        following = np.append(ids[1:], -1)
        picked = log_probs[np.arange(len(ids)), np.maximum(following, 0)]
        best = log_probs.argmax(-1)
        return pd.DataFrame({
            "position": np.arange(len(ids)),
            "symbol": list(text),
            "next_symbol": [reading.alphabet[i] if i >= 0 else "" for i in following],
            "bits": np.where(following >= 0, -picked / math.log(2), np.nan),
            "predicted": [reading.alphabet[i] for i in best],
            "probability": np.exp(log_probs[np.arange(len(ids)), best]),
        })

    # -- sequence classes -----------------------------------------------------------------------

    def sequences(self, rows: Rows) -> tuple[list[str], list[np.ndarray]]:
        """Sequence ids (first-appearance order) and their (L_i, F) raw feature rows in order."""
        reading = self.reading
        assert isinstance(reading, SequenceClassReading)
        needed = reading.features + tuple(c for c in (reading.sequence, reading.time) if c)
        expected = (f"feature columns {', '.join(map(repr, reading.features))}"
                    + (f", sequence column {reading.sequence!r}" if reading.sequence else "")
                    + (f" and time column {reading.time!r}" if reading.time else ""))
        for name in needed:
            role = ("sequence id" if name == reading.sequence
                    else "time" if name == reading.time else "feature")
            rows.require((name,), role, expected)
        if reading.label and reading.label in rows.columns:
            for i, label in enumerate(rows.texts(reading.label)):
                if label not in reading.classes:
                    raise PredictionError(
                        f"{rows.source}: {rows.places[i]}, column {reading.label!r}: class "
                        f"{label!r} was not seen in training; the artifact knows "
                        f"{', '.join(map(repr, reading.classes))}")
        values = np.stack([rows.numbers(name) for name in reading.features], axis=1)
        groups: dict[str, list[int]] = {}
        ids = rows.texts(reading.sequence) if reading.sequence else ["all"] * len(rows)
        for row, key in enumerate(ids):
            groups.setdefault(key, []).append(row)
        if reading.time:
            groups = {key: rows.time_order(reading.time, members)
                      for key, members in groups.items()}
        return list(groups), [values[members] for members in groups.values()]

    def class_log_probabilities(self, sequences: list[np.ndarray]) -> np.ndarray:
        """(N, classes) float64 log-probabilities from raw (L_i, F) feature sequences."""
        reading = self.reading
        assert isinstance(reading, SequenceClassReading)
        lengths = np.array([len(s) for s in sequences])
        x = np.zeros((len(sequences), lengths.max(), len(reading.features)), dtype=np.float32)
        for row, values in enumerate(sequences):
            x[row, : len(values)] = reading.inputs.to_model(values)
        last = self.outputs(x)[np.arange(len(sequences)), lengths - 1]
        return torch.log_softmax(torch.as_tensor(last, dtype=torch.float64), -1).numpy()

    def _classify(self, reading: SequenceClassReading, rows: Rows) -> Any:
        import pandas as pd

        ids, sequences = self.sequences(rows)
        log_probs = self.class_log_probabilities(sequences)
        frame = pd.DataFrame({"sequence": ids,
                              "label": [reading.classes[i] for i in log_probs.argmax(-1)]})
        for index, name in enumerate(reading.classes):
            frame[f"p_{name}"] = np.exp(log_probs[:, index])
        return frame

    # -- arrays and the model itself ------------------------------------------------------------

    def _arrays(self, reading: ArrayReading, data: Any) -> np.ndarray:
        try:
            x = np.asarray(data, dtype=np.float32)
        except (TypeError, ValueError) as error:
            raise PredictionError(f"inputs must be numbers: {error}") from None
        single = x.ndim == 2
        if single:
            x = x[None]
        if x.ndim != 3 or x.shape[-1] != self.model.input_size:
            raise PredictionError(f"inputs must have shape (N, T, {self.model.input_size}) or "
                                  f"(T, {self.model.input_size}), got {np.shape(data)}")
        outputs = self.outputs(x)
        if reading.outputs == "classes":
            outputs = torch.softmax(torch.as_tensor(outputs, dtype=torch.float64), -1).numpy()
        return outputs[0] if single else outputs

    def outputs(self, x: np.ndarray) -> np.ndarray:
        """Model outputs (N, T, O) for model inputs (N, T, I), each sequence from the zero state,
        in batches; refuses non-finite inputs (``forward`` does)."""
        dtype = next(self.model.parameters()).dtype
        parts = []
        self.model.eval()
        with torch.inference_mode():
            for start in range(0, len(x), _BATCH):
                batch = torch.as_tensor(x[start : start + _BATCH], dtype=dtype)
                parts.append(self.model(batch)[0].numpy())
        return np.concatenate(parts)

    def _rows(self, data: Any, source: str, columns: tuple[str, ...]) -> Rows:
        if isinstance(data, Rows):
            return data
        if hasattr(data, "columns") and hasattr(data, "index"):
            return Rows.of_frame(data, source)
        try:
            array = np.asarray(data, dtype=np.float64)
        except (TypeError, ValueError):
            raise PredictionError(f"{source}: expected a DataFrame with columns "
                                  f"{', '.join(map(repr, columns))} or an array of them, got "
                                  f"{type(data).__name__}") from None
        if array.ndim != 2 or array.shape[1] != len(columns):
            raise PredictionError(f"{source}: an array must have shape (rows, {len(columns)}) "
                                  f"for columns {', '.join(map(repr, columns))}; got "
                                  f"{array.shape}")
        return Rows(source, {name: array[:, i].tolist() for i, name in enumerate(columns)},
                    [f"row {i}" for i in range(len(array))], ordered=True)
