"""Forecasting a noisy mixture of sinusoids at several horizons, with a known optimum."""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping

import numpy as np

from loopzoo._checks import integer, real
from loopzoo.tasks._base import RegressionTask, Split, make_split, sequence_spans, split_generators
from loopzoo.tasks._catalog import TASKS
from loopzoo.tasks._lag_rows import LagData, boosted_trees_row, ridge_row
from loopzoo.tasks._options import SplitSizes, check_int_list
from loopzoo.tasks._rows import ComparisonRow, LazyRows
from loopzoo.tasks._scaling import Standardizer

__all__ = ["SinesTask"]

LAGS = 32  # the most recent values the lag rows read at each step
BOOSTING_SAMPLE = 20_000  # training steps the boosted trees see (bounds their fit time)


@dataclasses.dataclass(frozen=True)
class SinesOptions(SplitSizes):
    length: int = 100  # T observed steps per sequence
    horizons: tuple[int, ...] = (1, 5, 10)  # steps ahead, one output channel each
    periods: tuple[float, ...] = (16.0, 40.0)  # component periods in steps
    amplitudes: tuple[float, ...] = (1.0, 0.5)  # one per period
    noise: float = 0.1  # standard deviation of the Gaussian observation noise

    def __post_init__(self) -> None:
        super().__post_init__()
        integer("length", self.length, minimum=1, maximum=100_000)
        object.__setattr__(self, "horizons", check_int_list("horizons", self.horizons))
        periods = self.periods
        if isinstance(periods, int | float):
            periods = [periods]
        object.__setattr__(self, "periods", tuple(
            real(f"periods[{i}]", p, low=0.0, low_open=True) for i, p in enumerate(periods)))
        amplitudes = self.amplitudes
        if isinstance(amplitudes, int | float):
            amplitudes = [amplitudes]
        object.__setattr__(self, "amplitudes", tuple(
            real(f"amplitudes[{i}]", a, low=0.0, low_open=True) for i, a in enumerate(amplitudes)))
        if len(self.amplitudes) != len(self.periods):
            raise ValueError(f"amplitudes needs one value per period ({len(self.periods)}), "
                             f"got {len(self.amplitudes)}")
        real("noise", self.noise, low=0.0)
        # x 1, y one per horizon, the mask, and the noise-free signal kept for the optimum
        self.check_volume("sines", self.length + max(self.horizons), len(self.horizons) + 3)


@TASKS.register("sines")
class SinesTask(RegressionTask):
    """Forecast a noisy mixture of sinusoids at several horizons.

    From v_0..v_t predict v_{t+h} for each horizon h, where
    v_t = sum_k a_k sin(2 pi t / P_k + phi_k) + eps_t,  phi_k ~ U[0, 2 pi) per sequence,
    eps_t ~ N(0, noise^2). Every step is scored. Shapes: x (N, T, 1), y (N, T, len(horizons)).
    Baselines "persistence" (v_t for every horizon), "ridge" and "boosted-trees" on the last
    ``LAGS`` values at every step (``_lag_rows``); bound "optimal": the noise-free signal, whose
    expected MSE is the noise variance at every horizon (no predictor can know eps_{t+h}).

    Example:
        >>> task = loopzoo.tasks.create("sines", horizons=[1, 10], noise=0.2)
        >>> task.bounds()["optimal"].metrics["mse"]   # about 0.04
    """

    name = "sines"
    Options = SinesOptions
    input_size = 1

    def __init__(self, seed: int = 0, **options: object) -> None:
        super().__init__(seed, **options)
        self.horizons = self.options.horizons
        self.output_size = len(self.horizons)
        self.channel_names = tuple(f"h{h}" for h in self.horizons)
        self.scaler = Standardizer.identity(self.output_size)
        self._clean: dict[str, np.ndarray] = {}
        self._rows: LazyRows | None = None

    targets_observed = True

    def observed_after(self) -> tuple[int | None, ...]:
        """v_{t+h} is the input h steps later: each horizon's channel is observed after h."""
        return tuple(self.horizons)

    def _make_splits(self) -> dict[str, Split]:
        sizes = self.options.sizes()
        spans = sequence_spans(sizes)
        steps, reach = self.options.length, max(self.horizons)
        time = np.arange(steps + reach)
        splits = {}
        for name, rng in split_generators(self.name, self.seed).items():
            count = sizes[name]
            phases = rng.uniform(0.0, 2 * np.pi, size=(count, len(self.options.periods), 1))
            periods = np.array(self.options.periods)[None, :, None]
            amplitudes = np.array(self.options.amplitudes)[None, :, None]
            clean = (amplitudes * np.sin(2 * np.pi * time / periods + phases)).sum(axis=1)
            observed = clean + rng.normal(0.0, self.options.noise, size=clean.shape)
            self._clean[name] = clean
            splits[name] = make_split(observed[:, :steps, None], self._ahead(observed),
                                      np.ones((count, steps), dtype=bool), np.full(count, steps),
                                      spans[name], classes=False)
        return splits

    def _ahead(self, series: np.ndarray) -> np.ndarray:
        """(N, T + max h) -> (N, T, len(horizons)): the value h steps after each of the T steps."""
        steps = self.options.length
        return np.stack([series[:, h : h + steps] for h in self.horizons], axis=-1)

    def baselines(self) -> Mapping[str, ComparisonRow]:
        if self._rows is None:
            self._rows = LazyRows({
                "persistence": self._persistence_row,
                "ridge": lambda: ridge_row(self._lag_data()),
                "boosted-trees": lambda: boosted_trees_row(self._lag_data(BOOSTING_SAMPLE)),
            })
        return self._rows

    def _persistence_row(self) -> ComparisonRow:
        test = self.split("test")
        last = test.x[..., 0].numpy().astype(np.float64)
        persistence = np.repeat(last[..., None], len(self.horizons), axis=-1)
        return ComparisonRow(self.score_in_data_units(persistence, test))

    def _lag_data(self, sample: int | None = None) -> LagData:
        """Every step of every sequence: its last ``LAGS`` values (zero before the sequence's
        start, with a 0/1 feature per lag saying whether it was observed) -> its targets.
        ``sample``: at most this many training steps, drawn once with a fixed seed."""
        lags = min(self.options.length, LAGS)

        def part(name: str) -> tuple[np.ndarray, np.ndarray]:
            split = self.split(name)
            values = split.x[..., 0].numpy().astype(np.float64)
            count, steps = values.shape
            padded = np.concatenate([np.zeros((count, lags - 1)), values], axis=1)
            windows = np.lib.stride_tricks.sliding_window_view(padded, lags, axis=1)
            seen = np.arange(steps)[:, None] >= np.arange(lags - 1, -1, -1)[None, :]
            seen = np.broadcast_to(seen, windows.shape).astype(np.float64)
            features = np.concatenate([windows, seen], axis=-1).reshape(count * steps, -1)
            return features, split.y.numpy().astype(np.float64).reshape(count * steps, -1)

        def score(name: str, prediction: np.ndarray) -> dict[str, float]:
            split = self.split(name)
            return self.score(prediction.reshape(*split.mask.shape, -1), split)

        train = part("train")
        details = {"features": f"the last {lags} values at every step (zero-padded before the "
                               "start, with an observed flag per lag)"}
        if sample is not None and len(train[0]) > sample:
            rows = np.sort(np.random.default_rng(0).choice(len(train[0]), sample, replace=False))
            train = (train[0][rows], train[1][rows])
            details["training_steps"] = f"{sample} drawn from {self.split('train').mask.sum()}"
        return LagData(train=train, val=part("val"), test=part("test")[0], score=score,
                       metric=self.metric, seed_dependent=True, details=details)

    def bounds(self) -> dict[str, ComparisonRow]:
        test = self.split("test")
        optimal = self.score_in_data_units(self._ahead(self._clean["test"]), test)
        return {"optimal": ComparisonRow(optimal, kind="bound", details={
            "what": "the noise-free signal; expected MSE = noise variance at every horizon",
            "noise_variance": self.options.noise**2})}

    def _facts(self) -> dict[str, object]:
        return {"noise_variance": self.options.noise**2}
