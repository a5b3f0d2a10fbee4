"""Classical rows against the reference libraries run here, on the same split and points.

Each check rebuilds the split (chronological parts by the stated fractions, windows, horizons)
and the features from the raw data in the test, fits or runs the library, and compares the
error with the task's row. Sources: Hyndman & Khandakar, "Automatic Time Series Forecasting: the
forecast Package for R", JSS 27(3), 2008 (automatic ARIMA and ETS, which statsforecast mirrors);
Box & Jenkins ARIMA as statsmodels implements it; Hoerl & Kennard, "Ridge Regression",
Technometrics 12, 1970 (scikit-learn Ridge); Friedman, "Greedy Function Approximation: a
Gradient Boosting Machine", Annals of Statistics 29, 2001 (scikit-learn HistGradientBoosting).
"""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from sklearn.datasets import load_digits
from sklearn.ensemble import HistGradientBoostingClassifier, HistGradientBoostingRegressor
from sklearn.linear_model import Ridge

import loopzoo
from loopzoo.tasks._lag_rows import ALPHAS, BOOSTING_ROUNDS
from loopzoo.tasks._sequence_classes import CLASS_BOOSTING_ROUNDS


def sunspots():
    return sm.datasets.sunspots.load_pandas().data["SUNACTIVITY"].to_numpy(dtype=np.float64)


def elnino():
    frame = sm.datasets.elnino.load_pandas().data
    return frame.drop(columns="YEAR").to_numpy(dtype=np.float64).reshape(-1)


def parts(total, val_fraction=0.15, test_fraction=0.15):
    val_start = round(total * (1 - val_fraction - test_fraction))
    test_start = round(total * (1 - test_fraction))
    return {"train": (0, val_start), "val": (val_start, test_start), "test": (test_start, total)}


def origins(bounds, window, horizons, lead=0):
    """Last window row of every sample whose window (and lead row) and horizons fit the part."""
    start, end = bounds
    return np.arange(start + lead, end - window - max(horizons) + 1) + window - 1


def mse_per_horizon(series, at, forecasts, horizons):
    return {h: float(np.mean((series[at + h] - forecasts[:, i]) ** 2))
            for i, h in enumerate(horizons)}


def test_arima_row_equals_statsmodels_filtering_its_coefficients():
    # statsmodels' ARIMA (a regression on a constant with ARMA errors, like R's arima) filtered
    # with the coefficients the row chose, then forecast from each origin's own history.
    horizons = (1, 3)
    task = loopzoo.tasks.create("sunspots", window=20, horizons=list(horizons))
    row = task.baselines()["arima"]
    chosen = row.details["arima"]
    p, d, q = chosen["order"]
    assert chosen["seasonal_order"][:3] == [0, 0, 0], "sunspots has no season option set"
    coefficients = chosen["coefficients"]
    trend = "c" if "intercept" in coefficients else "t" if "drift" in coefficients else "n"
    params = ([coefficients.get("intercept", coefficients.get("drift"))] if trend != "n" else [])
    params += [coefficients[f"ar{i}"] for i in range(1, p + 1)]
    params += [coefficients[f"ma{i}"] for i in range(1, q + 1)] + [1.0]  # sigma2: no effect
    series = sunspots()
    at = origins(parts(len(series))["test"], 20, horizons)
    forecasts = np.stack([
        sm.tsa.arima.ARIMA(series[: o + 1], order=(p, d, q), trend=trend).filter(params)
        .forecast(max(horizons))[[h - 1 for h in horizons]] for o in at])
    expected = mse_per_horizon(series, at, forecasts, horizons)
    assert row.metrics["mse_h1"] == pytest.approx(expected[1], rel=1e-4)
    assert row.metrics["mse_h3"] == pytest.approx(expected[3], rel=1e-4)
    assert not row.seed_dependent and row.fit_seconds > 0


@pytest.fixture(scope="module")
def elnino_task():
    return loopzoo.tasks.create("elnino", window=24, horizons=[1, 2])


def test_ets_row_equals_statsforecast_run_forward_here(elnino_task):
    # statsforecast's AutoETS fitted on the training months, run forward (same parameters)
    # through every month up to each test origin.
    from statsforecast.models import AutoETS

    series, horizons = elnino(), (1, 2)
    bounds = parts(len(series))
    model = AutoETS(season_length=12).fit(series[: bounds["train"][1]])
    at = origins(bounds["test"], 24, horizons)
    forecasts = np.stack([model.forward(y=series[: o + 1], h=2)["mean"] for o in at])
    expected = mse_per_horizon(series, at, forecasts, horizons)
    row = elnino_task.baselines()["ets"]
    assert row.details["ets"]["form"] == model.model_["components"]
    assert row.metrics["mse_h1"] == pytest.approx(expected[1], rel=1e-6)
    assert row.metrics["mse_h2"] == pytest.approx(expected[2], rel=1e-6)


def test_classical_rows_beat_persistence_on_monthly_sea_temperature(elnino_task):
    # An expectation, not a published value: monthly sea surface temperature has a strong
    # annual cycle that persistence ignores, and seasonal exponential smoothing, seasonal ARIMA
    # and a regression on two years of lags all model it (Hyndman & Athanasopoulos, "Forecasting:
    # Principles and Practice", on seasonal series), so each should beat persistence clearly.
    rows = elnino_task.baselines()
    persistence = rows["persistence"].metrics["mse"]
    for name in ("ets", "arima", "ridge"):
        assert rows[name].metrics["mse"] < 0.5 * persistence, name


def lag_matrix(series, at, window, horizons, differences, mean, std, target_scale):
    """Windows ending at ``at`` (scaled as stated) and scaled targets, built from raw values."""
    if differences:
        changes = np.diff(series, prepend=np.nan)
        x = (changes[at[:, None] - np.arange(window - 1, -1, -1)] - mean) / std
        y = np.stack([(series[at + h] - series[at] - m) / s
                      for h, (m, s) in zip(horizons, target_scale, strict=True)], axis=1)
    else:
        x = (series[at[:, None] - np.arange(window - 1, -1, -1)] - mean) / std
        y = np.stack([(series[at + h] - mean) / std for h in horizons], axis=1)
    # the task's tensors are float32 (the topologies' dtype); trees bin exact feature values
    return x.astype(np.float32).astype(np.float64), y.astype(np.float32).astype(np.float64)


def unscale(prediction, series, at, horizons, differences, mean, std, target_scale):
    if differences:
        return np.stack([prediction[:, i] * s + m + series[at]
                         for i, (m, s) in enumerate(target_scale)], axis=1)
    return prediction * std + mean


@pytest.mark.parametrize("differences", [False, True])
def test_lag_rows_equal_scikit_learn_on_a_lag_matrix_built_here(differences):
    window, horizons = 12, (1, 2)
    task = loopzoo.tasks.create("sunspots", window=window, horizons=list(horizons),
                                differences=differences)
    series = sunspots()
    bounds = parts(len(series))
    train = series[: bounds["train"][1]]
    lead = 1 if differences else 0
    if differences:
        changes = np.diff(train)
        mean, std = changes.mean(), changes.std()
        target_scale = [((train[h:] - train[:-h]).mean(), (train[h:] - train[:-h]).std())
                        for h in horizons]
    else:
        mean, std, target_scale = train.mean(), train.std(), None
    data = {name: (at := origins(bounds[name], window, horizons, lead),
                   *lag_matrix(series, at, window, horizons, differences, mean, std,
                               target_scale))
            for name in ("train", "val", "test")}

    def error(name, prediction):
        at = data[name][0]
        values = unscale(prediction, series, at, horizons, differences, mean, std, target_scale)
        return float(np.mean((series[at[:, None] + np.array(horizons)] - values) ** 2))

    fits = {a: Ridge(alpha=a).fit(data["train"][1], data["train"][2]) for a in ALPHAS}
    alpha = min(fits, key=lambda a: error("val", fits[a].predict(data["val"][1])))
    ridge = task.baselines()["ridge"]
    assert ridge.details["alpha"] == alpha
    expected = error("test", fits[alpha].predict(data["test"][1]))
    assert ridge.metrics["mse"] == pytest.approx(expected, rel=1e-6)

    predictions = []
    for out in range(len(horizons)):
        model = HistGradientBoostingRegressor(max_iter=BOOSTING_ROUNDS, early_stopping=False,
                                              random_state=0)
        model.fit(data["train"][1], data["train"][2][:, out])
        val = [np.mean((p - data["val"][2][:, out]) ** 2)
               for p in model.staged_predict(data["val"][1])]
        best = int(np.argmin(val))
        predictions.append(list(model.staged_predict(data["test"][1]))[best])
    trees = task.baselines()["boosted-trees"]
    expected = error("test", np.stack(predictions, axis=1))
    assert trees.metrics["mse"] == pytest.approx(expected, rel=1e-6)


def test_boosted_trees_classify_digits_as_scikit_learn_does_here():
    digits = load_digits()
    task = loopzoo.tasks.create("digits", seed=0)
    index = {name: task.split(name).span[:, 0].numpy() for name in ("train", "val", "test")}
    model = HistGradientBoostingClassifier(max_iter=CLASS_BOOSTING_ROUNDS, early_stopping=False,
                                           random_state=0)
    model.fit(digits.data[index["train"]] / 16, digits.target[index["train"]])
    val_labels = digits.target[index["val"]]
    losses = [-np.mean(np.log(np.clip(p[np.arange(len(p)), val_labels], 1e-12, 1)))
              for p in model.staged_predict_proba(digits.data[index["val"]] / 16)]
    best = int(np.argmin(losses))
    probs = list(model.staged_predict_proba(digits.data[index["test"]] / 16))[best]
    expected = np.mean(probs.argmax(1) == digits.target[index["test"]])
    row = task.baselines()["boosted-trees"]
    assert row.details["iterations"] == best + 1
    assert row.metrics["accuracy"] == pytest.approx(expected, abs=1e-12)
    assert expected > 0.9  # sanity: boosted trees separate these digits well


def test_sines_lag_rows_lie_between_the_noise_floor_and_persistence():
    # The noise-free signal's error is the noise variance (no predictor knows future noise), a
    # bound no row can pass; a regression on the last values averages the noise out, so one
    # step ahead it beats persistence, whose error holds the noise of two observations.
    task = loopzoo.tasks.create("sines", seed=0, length=40, horizons=[1, 5], train_size=300,
                                val_size=100, test_size=100)
    floor = task.bounds()["optimal"].metrics["mse_h1"]
    persistence = task.baselines()["persistence"].metrics["mse_h1"]
    for name in ("ridge", "boosted-trees"):
        row = task.baselines()[name]
        assert floor < row.metrics["mse_h1"] < persistence, name
        assert row.seed_dependent and row.fit_seconds > 0


def _csv(path, values):
    path.write_text("kw\n" + "".join(f"{v}\n" for v in values), encoding="utf-8")
    return str(path)


def test_a_constant_series_skips_the_state_space_rows_and_keeps_the_others(tmp_path):
    task = loopzoo.tasks.create("csv", path=_csv(tmp_path / "flat.csv", [5.0] * 120),
                                target="kw", window=8)
    rows = task.baselines()
    for name in ("ets", "arima"):
        assert rows[name].status == "skipped" and "constant" in rows[name].reason, name
        assert rows[name].metrics == {}
    for name in ("persistence", "ar", "ridge", "boosted-trees"):
        assert rows[name].status == "ok" and rows[name].metrics["mse"] == pytest.approx(0.0)


def test_a_season_longer_than_half_the_training_part_skips_the_seasonal_rows(tmp_path):
    values = [10 + np.sin(i / 3) + 0.1 * (i % 7) for i in range(72)]
    task = loopzoo.tasks.create("csv", path=_csv(tmp_path / "short.csv", values), target="kw",
                                window=20, season=20, val_fraction=0.3, test_fraction=0.3)
    rows = task.baselines()
    for name in ("ets", "arima"):
        assert rows[name].status == "skipped", name
        assert "too short for a 20-step season" in rows[name].reason
    assert rows["seasonal-naive"].status == "ok" and rows["ridge"].status == "ok"
