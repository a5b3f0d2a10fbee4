"""The self-contained predictor: raw data in, predictions in data units out.

``loopzoo.load(ARTIFACT)`` returns the module with a ``predictor`` attribute, a ``Predictor``
built from the artifact's ``preprocessing`` description (see ``loopzoo.serve.preprocessing``)::

    model = loopzoo.load("runs/x/runs/<run_id>/artifact")
    table = model.predictor.predict(frame)      # series: a DataFrame (or an (L, C) array) of rows
    table = model.predictor.predict("some text")  # next-symbol: a string

Tables are read as training read them (``loopzoo.tasks._table``: the same numbers, missing
values and time parsing). ``predict`` returns a pandas DataFrame (pandas is imported only then):
forecasts with their origins, horizons and times for series; next-symbol scores for text; a label
and class probabilities per sequence. Input the artifact cannot read raises ``PredictionError``
naming the column or symbol and what the artifact expects.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from pathlib import Path
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
from loopzoo.tasks._table import Table

__all__ = ["PredictionError", "Predictor"]

_BATCH = 512


class PredictionError(ValueError):
    """Data the artifact cannot predict from; the message names the column or symbol."""


def _table(data: Any, source: str, columns: tuple[str, ...]) -> tuple[Table, bool]:
    """``data`` as the tasks' ``Table`` (the same cells, numbers and time parsing as training)
    and whether its rows are already in time order (an array has no time column)."""
    if isinstance(data, Table):
        return data, False
    import pandas as pd

    if isinstance(data, pd.DataFrame):
        return Table(path=Path(source), frame=data.reset_index(drop=True), lines=None,
                     file={}), False
    try:
        array = np.asarray(data, dtype=np.float64)
    except (TypeError, ValueError):
        raise PredictionError(f"{source}: expected a DataFrame with columns "
                              f"{', '.join(map(repr, columns))} or an array of them, got "
                              f"{type(data).__name__}") from None
    if array.ndim != 2 or array.shape[1] != len(columns):
        raise PredictionError(f"{source}: an array must have shape (rows, {len(columns)}) for "
                              f"columns {', '.join(map(repr, columns))}; got {array.shape}")
    frame = pd.DataFrame(array, columns=list(columns))
    return Table(path=Path(source), frame=frame, lines=None, file={}), True


def _require(table: Table, name: str, role: str, expected: str) -> None:
    """Column ``name`` must exist; the error says what the artifact expects and what is there."""
    if name not in table.header:
        raise PredictionError(
            f"{table.path}: column {name!r} ({role}) is missing; the artifact expects "
            f"{expected}; the data have columns {', '.join(map(repr, table.header)) or 'none'}")


def _checked(read: Any, *args: Any) -> Any:
    """A ``Table`` read whose ValueError (naming row and column) becomes a PredictionError."""
    try:
        return read(*args)
    except PredictionError:
        raise
    except ValueError as error:
        raise PredictionError(str(error)) from None


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

        series: a DataFrame (or a ``Table``) with the artifact's columns (and time column, if any),
        or an (L, C) array of the columns in artifact order -> a DataFrame with one row per
        forecast origin, target and horizon: ``origin_row`` (0-based, in time order),
        ``origin_time`` and ``time`` (the forecast step's time: from the data, or continuing its
        regular spacing past the last row; None past irregular times) if the artifact has a
        time column, ``target``, ``horizon``, ``forecast``, ``actual`` (the
        value at the forecast step where it is in the data, else NaN).

        next-symbol: a string -> a DataFrame with one row per position: ``position``, ``symbol``,
        ``next_symbol`` (empty at the end), ``bits`` (-log2 of the probability given to the next
        symbol; NaN at the end), ``predicted`` (the most likely next symbol) and ``probability``.

        sequence-classes: a DataFrame (or a ``Table``) with the feature columns and the sequence
        column -> one row per sequence: ``sequence``, ``label`` (predicted class) and
        ``p_<class>`` for each class.

        arrays: an (N, T, I) or (T, I) array of model inputs -> the outputs as an array (softmax
        probabilities for class outputs).
        """
        if self.refusal:
            raise PredictionError(self.refusal)
        reading = self.reading
        if isinstance(reading, SeriesReading):
            return self._forecast(reading, *_table(data, source, reading.columns))
        if isinstance(reading, NextSymbolReading):
            return self._next_symbols(reading, data, source)
        if isinstance(reading, SequenceClassReading):
            return self._classify(reading, _table(data, source, reading.features)[0])
        return self._arrays(reading, data)

    # -- series ---------------------------------------------------------------------------------

    def series_values(self, table: Table, ordered: bool = False) -> tuple[np.ndarray, Any]:
        """(L, C) raw values of the artifact's columns in time order (sorted by the time column
        unless ``ordered``), and the time labels of the ordered rows followed by those of the
        steps up to the longest horizon past the last row where the times are regular (None
        without a time column)."""
        reading = self.reading
        assert isinstance(reading, SeriesReading)
        time = None if ordered else reading.time
        expected = (f"columns {', '.join(map(repr, reading.columns))}"
                    + (f" and time column {time!r}" if time else ""))
        for name in reading.columns + ((time,) if time else ()):
            role = "time" if name == time else (
                "target" if name in reading.targets else "input")
            _require(table, name, role, expected)
        rows, labels = np.arange(len(table)), None
        if time:
            times = _checked(table.times, "time", time)
            rows = _checked(table.order, times, rows)[0]
            labels = [times.label(r) for r in rows]
            labels += times.following(rows, max(reading.horizons)) or []
        if len(table) < reading.rows_needed:
            extra = " (plus 1 before it for its differences)" if reading.differences else ""
            raise PredictionError(
                f"{table.path}: {len(table)} rows are too few; the artifact reads windows of "
                f"{reading.window} rows{extra}, so it needs at least {reading.rows_needed}")
        values = np.stack([_checked(table.numbers, "columns", name)[rows]
                           for name in reading.columns], axis=1)
        return values, labels

    def forecasts(self, values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(L, C) raw rows in time order -> (N, channels) data-unit forecasts and their (N,)
        origins (the row of each window's last step)."""
        reading = self.reading
        assert isinstance(reading, SeriesReading)
        x, origins = reading.windows(values)
        last = self.outputs(x)[:, -1]
        return reading.forecasts(last, values, origins), origins

    def _forecast(self, reading: SeriesReading, table: Table, ordered: bool) -> Any:
        import pandas as pd

        values, times = self.series_values(table, ordered)
        forecast, origins = self.forecasts(values)
        records = []
        for channel, (target, horizon) in enumerate(
                (t, h) for t in reading.targets for h in reading.horizons):
            column = reading.columns.index(target)
            ahead = origins + horizon
            inside = ahead < len(values)
            record = {"origin_row": origins}
            if times is not None:  # past the data only where the times are regular
                record["origin_time"] = [times[o] for o in origins]
                record["time"] = pd.Series([times[a] if a < len(times) else None for a in ahead],
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

    def sequences(self, table: Table) -> tuple[list[str], list[np.ndarray]]:
        """Sequence ids (first-appearance order) and their (L_i, F) raw feature rows in order."""
        reading = self.reading
        assert isinstance(reading, SequenceClassReading)
        expected = (f"feature columns {', '.join(map(repr, reading.features))}"
                    + (f", sequence column {reading.sequence!r}" if reading.sequence else "")
                    + (f" and time column {reading.time!r}" if reading.time else ""))
        for name in reading.features + tuple(c for c in (reading.sequence, reading.time) if c):
            role = ("sequence id" if name == reading.sequence
                    else "time" if name == reading.time else "feature")
            _require(table, name, role, expected)
        if reading.label and reading.label in table.header:
            labels = _checked(table.texts, "label", reading.label)
            for row, label in enumerate(labels):
                if label not in reading.classes:
                    raise PredictionError(
                        f"{table.path}: {table.where(row)}, column {reading.label!r}: class "
                        f"{label!r} was not seen in training; the artifact knows "
                        f"{', '.join(map(repr, reading.classes))}")
        values = np.stack([_checked(table.numbers, "features", name)
                           for name in reading.features], axis=1)
        ids = (_checked(table.texts, "sequence", reading.sequence) if reading.sequence
               else ["all"] * len(table))
        groups: dict[str, list[int]] = {}
        for row, key in enumerate(ids):
            groups.setdefault(key, []).append(row)
        members = {key: np.array(rows) for key, rows in groups.items()}
        if reading.time:
            times = _checked(table.times, "time", reading.time)
            members = {key: _checked(table.order, times, rows)[0]
                       for key, rows in members.items()}
        return list(members), [values[rows] for rows in members.values()]

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

    def _classify(self, reading: SequenceClassReading, table: Table) -> Any:
        import pandas as pd

        ids, sequences = self.sequences(table)
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
