"""The user's own table (CSV or Parquet): "csv" forecasts target columns, "csv-sequences"
classifies variable-length sequences.

    loopzoo.tasks.create("csv", path="load.csv", target="kw", features=["temp"], time="hour",
                         window=48, horizons=[1, 24])
    loopzoo.tasks.create("csv-sequences", path="trips.csv", label="outcome",
                         sequence="trip_id", time="t")
"""

from __future__ import annotations

import dataclasses
import os
from typing import Any

import numpy as np

from loopzoo._checks import invalid
from loopzoo.tasks._base import SPLITS, Split, split_generators
from loopzoo.tasks._catalog import TASKS
from loopzoo.tasks._options import check_split_fractions, check_str_list
from loopzoo.tasks._scaling import Standardizer
from loopzoo.tasks._sequence_classes import SequenceClassTask, encode_sequences, stratified_parts
from loopzoo.tasks._series import SeriesData, SeriesOptions, SeriesTask
from loopzoo.tasks._table import read_table

__all__ = ["CsvClassTask", "CsvForecastTask"]


def _check_path(path: object) -> None:
    if path is None:
        raise ValueError("path=<a CSV or Parquet file with a header row> is required")
    if not isinstance(path, str | os.PathLike):
        raise invalid("path", path, "a file path")


def _check_optional_name(field: str, value: object) -> None:
    if value is not None and (not isinstance(value, str) or not value):
        raise invalid(field, value, "a column name")


def _check_disjoint(**groups: tuple[str, ...]) -> None:
    """No column may play two roles (e.g. both target and feature)."""
    seen: dict[str, str] = {}
    for role, names in groups.items():
        for name in names:
            if name in seen:
                raise ValueError(f"column {name!r} is given as both {seen[name]} and {role}")
            seen[name] = role


@dataclasses.dataclass(frozen=True)
class CsvForecastOptions(SeriesOptions):
    path: str | os.PathLike[str] | None = None  # the CSV or Parquet file (required)
    target: str | tuple[str, ...] | None = None  # column(s) to forecast (required)
    features: tuple[str, ...] = ()  # further input columns, known up to the window's end
    time: str | None = None  # column to sort rows by (numbers or ISO 8601 dates); None: file order

    def __post_init__(self) -> None:
        super().__post_init__()
        _check_path(self.path)
        if self.target is None:
            raise ValueError("csv needs target=<column or list of columns> to forecast (to "
                             "classify sequences use task 'csv-sequences')")
        object.__setattr__(self, "target", check_str_list("target", self.target))
        object.__setattr__(self, "features",
                           check_str_list("features", self.features or (), allow_empty=True))
        _check_optional_name("time", self.time)
        _check_disjoint(target=self.target, features=self.features,
                        time=(self.time,) if self.time else ())


@TASKS.register("csv")
class CsvForecastTask(SeriesTask):
    """Forecast the target column(s) of your CSV or Parquet file from a window of past rows.

    See ``SeriesTask`` for windows, parts, scaling and baselines. Rows are ordered by ``time``
    if given (numbers or ISO 8601 dates; repeated times are refused, unsorted or unevenly spaced
    ones reported); no cell may be missing.

    Example:
        >>> loopzoo.tasks.create("csv", path="load.csv", target="kw", time="hour", window=48)
    """

    name = "csv"
    Options = CsvForecastOptions
    file_options = ("path",)

    def __init__(self, seed: int = 0, **options: Any) -> None:
        if "label" in options or "sequence" in options:
            raise ValueError("task 'csv' forecasts target columns; to classify sequences by a "
                             "label column use task 'csv-sequences' (path, label, sequence)")
        super().__init__(seed, **options)

    def _load(self) -> SeriesData:
        table = read_table(self.options.path)
        self._files = [{"role": "path", **table.describe_file()}]
        for field, names in (("target", self.options.target), ("features", self.options.features)):
            for name in names:
                table.column(field, name)
        rows = np.arange(len(table))
        facts: dict[str, Any] = {"ordered_by": self.options.time or "file order"}
        times = None
        if self.options.time is not None:
            column = table.times("time", self.options.time)
            rows, moved = table.order(column, rows)
            table.warn_unsorted(column, moved, len(rows))
            times = tuple(column.label(row) for row in rows)
            facts["time"] = {"column": column.name, "kind": column.kind,
                             "rows_out_of_order_in_file": moved, **table.spacing(column, rows)}
        columns = (*self.options.target, *self.options.features)
        values = np.stack([table.numbers("target" if c in self.options.target else "features", c)
                           for c in columns], axis=1)[rows]
        return SeriesData(source=str(table.path), values=values, columns=columns,
                          targets=tuple(range(len(self.options.target))),
                          imputed=np.zeros(len(values), dtype=bool), facts=facts, times=times)


@dataclasses.dataclass(frozen=True)
class CsvClassOptions:
    path: str | os.PathLike[str] | None = None  # the CSV or Parquet file (required)
    label: str | None = None  # the class column (required), constant within a sequence
    sequence: str | None = None  # the id column (required); rows sharing an id form a sequence
    features: tuple[str, ...] | None = None  # input columns; None: all the other columns
    time: str | None = None  # column to order rows within a sequence; None: file order
    val_fraction: float = 0.2  # share of each class's sequences, drawn with the seed
    test_fraction: float = 0.2  # share of each class's sequences held out for the test

    def __post_init__(self) -> None:
        _check_path(self.path)
        if self.label is None or self.sequence is None:
            raise ValueError("csv-sequences needs label=<column> and sequence=<column>")
        _check_optional_name("label", self.label)
        _check_optional_name("sequence", self.sequence)
        _check_optional_name("time", self.time)
        if self.features is not None:
            object.__setattr__(self, "features", check_str_list("features", self.features))
        check_split_fractions(self.val_fraction, self.test_fraction)
        _check_disjoint(label=(self.label,), sequence=(self.sequence,),
                        time=(self.time,) if self.time else (), features=self.features or ())


@TASKS.register("csv-sequences")
class CsvClassTask(SequenceClassTask):
    """Classify the variable-length sequences of a CSV or Parquet file (rows grouped by
    ``sequence``).

    Each sequence's class is its ``label`` (text or numbers; classes in sorted order). Features
    are standardised with the training sequences' mean and std. Parts: a stratified draw of
    whole sequences with the seed. Baselines "logistic" and "prior" (``SequenceClassTask``).

    Example:
        >>> loopzoo.tasks.create("csv", path="trips.csv", label="outcome", sequence="trip_id")
    """

    name = "csv-sequences"
    Options = CsvClassOptions
    file_options = ("path",)

    def __init__(self, seed: int = 0, **options: Any) -> None:
        super().__init__(seed, **options)
        table = read_table(self.options.path)
        self._files = [{"role": "path", **table.describe_file()}]
        opts = self.options
        roles = {opts.label, opts.sequence, opts.time}
        features = opts.features or tuple(name for name in table.header if name not in roles)
        if not features:
            raise ValueError(f"{table.path}: no feature columns left besides label, sequence and "
                             f"time; columns: {', '.join(map(repr, table.header))}")
        labels = table.texts("label", opts.label, what="label (NaN or empty labels are refused)")
        ids = table.texts("sequence", opts.sequence, what="sequence id")
        values = np.stack([table.numbers("features", name) for name in features], axis=1)
        groups: dict[str, list[int]] = {}
        for row, key in enumerate(ids):
            groups.setdefault(key, []).append(row)
        self.class_names = self._classes(labels)
        times = None if opts.time is None else table.times("time", opts.time)
        self._sequences, sequence_labels, moved = [], [], 0
        for key, rows in groups.items():
            first = rows[0]
            for row in rows[1:]:
                if labels[row] != labels[first]:
                    raise ValueError(
                        f"{table.path}: sequence {key!r} has label {labels[first]!r} on "
                        f"{table.where(first)} but {labels[row]!r} on {table.where(row)}; "
                        "a sequence has one label")
            order = np.array(rows)
            if times is not None:
                order, moved_here = table.order(times, order)
                moved += moved_here
            self._sequences.append(values[order])
            sequence_labels.append(self.class_names.index(labels[first]))
        self._time_facts = None
        if times is not None:
            table.warn_unsorted(times, moved, len(table))
            self._time_facts = {"column": times.name, "kind": times.kind,
                                "rows_out_of_order_in_file": moved}
        self._labels = np.array(sequence_labels, dtype=np.int64)
        if len(self.class_names) < 2:
            raise ValueError(f"{table.path}: column {opts.label!r} has a single class "
                             f"{self.class_names[0]!r}; classification needs at least 2")
        self._source, self.features = str(table.path), features
        self.input_size, self.output_size = len(features), len(self.class_names)

    @staticmethod
    def _classes(labels: list[str]) -> list[str]:
        """Distinct labels, numerically sorted if all are numbers, else as text."""
        distinct = set(labels)
        try:
            return sorted(distinct, key=float)
        except ValueError:
            return sorted(distinct)

    def _make_splits(self) -> dict[str, Split]:
        rng = split_generators(self.name, self.seed)["train"]
        fractions = {"val": self.options.val_fraction, "test": self.options.test_fraction}
        try:
            parts = stratified_parts(self._labels, fractions, rng, self.class_names)
        except ValueError as error:
            raise ValueError(f"{self._source}: {error}") from None
        self.input_scaler = Standardizer.fit(
            np.concatenate([self._sequences[i] for i in parts["train"]]))
        return {name: encode_sequences([self.input_scaler.transform(self._sequences[i])
                                        for i in parts[name]], self._labels[parts[name]],
                                       np.stack([parts[name], parts[name]], axis=1))
                for name in SPLITS}

    def preprocessing(self) -> dict[str, Any]:
        """Feature columns and their scaling, the sequence and time columns, the class names."""
        self.split("train")  # fits the scaler
        opts = self.options
        return {"kind": "sequence-classes", "features": list(self.features),
                "sequence": opts.sequence, "time": opts.time, "label": opts.label,
                "classes": list(self.class_names),
                "input_scaling": {"mean": list(self.input_scaler.mean),
                                  "std": list(self.input_scaler.std)}}

    def _facts(self) -> dict[str, Any]:
        lengths = [len(s) for s in self._sequences]
        self.split("train")  # fits the scaler
        return {"source": self._source, "classes": self.class_names,
                "features": list(self.features), "sequences": len(self._sequences),
                "sequence_length": {"min": min(lengths), "max": max(lengths)},
                "scaling": self.input_scaler.describe(),
                "ordered_by": self.options.time or "file order", "time": self._time_facts}

