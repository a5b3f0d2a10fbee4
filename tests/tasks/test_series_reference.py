"""Forecasting tasks on statsmodels' bundled records, checked against statsmodels and numpy."""

import numpy as np
import pytest
import statsmodels.api as sm
from statsmodels.tsa.ar_model import AutoReg

import loopzoo


def raw_sunspots():
    return sm.datasets.sunspots.load_pandas().data["SUNACTIVITY"].to_numpy(dtype=np.float64)


def forecast_steps(task, part, window, horizon=1):
    """Forecast rows of a part: every row with a full window and horizon inside the part."""
    bounds = task.describe()["parts"][part]
    starts = np.arange(bounds["first_row"], bounds["end_row"] - window - horizon + 1)
    return starts + window - 1 + horizon


def statsmodels_one_step(series, train_end, order):
    """One-step AR predictions for every row, from a fit on rows [0, train_end)."""
    params = AutoReg(series[:train_end], lags=order, trend="c").fit().params
    predicted = AutoReg(series, lags=order, trend="c").predict(params, start=order,
                                                               end=len(series) - 1)
    return np.concatenate([np.full(order, np.nan), predicted])


@pytest.mark.parametrize("order", [2, 9])
def test_sunspots_ar_equals_direct_statsmodels_fit(order):
    # Reference: statsmodels AutoReg fitted directly on the same training years, its one-step
    # predictions taken from statsmodels' own predict over the full record.
    task = loopzoo.tasks.create("sunspots", window=20, ar_order=order)
    series = raw_sunspots()
    predicted = statsmodels_one_step(series, task.describe()["parts"]["train"]["end_row"], order)
    steps = forecast_steps(task, "test", 20)
    expected = np.mean((series[steps] - predicted[steps]) ** 2)
    assert task.baselines()["ar"].metrics["mse"] == pytest.approx(expected, rel=1e-5)


def test_sunspots_persistence_equals_numpy():
    # Independent numpy: the error of repeating last year's value over the test years.
    task = loopzoo.tasks.create("sunspots", window=20)
    series = raw_sunspots()
    steps = forecast_steps(task, "test", 20)
    errors = series[steps] - series[steps - 1]
    persistence = task.baselines()["persistence"].metrics
    assert persistence["mse"] == pytest.approx(np.mean(errors**2), rel=1e-5)
    assert persistence["mae"] == pytest.approx(np.mean(np.abs(errors)), rel=1e-5)


def test_sunspots_parts_are_chronological_and_scaled_on_train_only():
    task = loopzoo.tasks.create("sunspots", window=10)
    facts = task.describe()
    series = raw_sunspots()
    end = facts["parts"]["train"]["end_row"]
    assert facts["rows"] == 309 and facts["first_year"] == 1700 and facts["last_year"] == 2008
    assert facts["scaling"]["mean"][0] == pytest.approx(series[:end].mean())
    assert facts["scaling"]["std"][0] == pytest.approx(series[:end].std())
    for name in ("train", "val", "test"):
        split = task.split(name)
        first, stop = facts["parts"][name]["first_row"], facts["parts"][name]["end_row"]
        assert split.span[:, 0].min() >= first and split.span[:, 1].max() < stop
    # Inputs are standardised with the training statistics, and invert to the raw record.
    split = task.split("val")
    start = int(split.span[0, 0])
    restored = split.x[0, :, 0].double() * facts["scaling"]["std"][0] + facts["scaling"]["mean"][0]
    assert np.allclose(restored.numpy(), series[start : start + 10], atol=1e-3)


def test_co2_reports_and_never_scores_filled_weeks():
    # statsmodels co2 (Keeling & Whorf, Mauna Loa weekly CO2, as statsmodels.datasets.co2
    # carries it): 2,284 weekly rows, 59 of them missing.
    task = loopzoo.tasks.create("co2")
    facts = task.describe()
    assert facts["rows"] == 2284
    assert facts["missing_weeks_filled"] == 59
    raw = sm.datasets.co2.load_pandas().data["co2"].to_numpy()
    missing = np.isnan(raw)
    for name in ("train", "val", "test"):
        split = task.split(name)
        forecast = split.span[:, 1].numpy()  # horizon 1: the last row a sample reads
        assert not missing[forecast].any()
    left_out = sum(part["forecasts_dropped_for_filled_targets"]
                   for part in facts["parts"].values())
    assert 0 < left_out <= 59


def test_elnino_seasonal_naive_equals_numpy():
    # Independent numpy: the same month one year earlier (season 12) for horizons 1 and 3.
    task = loopzoo.tasks.create("elnino", window=24, horizons=[1, 3])
    series = sm.datasets.elnino.load_pandas().data.drop(columns="YEAR").to_numpy().reshape(-1)
    assert len(series) == 732
    errors = []
    for h in (1, 3):
        steps = forecast_steps(task, "test", 24, horizon=3) - 3 + h
        errors.append(np.mean((series[steps] - series[steps - 12]) ** 2))
    scores = task.baselines()["seasonal-naive"].metrics
    assert scores["mse_h1"] == pytest.approx(errors[0], rel=1e-5)
    assert scores["mse_h3"] == pytest.approx(errors[1], rel=1e-5)
    assert scores["mse"] == pytest.approx(np.mean(errors), rel=1e-5)


def test_ar_order_is_chosen_on_validation():
    # Reference: statsmodels fits of every candidate order, scored on the validation rows.
    task = loopzoo.tasks.create("sunspots", window=12)
    facts = task.describe()
    assert facts["ar_order_chosen_on"] == "validation MSE"
    series = raw_sunspots()
    steps = forecast_steps(task, "val", 12)
    val_mse = {}
    for order in range(1, 13):
        predicted = statsmodels_one_step(series, facts["parts"]["train"]["end_row"], order)
        val_mse[order] = np.mean((series[steps] - predicted[steps]) ** 2)
    assert facts["ar_order"] == min(val_mse, key=val_mse.get)


@pytest.mark.parametrize("options, field", [
    ({"window": 0}, "window"),
    ({"season": 30, "window": 20}, "season"),
    ({"ar_order": 25, "window": 20}, "ar_order"),
    ({"val_fraction": 0.6, "test_fraction": 0.5}, "val_fraction"),
    ({"horizons": "1"}, "horizons"),
    ({"window": 90}, "too few"),
])
def test_bad_series_options(options, field):
    with pytest.raises(ValueError, match=field):
        loopzoo.tasks.create("sunspots", **options)
