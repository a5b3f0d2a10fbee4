"""Forecasting a recorded series: chronological parts, (context window -> horizons) samples,
levels or first differences scaled on the training part, and the classical baselines."""

from __future__ import annotations

import dataclasses
import math
from abc import abstractmethod
from collections.abc import Mapping
from typing import Any

import numpy as np
import torch

from loopzoo._checks import boolean, integer
from loopzoo.tasks._base import (
    SPLITS,
    RegressionTask,
    Split,
    make_split,
    part_bounds,
    shortest_record,
)
from loopzoo.tasks._lag_rows import LagData, boosted_trees_row, ridge_row
from loopzoo.tasks._options import check_int_list, check_split_fractions
from loopzoo.tasks._rows import ComparisonRow, LazyRows, Stopwatch
from loopzoo.tasks._scaling import Standardizer
from loopzoo.tasks._scoring import regression_metrics
from loopzoo.tasks._state_space_rows import SeriesHistory, arima_row, ets_row

__all__ = ["SeriesData", "SeriesOptions", "SeriesTask"]


@dataclasses.dataclass(frozen=True)
class SeriesOptions:
    window: int = 20  # T: context steps per sample; the forecast is scored after the last one
    horizons: tuple[int, ...] = (1,)  # steps ahead of the window's last step, one output each
    val_fraction: float = 0.15  # share of the time steps after the training part
    test_fraction: float = 0.15  # share of the time steps at the end
    season: int | None = None  # period in steps for the seasonal-naive baseline (None: no season)
    ar_order: int | None = None  # AR lags; None chooses 1..min(window, 12) on the validation part
    differences: bool = False  # inputs v[t] - v[t-1], targets v[t+h] - v[t] (for trending series)

    def __post_init__(self) -> None:
        integer("window", self.window, minimum=1, maximum=1_000_000)
        object.__setattr__(self, "horizons", check_int_list("horizons", self.horizons))
        check_split_fractions(self.val_fraction, self.test_fraction)
        if self.season is not None:
            integer("season", self.season, minimum=1, maximum=self.window)
        if self.ar_order is not None:
            integer("ar_order", self.ar_order, minimum=1, maximum=self.window)
        boolean("differences", self.differences)


@dataclasses.dataclass(frozen=True)
class SeriesData:
    """A recorded multichannel series in data units.

    values: (L, C) float64, every column an input; targets: the column indices to forecast;
    imputed: (L,) bool, steps whose target values were filled in (never scored); times: the
    time of each step (ISO 8601 text or a number) when the source has a time column, else None.
    """

    source: str
    values: np.ndarray
    columns: tuple[str, ...]
    targets: tuple[int, ...]
    imputed: np.ndarray
    facts: dict[str, Any] = dataclasses.field(default_factory=dict)
    times: tuple[str | float, ...] | None = None


class SeriesTask(RegressionTask):
    """Forecast the target columns ``horizons`` steps after a context window of every column.

    Sample i of a part reads steps [i, i + T + max h); x = the T context steps (all columns,
    standardised with the training part's mean and std), y[:, t] = the targets h steps after
    step t (scored only at t = T - 1). No sample straddles two parts. Output channel order:
    for each target column, each horizon.

    With ``differences=True`` (for trending series, whose later parts leave the training range)
    x[:, t] = v[t] - v[t-1] for every column and y[:, t] = v[t+h] - v[t] for each target and
    horizon, each standardised with the mean and std of those differences on the training part.
    A window's first step uses the row just before the window, which must lie in the same part,
    so each part's first row starts no sample (sample i reads steps [i - 1, i + T + max h)).
    ``score`` adds v[t] back, so every metric is still in the data's own units.

    Baselines, the same in both modes in data units: "persistence" (the last context value),
    "seasonal-naive" (the value one season before the forecast step, if ``season`` is set) and
    "ar" (statsmodels AutoReg with a constant, fitted per target column on the training part,
    iterated for later horizons).
    Subclasses implement ``_load`` returning a ``SeriesData``.
    """

    seed_changes_data = False

    def __init__(self, seed: int = 0, **options: Any) -> None:
        super().__init__(seed, **options)
        self.data = self._load()
        self.horizons = self.options.horizons
        self._bounds = part_bounds(len(self.data.values), self.options.val_fraction,
                                   self.options.test_fraction)
        self._check_length()
        train_start, train_end = self._bounds["train"]
        train = self.data.values[train_start:train_end]
        if self.options.differences:
            self.input_scaler = dataclasses.replace(
                Standardizer.fit(np.diff(train, axis=0)),
                method="standardise v[t] - v[t-1], fitted on the training part")
            self.scaler = self._change_scaler(train)
        else:
            self.input_scaler = Standardizer.fit(train)
            means = [self.input_scaler.mean[c] for c in self.data.targets for _ in self.horizons]
            stds = [self.input_scaler.std[c] for c in self.data.targets for _ in self.horizons]
            self.scaler = Standardizer(mean=tuple(means), std=tuple(stds))
        self.input_size = len(self.data.columns)
        self.output_size = len(self.data.targets) * len(self.horizons)
        self.channel_names = tuple(
            f"{self.data.columns[c]}_h{h}" if len(self.data.targets) > 1 else f"h{h}"
            for c in self.data.targets for h in self.horizons)
        self._starts: dict[str, np.ndarray] = {}
        self._ar_order: int | None = None
        self._rows: LazyRows | None = None

    targets_observed = True

    def observed_after(self) -> tuple[int | None, ...]:
        """Each target column is also an input: its value h steps ahead (or its change over those
        h steps) is observed h steps later, per channel (target column, then horizon)."""
        return tuple(h for _ in self.data.targets for h in self.horizons)

    @abstractmethod
    def _load(self) -> SeriesData:
        """Read the series (data units), raising a clear error for bad input."""

    def _change_scaler(self, train: np.ndarray) -> Standardizer:
        """Mean and std of v[t+h] - v[t] over the training rows, per output channel."""
        fitted = [Standardizer.fit((train[h:, c] - train[:-h, c])[:, None])
                  for c in self.data.targets for h in self.horizons]
        return Standardizer(mean=tuple(f.mean[0] for f in fitted),
                            std=tuple(f.std[0] for f in fitted),
                            method="standardise v[t+h] - v[t], fitted on the training part")

    @property
    def _lead(self) -> int:
        """Rows a sample reads before its window: the predecessor row when differencing."""
        return 1 if self.options.differences else 0

    @property
    def _reach(self) -> int:
        """Steps one sample reads: the window plus the furthest horizon (plus the lead row)."""
        return self._lead + self.options.window + max(self.horizons)

    def _levels(self, steps: np.ndarray) -> np.ndarray:
        """(N, T) row numbers -> (N, T, channels) data-unit offset of the targets: v[t] of each
        target (once per horizon) when differencing, else zero."""
        if not self.options.differences:
            return np.zeros((*steps.shape, self.output_size))
        current = self.data.values[steps][..., list(self.data.targets)]
        return np.repeat(current, len(self.horizons), axis=-1)

    def _split_levels(self, split: Split) -> np.ndarray:
        """``_levels`` of every window step of ``split``, located through its spans."""
        first = split.span[:, :1].numpy() + self._lead
        return self._levels(first + np.arange(self.options.window))

    def _check_length(self) -> None:
        total = len(self.data.values)
        shortest = min(end - start for start, end in self._bounds.values())
        if shortest >= self._reach:
            return
        needed = shortest_record(self._reach, self.options.val_fraction,
                                 self.options.test_fraction)
        raise ValueError(
            f"{self.data.source}: {total} rows are too few for window={self.options.window} and "
            f"horizons up to {max(self.horizons)}: each of train, val and test needs at least "
            f"{self._reach} consecutive rows, so at least {needed} rows are needed with "
            f"val_fraction={self.options.val_fraction} and test_fraction="
            f"{self.options.test_fraction} (or use a shorter window)")

    def _sample_starts(self, name: str) -> np.ndarray:
        """First step of every sample of a part whose scored targets are all observed."""
        if name not in self._starts:
            start, end = self._bounds[name]
            starts = np.arange(start, end - self._reach + 1) + self._lead
            forecast_steps = starts[:, None] + self.options.window - 1 + np.array(self.horizons)
            self._starts[name] = starts[~self.data.imputed[forecast_steps].any(axis=1)]
        return self._starts[name]

    def _make_splits(self) -> dict[str, Split]:
        values = self.data.values
        # row r holds v[r] - v[r-1]; row 0 has no predecessor and is never read (starts >= 1)
        inputs = np.diff(values, axis=0, prepend=np.nan) if self.options.differences else values
        scaled = self.input_scaler.transform(inputs)
        window = self.options.window
        splits = {}
        for name in SPLITS:
            starts = self._sample_starts(name)
            if starts.size == 0:
                raise ValueError(f"{self.data.source}: the {name} part has no sample whose "
                                 "forecast steps are observed (all are filled-in values)")
            steps = starts[:, None] + np.arange(window)  # (N, T)
            ahead = np.stack([values[steps + h, c] for c in self.data.targets
                              for h in self.horizons], axis=-1) - self._levels(steps)
            mask = np.zeros((len(starts), window), dtype=bool)
            mask[:, -1] = True
            span = np.stack([starts - self._lead, starts - self._lead + self._reach - 1], axis=1)
            splits[name] = make_split(scaled[steps], self.scaler.transform(ahead), mask,
                                      np.full(len(starts), window), span, classes=False)
        return splits

    def _metrics(self, prediction: torch.Tensor, split: Split) -> dict[str, float]:
        levels = torch.as_tensor(self._split_levels(split))
        return regression_metrics(self.scaler.inverse(prediction) + levels,
                                  self.scaler.inverse(split.y) + levels, split.mask,
                                  self.channel_names)

    def score_in_data_units(self, prediction: np.ndarray, split: Split | str) -> dict[str, float]:
        part = self.split(split) if isinstance(split, str) else split
        values = np.asarray(prediction, dtype=np.float64)
        levels = self._split_levels(part)
        if values.shape != levels.shape:  # ``score`` refuses it, naming the expected shape
            return self.score(torch.as_tensor(values), part)
        return self.score(torch.as_tensor(self.scaler.transform(values - levels)), part)

    def _targets_in_window(self, name: str) -> np.ndarray:
        """(N, T, targets) raw target values of each sample's context window."""
        starts = self._sample_starts(name)
        steps = starts[:, None] + np.arange(self.options.window)
        return self.data.values[steps][..., list(self.data.targets)]

    def _full_prediction(self, forecast: np.ndarray) -> np.ndarray:
        """(N, channels) forecasts in data units -> (N, T, channels), placed at the last step."""
        prediction = np.zeros((len(forecast), self.options.window, self.output_size))
        prediction[:, -1] = forecast
        return prediction

    def baselines(self) -> Mapping[str, ComparisonRow]:
        if self._rows is None:
            makers = {"persistence": lambda: self._naive_row(self._persistence())}
            if self.options.season is not None:
                makers["seasonal-naive"] = lambda: self._naive_row(self._seasonal_naive())
            makers.update({
                "ar": self._ar_row,
                "ets": lambda: ets_row(self._history()),
                "arima": lambda: arima_row(self._history()),
                "ridge": lambda: ridge_row(self._lag_data()),
                "boosted-trees": lambda: boosted_trees_row(self._lag_data()),
            })
            self._rows = LazyRows(makers)
        return self._rows

    def _naive_row(self, forecast: np.ndarray) -> ComparisonRow:
        prediction = self._full_prediction(forecast)
        return ComparisonRow(self.score_in_data_units(prediction, "test"), seed_dependent=False)

    def _persistence(self) -> np.ndarray:
        last = self._targets_in_window("test")[:, -1, :]
        return np.repeat(last, len(self.horizons), axis=-1)

    def _seasonal_naive(self) -> np.ndarray:
        """The forecast step minus the smallest whole number of seasons inside the window."""
        context, season = self._targets_in_window("test"), self.options.season
        columns = [context[:, self.options.window - 1 + h - season * math.ceil(h / season), c]
                   for c in range(len(self.data.targets)) for h in self.horizons]
        return np.stack(columns, axis=-1)

    def _ar_row(self) -> ComparisonRow:
        watch = Stopwatch()
        with watch.running():
            order = self.ar_order()
            forecast = self._ar_forecast(self._targets_in_window("test"), order)
        row = self._naive_row(forecast)
        chosen_on = "given" if self.options.ar_order else "validation MSE"
        return dataclasses.replace(row, fit_seconds=watch.seconds,
                                   details={"order": order, "chosen_on": chosen_on})

    def _history(self) -> SeriesHistory:
        """The target columns and test forecast origins for the state-space rows."""
        def score(forecast: np.ndarray) -> dict[str, float]:
            return self.score_in_data_units(self._full_prediction(forecast), "test")

        return SeriesHistory(
            values=self.data.values[:, list(self.data.targets)],
            names=tuple(self.data.columns[c] for c in self.data.targets),
            train_end=self._bounds["train"][1],
            origins=self._sample_starts("test") + self.options.window - 1,
            horizons=self.horizons, season=self.options.season or 1, score=score)

    def _lag_data(self) -> LagData:
        """Each sample's window as the topologies read it (scaled, differenced if set),
        flattened, with its scaled targets."""
        def part(name: str) -> tuple[np.ndarray, np.ndarray]:
            split = self.split(name)
            return (split.x.numpy().reshape(len(split), -1).astype(np.float64),
                    split.y[:, -1].numpy().astype(np.float64))

        def score(name: str, prediction: np.ndarray) -> dict[str, float]:
            return self.score(self._full_prediction(prediction), name)

        read = "first differences" if self.options.differences else "values"
        return LagData(train=part("train"), val=part("val"), test=part("test")[0], score=score,
                       metric=self.metric, seed_dependent=False,
                       details={"features": f"the {self.options.window}-step window of "
                                            f"{len(self.data.columns)} column(s), {read}, "
                                            "scaled as the topologies read it"})

    def _ar_params(self, order: int) -> list[np.ndarray]:
        """statsmodels AutoReg (constant + ``order`` lags) per target, fitted on the train part."""
        from statsmodels.tsa.ar_model import AutoReg

        start, end = self._bounds["train"]
        return [np.asarray(AutoReg(self.data.values[start:end, c], lags=order, trend="c")
                           .fit().params) for c in self.data.targets]

    def _ar_forecast(self, context: np.ndarray, order: int) -> np.ndarray:
        """(N, T, targets) windows -> (N, channels) iterated AR forecasts at the horizons."""
        columns = []
        for c, params in enumerate(self._ar_params(order)):
            history = list(context[:, -order:, c].T)  # oldest first
            ahead = {}
            for step in range(1, max(self.horizons) + 1):
                lags = np.stack(history[::-1][:order], axis=1)  # (N, order), lag 1 first
                history.append(params[0] + lags @ params[1:])
                ahead[step] = history[-1]
            columns += [ahead[h] for h in self.horizons]
        return np.stack(columns, axis=-1)

    def ar_order(self) -> int:
        """The AR order: ``ar_order`` if given, else the lowest validation MSE in 1..min(T, 12)
        (also capped at a third of the training rows so every fit has several rows per lag)."""
        if self.options.ar_order is not None:
            return self.options.ar_order
        if self._ar_order is None:
            context = self._targets_in_window("val")
            val = self.split("val")
            errors = {}
            train_rows = self._bounds["train"][1]
            for order in range(1, max(1, min(self.options.window, 12, train_rows // 3)) + 1):
                prediction = self._full_prediction(self._ar_forecast(context, order))
                errors[order] = self.score_in_data_units(prediction, val)["mse"]
            self._ar_order = min(errors, key=errors.get)
        return self._ar_order

    def _part_facts(self, name: str) -> dict[str, Any]:
        """Where a part lies and what of it is scored: its rows (and times), the rows at its
        start only ever read as context, forecasts made, and filled-in values."""
        start, end = self._bounds[name]
        candidates = max(0, end - start - self._reach + 1)
        forecasts = len(self._sample_starts(name))
        facts: dict[str, Any] = {
            "first_row": start, "end_row": end, "rows": end - start,
            "context_rows": self._lead + self.options.window - 1 + min(self.horizons),
            "forecasts": forecasts, "scored_values": forecasts * self.output_size,
            "filled_values": int(self.data.imputed[start:end].sum()),
            "forecasts_dropped_for_filled_targets": candidates - forecasts,
        }
        if self.data.times is not None:
            facts.update(first_time=self.data.times[start], last_time=self.data.times[end - 1])
        return facts

    def preprocessing(self) -> dict[str, Any]:
        """Columns, scalings, differencing, window and horizons: everything a forecast from raw
        rows needs (each window is read from the model's zero state)."""
        return {"kind": "series", "columns": list(self.data.columns),
                "targets": [self.data.columns[c] for c in self.data.targets],
                "time": getattr(self.options, "time", None), "window": self.options.window,
                "horizons": list(self.horizons), "differences": self.options.differences,
                "input_scaling": {"mean": list(self.input_scaler.mean),
                                  "std": list(self.input_scaler.std)},
                "output_scaling": {"mean": list(self.scaler.mean), "std": list(self.scaler.std)},
                "channels": list(self.channel_names)}

    def _facts(self) -> dict[str, Any]:
        return {"source": self.data.source, "rows": len(self.data.values),
                "columns": list(self.data.columns),
                "targets": [self.data.columns[c] for c in self.data.targets],
                "parts": {name: self._part_facts(name) for name in SPLITS},
                "inputs": ("first differences v[t] - v[t-1] of every column"
                           if self.options.differences else "values of every column"),
                "target_values": ("changes v[t+h] - v[t] from the current value, v[t] added back "
                                  "for scoring" if self.options.differences
                                  else "values at t + h"),
                "scaling": self.input_scaler.describe(),
                "target_scaling": self.scaler.describe(), "ar_order": self.ar_order(),
                "ar_order_chosen_on": "given" if self.options.ar_order else "validation MSE",
                **self.data.facts}
