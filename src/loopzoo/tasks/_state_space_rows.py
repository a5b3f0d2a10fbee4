"""Exponential smoothing and seasonal ARIMA rows for a recorded series (statsforecast).

Both follow Hyndman & Khandakar, "Automatic Time Series Forecasting: the forecast Package for R",
JSS 27(3), 2008, as statsforecast mirrors it: ``AutoETS`` picks the error / trend / damping /
season form by AICc (Hyndman, Koehler, Snyder & Grose, IJF 18, 2002), ``AutoARIMA`` the orders
by a stepwise AICc search, here bounded (``ARIMA_BOUNDS``) to keep the fit cheap.

Every target column is modelled on its own (univariate; feature columns are not used), fitted
on the training part only. The fitted parameters are then kept and the model is run forward
(``forward``: the same parameters filtered through a longer history, no refitting) through
every value up to each test forecast origin, the last step of a topology's window; its forecasts
at the task's horizons are scored like any prediction, in data units.

Seasons longer than ``LONGEST_SEASON`` steps (weekly data with a yearly cycle): statsforecast's
ETS, like R's, allows at most 24 seasonal states, and a seasonal ARIMA of period 52 took minutes
to select. Such a series is first seasonally adjusted: STL (statsmodels; Cleveland et al.,
Journal of Official Statistics 6, 1990) on the training part gives the seasonal component, whose
last period is repeated beyond it; the models are fitted without a season on the adjusted series
and the seasonal component is added back to their forecasts (the decomposition forecast of
Hyndman & Athanasopoulos, "Forecasting: Principles and Practice", 2nd ed., section 6.8).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable
from typing import Any

import numpy as np

from loopzoo.tasks._rows import ComparisonRow, Stopwatch, skipped

__all__ = ["ARIMA_BOUNDS", "LONGEST_SEASON", "SeriesHistory", "arima_row", "ets_row"]

LONGEST_SEASON = 24
# The search bound: at most 3 AR and 3 MA terms, one seasonal AR and MA term, stepwise
# (Hyndman & Khandakar's defaults are 5, 5, 2, 2).
ARIMA_BOUNDS = {"max_p": 3, "max_q": 3, "max_P": 1, "max_Q": 1, "max_order": 5}


@dataclasses.dataclass(frozen=True)
class SeriesHistory:
    """What the rows need from a series task.

    values: (L, targets) the target columns in data units (filled gaps as the topologies see
    them); names: their column names; train_end: rows [0, train_end) train; origins: (N,) the
    last observed row of each test sample; horizons; season (1: none); score: (N, targets x
    horizons) forecasts in data units (per column, each horizon) -> the task's test metrics.
    """

    values: np.ndarray
    names: tuple[str, ...]
    train_end: int
    origins: np.ndarray
    horizons: tuple[int, ...]
    season: int
    score: Callable[[np.ndarray], dict[str, float]]


def _problem(history: SeriesHistory) -> str | None:
    """Why the series cannot support these rows (None: it can)."""
    m, rows = history.season, history.train_end
    for name, column in zip(history.names, history.values[:rows].T, strict=True):
        if np.ptp(column) == 0:
            return f"the training part of column {name!r} is constant"
    if m > 1 and rows < 2 * m:
        return (f"series too short for a {m}-step season (the training part has {rows} rows; "
                f"at least two seasons, {2 * m}, are needed)")
    return None


def _adjustment(column: np.ndarray, train_end: int, m: int) -> np.ndarray:
    """Seasonal component over the whole series: STL on the training part, its last period
    repeated after it."""
    from statsmodels.tsa.seasonal import STL

    seasonal = STL(column[:train_end], period=m, robust=True).fit().seasonal
    ahead = np.arange(len(column) - train_end)
    return np.concatenate([seasonal, seasonal[-m:][ahead % m]])


def _row(history: SeriesHistory, build: Callable[[int], Any], label: str,
         describe: Callable[[Any], dict[str, Any]]) -> ComparisonRow:
    """Fit ``build(season)`` per target column on the training part, run it forward to every
    origin and score its forecasts; ``describe(fitted)`` says what was chosen."""
    problem = _problem(history)
    if problem is not None:
        return skipped(problem, seed_dependent=False)
    m, steps = history.season, max(history.horizons)
    long_season = m > LONGEST_SEASON
    watch = Stopwatch()
    forecasts, chosen = [], {}
    with watch.running():
        for name, column in zip(history.names, history.values.T, strict=True):
            seasonal = (_adjustment(column, history.train_end, m) if long_season
                        else np.zeros(len(column)))
            adjusted = column - seasonal
            model = build(1 if long_season else m).fit(adjusted[: history.train_end])
            chosen[name] = describe(model)
            ahead = np.stack([model.forward(y=adjusted[: origin + 1], h=steps)["mean"]
                              for origin in history.origins])  # (N, steps)
            forecasts += [ahead[:, h - 1] + seasonal[history.origins + h]
                          for h in history.horizons]
    details = {label: chosen if len(chosen) > 1 else chosen[history.names[0]],
               "season": m if m > 1 else None,
               "seasonal_adjustment": (f"STL on the training part, period {m}, last period "
                                       "repeated" if long_season else None),
               "history": "every value up to the forecast origin; parameters fixed from the "
                          "training fit", "chosen_on": "AICc on the training part"}
    return ComparisonRow(history.score(np.stack(forecasts, axis=-1)), details=details,
                         fit_seconds=watch.seconds, seed_dependent=False)


def ets_row(history: SeriesHistory) -> ComparisonRow:
    """statsforecast ``AutoETS`` (every error / trend / damping / season form, AICc)."""
    from statsforecast.models import AutoETS

    def describe(model: Any) -> dict[str, Any]:
        fit = model.model_
        return {"form": fit["components"],
                "alpha_beta_gamma_phi": [float(v) if np.isfinite(v) else None
                                         for v in fit["par"][:4]],
                "aicc": float(fit["aicc"])}

    return _row(history, lambda m: AutoETS(season_length=m), "ets", describe)


def arima_row(history: SeriesHistory) -> ComparisonRow:
    """statsforecast ``AutoARIMA``, stepwise within ``ARIMA_BOUNDS``."""
    from statsforecast.models import AutoARIMA

    def describe(model: Any) -> dict[str, Any]:
        p, q, big_p, big_q, m, d, big_d = (int(v) for v in model.model_["arma"])
        return {"order": [p, d, q], "seasonal_order": [big_p, big_d, big_q, m],
                "coefficients": {k: float(v) for k, v in model.model_["coef"].items()},
                "aicc": float(model.model_["aicc"]), "search_bounds": dict(ARIMA_BOUNDS)}

    return _row(history, lambda m: AutoARIMA(season_length=m, **ARIMA_BOUNDS), "arima",
                describe)
