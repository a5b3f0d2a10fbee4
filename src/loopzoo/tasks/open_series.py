"""Forecasting tasks on records that statsmodels ships (loaded offline, imported lazily)."""

from __future__ import annotations

import dataclasses

import numpy as np

from loopzoo.tasks._catalog import TASKS
from loopzoo.tasks._series import SeriesData, SeriesOptions, SeriesTask

__all__ = ["Co2Task", "ElNinoTask", "SunspotsTask"]


@dataclasses.dataclass(frozen=True)
class SunspotsOptions(SeriesOptions):
    window: int = 20  # years of context; about two solar cycles (roughly 11 years each)


@TASKS.register("sunspots")
class SunspotsTask(SeriesTask):
    """Yearly sunspot activity 1700-2008 (statsmodels ``sunspots``, 309 values), next year(s).

    Parts by time: the first 70 % of the years train, then 15 % val, then 15 % test. No fixed
    season by default (the solar cycle varies in length); set ``season`` for seasonal-naive.

    Example:
        >>> task = loopzoo.tasks.create("sunspots", window=30, horizons=[1, 2])
    """

    name = "sunspots"
    Options = SunspotsOptions

    def _load(self) -> SeriesData:
        from statsmodels.datasets import sunspots

        frame = sunspots.load_pandas().data
        values = frame["SUNACTIVITY"].to_numpy(dtype=np.float64)[:, None]
        years = frame["YEAR"].to_numpy()
        return SeriesData(source="statsmodels sunspots", values=values, columns=("SUNACTIVITY",),
                          targets=(0,), imputed=np.zeros(len(values), dtype=bool),
                          facts={"first_year": int(years[0]), "last_year": int(years[-1])},
                          times=tuple(int(year) for year in years))


@dataclasses.dataclass(frozen=True)
class Co2Options(SeriesOptions):
    window: int = 60  # weeks of context, a little over one seasonal cycle
    season: int | None = 52  # weeks per year (the seasonal CO2 cycle), approximately
    differences: bool = True  # the upward trend carries val/test above the training range


@TASKS.register("co2")
class Co2Task(SeriesTask):
    """Weekly Mauna Loa CO2 in ppm, 1958-03-29 to 2001-12-29 (statsmodels ``co2``, 2,284 weeks).

    The 59 missing weeks are filled by linear interpolation between the neighbouring observed
    weeks so that windows stay regular; filled weeks may appear as inputs but a sample whose
    forecast week is filled is left out, so no filled value is ever scored. ``describe()``
    reports how many weeks were filled and, per part, how many forecasts were left out.

    The series rises from about 315 to 370 ppm, so the validation and test weeks lie above
    every training week; by default the model therefore reads and forecasts weekly changes
    (``differences=True``; errors are still reported in ppm). On standardised levels a GRU scored
    far worse than persistence in a first measurement (test MSE 23.6 against 0.25 ppm^2;
    0.15 with differences; `loopzoo train model=gru task=co2 trainer.max_steps=300`, 2026-12-01).

    Example:
        >>> loopzoo.tasks.create("co2").describe()["missing_weeks_filled"]   # 59
    """

    name = "co2"
    Options = Co2Options

    def _load(self) -> SeriesData:
        from statsmodels.datasets import co2

        frame = co2.load_pandas().data
        raw = frame["co2"].to_numpy(dtype=np.float64)
        missing = np.isnan(raw)
        steps = np.arange(len(raw))
        filled = raw.copy()
        filled[missing] = np.interp(steps[missing], steps[~missing], raw[~missing])
        return SeriesData(
            source="statsmodels co2", values=filled[:, None], columns=("co2",), targets=(0,),
            imputed=missing,
            facts={"first_week": str(frame.index[0].date()),
                   "last_week": str(frame.index[-1].date()),
                   "missing_weeks_filled": int(missing.sum()),
                   "fill_method": "linear interpolation between neighbouring observed weeks"},
            times=tuple(str(day.date()) for day in frame.index))


@dataclasses.dataclass(frozen=True)
class ElNinoOptions(SeriesOptions):
    window: int = 24  # months of context
    season: int | None = 12  # months per year


@TASKS.register("elnino")
class ElNinoTask(SeriesTask):
    """Monthly sea surface temperature (deg C), 1950-2010 (statsmodels ``elnino``, 732 months).

    Parts by time as for sunspots; seasonal-naive uses the same month a year earlier.

    Example:
        >>> task = loopzoo.tasks.create("elnino", window=36, horizons=[1, 6])
    """

    name = "elnino"
    Options = ElNinoOptions

    def _load(self) -> SeriesData:
        from statsmodels.datasets import elnino

        frame = elnino.load_pandas().data
        months = frame.drop(columns="YEAR").to_numpy(dtype=np.float64)  # (years, 12)
        values = months.reshape(-1, 1)  # year by year, January to December
        return SeriesData(source="statsmodels elnino", values=values, columns=("temperature",),
                          targets=(0,), imputed=np.zeros(len(values), dtype=bool),
                          facts={"first_year": int(frame["YEAR"].iloc[0]),
                                 "last_year": int(frame["YEAR"].iloc[-1])},
                          times=tuple(f"{int(year)}-{month:02d}" for year in frame["YEAR"]
                                      for month in range(1, 13)))
