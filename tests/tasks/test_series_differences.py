"""Forecasting on first differences (``differences=True``), checked against numpy on the raw
statsmodels records: scoring inverts to data units, targets invert to the future values, and
inputs stay causal."""

import dataclasses

import numpy as np
import pytest
import statsmodels.api as sm
import torch

import loopzoo
from loopzoo.tasks.open_series import Co2Task


def raw_co2_filled():
    # statsmodels co2, missing weeks filled by linear interpolation as the task documents.
    raw = sm.datasets.co2.load_pandas().data["co2"].to_numpy(dtype=np.float64)
    missing = np.isnan(raw)
    steps = np.arange(len(raw))
    filled = raw.copy()
    filled[missing] = np.interp(steps[missing], steps[~missing], raw[~missing])
    return filled, missing


def raw_series(name):
    if name == "co2":
        return raw_co2_filled()
    series = sm.datasets.sunspots.load_pandas().data["SUNACTIVITY"].to_numpy(dtype=np.float64)
    return series, np.zeros(len(series), dtype=bool)


def forecast_rows(task, part, window, horizons, imputed):
    """Last context row of every sample, by the documented rule: a window starts no earlier than
    one row after the part's first row, and no forecast row is a filled-in value."""
    bounds = task.describe()["parts"][part]
    starts = np.arange(bounds["first_row"] + 1, bounds["end_row"] - window - max(horizons) + 1)
    last = starts + window - 1
    observed = ~np.stack([imputed[last + h] for h in horizons], axis=1).any(axis=1)
    return last[observed]


def zero_change(task, split):
    """The scaled prediction meaning 'no change': (0 - mean) / std of the training changes."""
    zeros = np.zeros((len(split), split.mask.shape[1], task.output_size))
    return torch.as_tensor(task.scaler.transform(zeros))


@pytest.mark.parametrize("name, window, horizons", [
    ("co2", 60, [1]), ("co2", 60, [1, 4]), ("sunspots", 20, [1]), ("sunspots", 20, [1, 3])])
def test_zero_change_scores_the_numpy_persistence_error(name, window, horizons):
    # Independent numpy: persistence repeats the last context value, over the same test rows.
    task = loopzoo.tasks.create(name, window=window, horizons=horizons, differences=True)
    series, imputed = raw_series(name)
    last = forecast_rows(task, "test", window, horizons, imputed)
    errors = np.stack([series[last + h] - series[last] for h in horizons], axis=1)
    test = task.split("test")
    assert len(test) == len(last)
    scores = task.score(zero_change(task, test), test)
    assert scores["mse"] == pytest.approx(np.mean(errors**2), rel=1e-6)
    assert scores["mae"] == pytest.approx(np.mean(np.abs(errors)), rel=1e-6)
    for i, h in enumerate(horizons if len(horizons) > 1 else []):
        assert scores[f"mse_h{h}"] == pytest.approx(np.mean(errors[:, i] ** 2), rel=1e-6)
    # The persistence baseline (built in data units) is the same forecast, so the same scores.
    persistence = task.baselines()["persistence"].metrics
    assert persistence.keys() == scores.keys()
    for key, value in persistence.items():
        assert value == pytest.approx(scores[key], rel=1e-6), key


@pytest.mark.parametrize("name", ["co2", "sunspots"])
def test_scaled_targets_invert_to_the_raw_future_values(name):
    task = loopzoo.tasks.create(name, horizons=[1, 2], differences=True)
    series, _ = raw_series(name)
    window = task.options.window
    for part in ("train", "val", "test"):
        split = task.split(part)
        first = split.span[:, 0].numpy() + 1  # the span starts at the predecessor row
        rows = first[:, None] + np.arange(window)  # (N, T)
        std = np.array(task.scaler.std)
        mean = np.array(task.scaler.mean)
        change = split.y.double().numpy() * std + mean
        for i, h in enumerate((1, 2)):
            restored = change[..., i] + series[rows]
            assert np.allclose(restored, series[rows + h], rtol=0, atol=1e-4)
        # inputs invert to the raw first differences, the first step's from the predecessor row
        inputs = split.x[..., 0].double().numpy() * task.input_scaler.std[0]
        inputs += task.input_scaler.mean[0]
        assert np.allclose(inputs, series[rows] - series[rows - 1], rtol=0, atol=1e-4)


def test_scaling_is_fitted_on_the_training_part_only():
    task = loopzoo.tasks.create("co2", horizons=[1, 3], differences=True)
    series, _ = raw_co2_filled()
    facts = task.describe()
    end = facts["parts"]["train"]["end_row"]
    train = series[:end]
    assert facts["options"]["differences"] is True
    assert facts["inputs"].startswith("first differences")
    assert facts["scaling"]["mean"][0] == pytest.approx(np.diff(train).mean(), rel=1e-12)
    assert facts["scaling"]["std"][0] == pytest.approx(np.diff(train).std(), rel=1e-12)
    for i, h in enumerate((1, 3)):
        changes = train[h:] - train[:-h]
        assert facts["target_scaling"]["mean"][i] == pytest.approx(changes.mean(), rel=1e-12)
        assert facts["target_scaling"]["std"][i] == pytest.approx(changes.std(), rel=1e-12)


def test_baselines_are_unchanged_in_data_units():
    # Same test samples in both modes except the part's first one, which differencing drops.
    levels = loopzoo.tasks.create("sunspots", window=20)
    changes = loopzoo.tasks.create("sunspots", window=20, differences=True)
    assert len(changes.split("test")) == len(levels.split("test")) - 1
    series, _ = raw_series("sunspots")
    last = forecast_rows(changes, "test", 20, [1], np.zeros(len(series), dtype=bool))
    assert changes.ar_order() == levels.ar_order()
    for name, row in changes.baselines().items():
        assert np.isfinite(row.metrics["mse"]), name
    persistence = np.mean((series[last + 1] - series[last]) ** 2)
    assert changes.baselines()["persistence"].metrics["mse"] == pytest.approx(persistence, rel=1e-6)


class PerturbedCo2(Co2Task):
    """co2 with every row from ``CUT`` on shifted by noise: only steps >= CUT may change."""

    CUT = 2200  # inside the test part (it starts near row 1,942)

    def _load(self):
        data = super()._load()
        values = data.values.copy()
        values[self.CUT:] += np.random.default_rng(0).normal(0, 5, size=values[self.CUT:].shape)
        return dataclasses.replace(data, values=values)


def test_inputs_are_causal_per_step():
    original = loopzoo.tasks.create("co2", differences=True).split("test")
    perturbed = PerturbedCo2(differences=True).split("test")
    assert torch.equal(original.span, perturbed.span)
    rows = original.span[:, :1] + 1 + torch.arange(original.x.shape[1])  # (N, T) row of step t
    before = rows < PerturbedCo2.CUT
    # no x[:, t] whose row precedes the cut changes; every one at or after it does
    assert torch.equal(original.x[before], perturbed.x[before])
    assert (original.x[~before] != perturbed.x[~before]).all()
    assert before.any() and (~before).any()


@pytest.mark.parametrize("value", ["true", 1, 0, None, 1.0])
def test_differences_must_be_a_bool(value):
    with pytest.raises(ValueError, match=r"differences = .* is invalid; accepted: true or false"):
        loopzoo.tasks.create("sunspots", differences=value)


def test_too_short_parts_count_the_predecessor_row():
    # sunspots test part: 46 rows; window 45 + horizon 1 fits in levels, not with the lead row.
    loopzoo.tasks.create("sunspots", window=45)
    with pytest.raises(ValueError, match="at least 47 consecutive rows"):
        loopzoo.tasks.create("sunspots", window=45, differences=True)
