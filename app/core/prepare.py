"""Putting one series on a regular grid, ready for identification.

Rules:

* observations are sorted by time; two observations with the same timestamp are an error
  naming the timestamp, unless the caller chose an aggregation (``mean``, ``sum``, ``last``);
* the sampling frequency is inferred from the timestamps (the most common spacing when some
  are missing); timestamps off that grid are an error naming the first one. Messages and pages
  name the frequency in words (:func:`frequency_words`: "monthly", not ``MS``) and a time stamp
  as a reader writes it (:func:`moment`, :func:`moment_in`: the date alone for data without
  times of day);
* missing points on the grid stay missing (NaN in :attr:`PreparedSeries.values`) and are
  counted and flagged ``gaps``; runs longer than :data:`SHORT_GAP_MAX` points are also
  flagged ``long_gap`` (a long gap keeps a suggestion from being ``firm``). The likelihood,
  the fits and their residuals, the correlograms (pairs present), the Ljung-Box test and the
  forecast check use the observed points only. Methods that need a complete series get it
  filled by linear interpolation (:attr:`PreparedSeries.filled`, :func:`interpolate_gaps`):
  the KPSS and ADF tests of the differencing, STL's seasonal strength, the Canova-Hansen test
  and Guerrero's lambda of the transform, and the start values of the optimiser;
* missing values at the start or end are dropped;
* infinite values, and values beyond :data:`MAX_ABS_VALUE` in size (their squares overflow), are
  an error naming the first;
* a series whose grid would hold more than :data:`MAX_POINTS` points is refused before the grid
  is built;
* a series with fewer than :data:`MIN_POINTS` points, with fewer observed points than
  :data:`MIN_OBSERVED_SHARE` of its grid, or whose values are all equal, cannot be
  identified and is reported as a :class:`~app.core.errors.SeriesProblem`; one with fewer
  than :data:`RECOMMENDED_POINTS` is analysed but flagged ``too_short`` (Box & Jenkins ask for
  at least about 50 observations; 30 is the floor in common practice).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from app.core.errors import SeriesProblem
from app.core.vocabulary import Flag

SHORT_GAP_MAX = 3
MIN_POINTS = 12
RECOMMENDED_POINTS = 30
# Common practice: with more missing points than observed ones, the correlograms rest on few
# pairs and the tests that need a complete series describe the interpolation rather than the data.
MIN_OBSERVED_SHARE = 0.5
# Identification time and memory grow with the length (a 10^5-point series takes minutes and
# about 3 GB); longer grids are refused before they are built.
MAX_POINTS = 100_000
# Squares of values up to 1e100 stay far below the largest double (about 1.8e308) even summed
# over billions of points; no measured quantity comes near it.
MAX_ABS_VALUE = 1e100
INTEGER_FREQ = "step"


@dataclass
class PreparedSeries:
    """A series on a regular grid with what was done to get it there.

    ``values`` holds NaN at the grid points with no observation; ``gaps_filled`` counts them
    (the name is kept from when they were filled) and ``long_gaps`` counts their runs longer
    than :data:`SHORT_GAP_MAX`. ``n`` is the length of the grid, ``observed`` the points with a
    value.
    """

    series_id: str
    values: np.ndarray
    index: pd.Index
    freq: str
    gaps_filled: int = 0
    long_gaps: int = 0
    flags: list[str] = field(default_factory=list)

    @property
    def n(self) -> int:
        return int(self.values.size)

    @property
    def observed(self) -> int:
        return int(np.count_nonzero(~np.isnan(self.values)))

    @property
    def frequency_words(self) -> str:
        """The sampling frequency in plain words (:func:`frequency_words`)."""
        return frequency_words(self.freq)

    @property
    def filled(self) -> np.ndarray:
        """The values with the missing points filled by linear interpolation, for the methods
        that need a complete series (module notes)."""
        return interpolate_gaps(self.values)

    def to_series(self) -> pd.Series:
        return pd.Series(self.values, index=self.index, name=self.series_id)

    def recent(self, points: int) -> tuple[PreparedSeries, int]:
        """The last ``points`` of the grid, starting at an observed point, and where that
        stretch starts in this series (its gaps and their flags counted again)."""
        start = max(0, self.n - points)
        start += int(np.argmax(~np.isnan(self.values[start:])))
        stretch = _on_grid(self.series_id, self.values[start:], self.index[start:], self.freq)
        stretch.flags += [f for f in self.flags if f not in (Flag.GAPS, Flag.LONG_GAP)]
        return stretch, start


def prepare_series(
    series: pd.Series,
    series_id: str | None = None,
    lines: np.ndarray | None = None,
) -> PreparedSeries:
    """Sort, regularise, fill and check one series.

    Parameters
    ----------
    series : pandas.Series
        Values indexed by timestamps (datetime) or integer steps; NaN marks a missing value.
    series_id : str, optional
        Name used in messages; defaults to ``series.name``.
    lines : numpy.ndarray, optional
        The file line of each observation, so errors can name it.

    Raises
    ------
    SeriesProblem
        Duplicate or off-grid timestamps, non-finite values, too few points, constant values.
    """
    sid = str(series_id if series_id is not None else series.name)
    values = pd.Series(np.asarray(series.to_numpy(), dtype=float), index=series.index)
    line_of = pd.Series(lines if lines is not None else np.full(len(values), -1), index=series.index)
    _reject_unusable_values(values, line_of, sid)
    order = np.argsort(values.index.to_numpy(), kind="stable")
    values, line_of = values.iloc[order], line_of.iloc[order]
    _reject_duplicates(values, line_of, sid)
    values = values.loc[values.first_valid_index(): values.last_valid_index()] if values.notna().any() else values.iloc[:0]
    if values.size == 0:
        raise SeriesProblem(sid, "has no values", flag="empty")
    freq, grid = _regular_grid(values.index, sid, line_of)
    prepared = _on_grid(sid, values.reindex(grid).to_numpy(dtype=float), grid, freq)
    observed = prepared.observed
    if observed < MIN_POINTS:
        raise SeriesProblem(
            sid, f"has {observed} observation{'' if observed == 1 else 's'}; at least {MIN_POINTS} are needed to identify a model",
            flag="too_short",
        )
    if observed < MIN_OBSERVED_SHARE * prepared.n:
        raise SeriesProblem(
            sid, f"has {observed} observations on a grid of {prepared.n} points, sampled {frequency_words(freq)}: "
            "most of the grid would be gaps (do the timestamps mix two frequencies?)", flag="mostly_gaps",
        )
    present = prepared.values[~np.isnan(prepared.values)]
    spread = float(np.ptp(present))
    if spread <= 1e-12 * max(1.0, float(np.abs(present).max())):
        if spread == 0.0:
            raise SeriesProblem(sid, f"is constant (every value is {present[0]:g}); there is nothing to model", flag="constant")
        raise SeriesProblem(sid, f"varies by only {spread:g} (values near {present[0]:g}), too little to model in these units; "
                                 "rescale it (say, to smaller units) and import it again", flag="constant")
    if observed < RECOMMENDED_POINTS:
        prepared.flags.append(Flag.TOO_SHORT)
    return prepared


def _on_grid(series_id: str, values: np.ndarray, index: pd.Index, freq: str) -> PreparedSeries:
    """``values`` on their grid ``index`` (NaN where missing), with their gaps counted and flagged."""
    missing = np.isnan(values)
    prepared = PreparedSeries(series_id, values, index, freq, gaps_filled=int(missing.sum()),
                              long_gaps=sum(1 for r in _missing_runs(missing) if r > SHORT_GAP_MAX))
    if prepared.gaps_filled:
        prepared.flags.append(Flag.GAPS)
    if prepared.long_gaps:
        prepared.flags.append(Flag.LONG_GAP)
    return prepared


def interpolate_gaps(x: np.ndarray) -> np.ndarray:
    """``x`` with its missing points (NaN) filled by linear interpolation between the nearest
    observed neighbours, and beyond the first or last observed point by that point's value.

    Only for the methods that need a complete series (module notes); ``x`` itself (not a copy)
    when nothing is missing. Raises ``ValueError`` when nothing is observed.
    """
    values = np.asarray(x, dtype=float)
    missing = np.isnan(values)
    if not missing.any():
        return values
    if missing.all():
        raise ValueError("every value is missing: nothing to interpolate from")
    t = np.arange(values.size)
    return np.interp(t, t[~missing], values[~missing])


def _reject_unusable_values(values: pd.Series, line_of: pd.Series, sid: str) -> None:
    """Infinite values, and values so large that their squares (in variances, sums of squares
    and likelihoods) would overflow, are refused, naming the first."""
    size = np.abs(values.to_numpy())
    bad = np.isinf(size) | (size > MAX_ABS_VALUE)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        line = int(line_of.iloc[i])
        why = "is not finite" if np.isinf(size[i]) else (
            f"is too large to analyse (beyond ±{MAX_ABS_VALUE:g} squares overflow); rescale the series"
        )
        raise SeriesProblem(sid, f"value {values.iloc[i]:g} at {moment_in(values.index, i)} {why}",
                            row=line if line > 0 else None, flag="bad_value")


def moment(stamp: object, time_of_day: bool = False) -> str:
    """A time stamp as a reader writes it: the date alone at midnight, else date and time to the
    minute; with ``time_of_day`` (a series that has times of day), the time even at midnight.
    Steps as they are."""
    if isinstance(stamp, pd.Timestamp):
        if stamp == stamp.normalize() and not time_of_day:
            return str(stamp.date())
        return stamp.isoformat(sep=" ", timespec="minutes")
    return str(stamp)


def has_time_of_day(index: pd.Index) -> bool:
    """Whether a series' time stamps have times of day: some stamp is not at midnight (data
    finer than daily, such as hourly or every 15 minutes, or daily data stamped at an hour).
    A daily, weekly, monthly ... series at midnight has none, and its stamps read as dates."""
    return isinstance(index, pd.DatetimeIndex) and bool((index != index.normalize()).any())


def moment_in(index: pd.Index, position: int) -> str:
    """The time stamp at ``position`` of ``index`` in words (:func:`moment`): with its time of
    day, midnight included, when the series has times of day (:func:`has_time_of_day`), else
    the date alone."""
    return moment(index[position], has_time_of_day(index))


def _reject_duplicates(values: pd.Series, line_of: pd.Series, sid: str) -> None:
    duplicated = values.index.duplicated(keep="first")
    if duplicated.any():
        i = int(np.flatnonzero(duplicated)[0])
        line = int(line_of.iloc[i])
        first = int(line_of.iloc[int(np.flatnonzero(values.index == values.index[i])[0])])
        earlier = f" (first at line {first})" if first > 0 and line > 0 else ""
        raise SeriesProblem(
            sid, f"timestamp {moment_in(values.index, i)} appears more than once{earlier}; combine the observations of a "
            "timestamp, e.g. their sum or mean, before importing",
            row=line if line > 0 else None, flag="duplicate_timestamp",
        )


def _regular_grid(index: pd.Index, sid: str, line_of: pd.Series) -> tuple[str, pd.Index]:
    if len(index) == 1:
        return (INTEGER_FREQ if not isinstance(index, pd.DatetimeIndex) else "D"), index
    if not isinstance(index, pd.DatetimeIndex):
        steps = pd.Series(np.diff(index.to_numpy().astype(np.int64)))
        step = int(steps.mode().min())
        freq = INTEGER_FREQ if step == 1 else f"{step} steps"
        _check_grid_size((int(index[-1]) - int(index[0])) // step + 1, freq, sid)
        grid = pd.Index(np.arange(index[0], index[-1] + 1, step), name=index.name)
    else:
        freq = _inferred_frequency(index) or _modal_frequency(index)
        offset = pd.tseries.frequencies.to_offset(freq)
        # Calendar offsets (months, business days) are never shorter than the closest pair.
        step = pd.Timedelta(offset) if isinstance(offset, pd.offsets.Tick) else pd.Timedelta(np.diff(index.values).min())
        # In Python integers of nanoseconds: as a pandas Timedelta a span of more than 292 years
        # (yearly data from the 1700s) overflows.
        _check_grid_size((int(index[-1].value) - int(index[0].value)) // int(step.value) + 1, freq, sid)
        grid = pd.date_range(index[0], index[-1], freq=freq, name=index.name)
    off = ~index.isin(grid)
    if off.any():
        i = int(np.flatnonzero(off)[0])
        line = int(line_of.loc[index[i]].iloc[0] if isinstance(line_of.loc[index[i]], pd.Series) else line_of.loc[index[i]])
        raise SeriesProblem(
            sid, f"timestamp {moment_in(index, i)} is off the grid the other timestamps follow, sampled "
            f"{frequency_words(freq)}: the spacing is irregular",
            row=line if line > 0 else None, flag="irregular",
        )
    return freq, grid


def _check_grid_size(points: int, freq: str, sid: str) -> None:
    """Refuse a grid too large to identify, before it is built (a few stray timestamps far
    apart at a fine spacing would otherwise ask for billions of points)."""
    if points > MAX_POINTS:
        raise SeriesProblem(
            sid, f"would need {points:,} points on its grid, sampled {frequency_words(freq)}; at most {MAX_POINTS:,} can be identified "
            "(aggregate to a coarser frequency or keep a recent window)", flag="too_long",
        )


def _inferred_frequency(index: pd.DatetimeIndex) -> str | None:
    """pandas' inferred frequency as a string (pandas 3 is moving from strings to offsets)."""
    if len(index) < 3:
        return None
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message=".*infer_freq")
        freq = pd.infer_freq(index)
    return freq if freq is None or isinstance(freq, str) else freq.freqstr


def _modal_frequency(index: pd.DatetimeIndex) -> str:
    deltas = pd.Series(pd.TimedeltaIndex(np.diff(index.values))).value_counts()
    modal = pd.Timedelta(deltas.index[0])
    days = modal / pd.Timedelta(days=1)
    # Month, quarter and year grids anchor on the first day or the last, whichever most
    # timestamps fall on, so one stray date is reported rather than the whole grid shifted.
    starts = bool((index.day == 1).sum() >= index.is_month_end.sum())
    if 28 <= days <= 31:
        return "MS" if starts else "ME"
    if 89 <= days <= 92:
        return "QS" if starts else "QE"
    if 365 <= days <= 366:
        return "YS" if starts else "YE"
    if days == 7:
        return f"W-{index[0].day_name()[:3].upper()}"
    if days == int(days):
        return "D" if days == 1 else f"{int(days)}D"
    return pd.tseries.frequencies.to_offset(modal).freqstr


# The pandas offsets of a month, a quarter and a year (their starts and ends, business or not);
# app.core.seasonality reads its default periods by them.
MONTH_OFFSETS = (pd.offsets.MonthBegin, pd.offsets.MonthEnd, pd.offsets.BusinessMonthBegin, pd.offsets.BusinessMonthEnd)
QUARTER_OFFSETS = (pd.offsets.QuarterBegin, pd.offsets.QuarterEnd, pd.offsets.BQuarterBegin, pd.offsets.BQuarterEnd)
YEAR_OFFSETS = (pd.offsets.YearBegin, pd.offsets.YearEnd, pd.offsets.BYearBegin, pd.offsets.BYearEnd)
# The words of a sampling frequency (:func:`frequency_words`): the unit of one step of each kind
# of offset and the word for a single step; multiples read "every 2 <unit>s".
_STEP_WORDS: tuple[tuple[tuple[type[pd.offsets.BaseOffset], ...], str, str], ...] = (
    ((pd.offsets.Day,), "day", "daily"),
    ((pd.offsets.BusinessDay,), "business day", "every business day"),
    ((pd.offsets.Week,), "week", "weekly"),
    (MONTH_OFFSETS, "month", "monthly"),
    (QUARTER_OFFSETS, "quarter", "quarterly"),
    (YEAR_OFFSETS, "year", "yearly"),
)
_TICK_WORDS = (
    (pd.Timedelta(hours=1), "hour", "hourly"),
    (pd.Timedelta(minutes=1), "minute", "every minute"),
    (pd.Timedelta(seconds=1), "second", "every second"),
    (pd.Timedelta(milliseconds=1), "millisecond", "every millisecond"),
    (pd.Timedelta(microseconds=1), "microsecond", "every microsecond"),
    (pd.Timedelta(nanoseconds=1), "nanosecond", "every nanosecond"),
)
_STARTS = (pd.offsets.MonthBegin, pd.offsets.BusinessMonthBegin, pd.offsets.QuarterBegin, pd.offsets.BQuarterBegin,
           pd.offsets.YearBegin, pd.offsets.BYearBegin)
_BUSINESS = (pd.offsets.BusinessMonthBegin, pd.offsets.BusinessMonthEnd, pd.offsets.BQuarterBegin,
             pd.offsets.BQuarterEnd, pd.offsets.BYearBegin, pd.offsets.BYearEnd)
# English names whatever the locale: 2024-01-01 was a Monday.
_WEEKDAYS = tuple(pd.date_range("2024-01-01", periods=7, freq="D").day_name())
_MONTHS = tuple(pd.date_range("2024-01-01", periods=12, freq="MS").month_name())


def frequency_words(freq: str, anchored: bool = True) -> str:
    """A sampling frequency as :func:`prepare_series` reports it (a pandas offset alias,
    ``"step"`` or ``"N steps"``) in plain words, for every message and page that names it:
    ``MS`` -> "monthly", ``W-SUN`` -> "weekly (on Sundays)", ``15min`` -> "every 15
    minutes", ``ME`` -> "monthly (month ends)", ``"3 steps"`` -> "every 3 steps"; without
    ``anchored`` (a narrow list column) the words in brackets are left out. The words read
    after "sampled". A code this pandas does not read (an alias of an older pandas) is named as
    a pandas frequency."""
    if freq == INTEGER_FREQ:
        return "every step"
    if freq.endswith(" steps"):
        return f"every {freq}"
    try:
        offset = pd.tseries.frequencies.to_offset(freq)
    except ValueError:
        return f"at pandas frequency {freq}"
    for kinds, unit, single in _STEP_WORDS:
        if isinstance(offset, kinds):
            steps = single if offset.n == 1 else f"every {offset.n} {unit}s"
            anchor = _anchor_words(offset) if anchored else ""
            return f"{steps} ({anchor})" if anchor else steps
    if isinstance(offset, pd.offsets.Tick):
        step = pd.Timedelta(offset)
        for size, unit, single in _TICK_WORDS:
            if step % size == pd.Timedelta(0):
                count = step // size
                return single if count == 1 else f"every {count} {unit}s"
    return f"at pandas frequency {freq}"


def _anchor_words(offset: pd.offsets.BaseOffset) -> str:
    """Where the steps of a calendar ``offset`` fall when that is not the plain calendar's
    (on Sundays, month ends, quarters starting in February ...); empty for days and for
    month, quarter and year starts."""
    if isinstance(offset, pd.offsets.Week):
        # The stamps' weekday only: a week stamped on a Monday may be one that starts there (an
        # ISO week, read as its Monday) or one that ends there.
        return f"on {_WEEKDAYS[offset.weekday]}s" if offset.weekday is not None else ""
    start = isinstance(offset, _STARTS)
    if isinstance(offset, QUARTER_OFFSETS):
        unit, months = "quarter", sorted((offset.startingMonth - 1 + 3 * k) % 12 + 1 for k in range(4))
    elif isinstance(offset, YEAR_OFFSETS):
        unit, months = "year", [offset.month]
    elif isinstance(offset, MONTH_OFFSETS):
        unit, months = "month", []
    else:
        return ""
    # Calendar quarters and years start in January and end in December.
    calendar = not months or (months[0] == 1 if start else months[-1] == 12)
    named = [_MONTHS[m - 1] for m in months]
    span = f"the {unit}" if calendar else (
        f"{unit}s {'starting' if start else 'ending'} in " + (f"{', '.join(named[:-1])} and " if len(named) > 1 else "") + named[-1]
    )
    if isinstance(offset, _BUSINESS):
        return f"{'first' if start else 'last'} business day of {span}"
    if calendar:
        return "" if start else f"{unit} ends"
    return span


def _missing_runs(missing: np.ndarray) -> list[int]:
    runs, current = [], 0
    for is_missing in missing:
        if is_missing:
            current += 1
        elif current:
            runs.append(current)
            current = 0
    if current:
        runs.append(current)
    return runs
