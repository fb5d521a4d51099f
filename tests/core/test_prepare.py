"""Checks of app.core.prepare: putting one series on a regular grid, and refusing what cannot be.

The expected values are worked out by hand from the rules in the module notes (a missing point
stays missing; the filled series interpolates linearly between the neighbours of a gap; the
grid of the modal spacing); pandas'
``date_range`` provides the calendars.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from app.core.errors import SeriesProblem
from app.core.prepare import (
    MIN_POINTS,
    RECOMMENDED_POINTS,
    SHORT_GAP_MAX,
    frequency_words,
    has_time_of_day,
    moment,
    moment_in,
    prepare_series,
)

N = 40


def _daily(values=None, start="2021-03-01") -> pd.Series:
    index = pd.date_range(start, periods=N, freq="D")
    data = np.random.default_rng(7).normal(size=N) if values is None else values
    return pd.Series(data, index=index, name="shop-1")


def _lines(n: int) -> np.ndarray:
    return np.arange(2, 2 + n)  # file lines: the header is line 1


# --- duplicates -----------------------------------------------------------------------------

def test_duplicate_timestamp_error_names_timestamp_and_line():
    s = _daily(np.arange(N, dtype=float))
    index = s.index.tolist()
    index[10] = index[9]
    with pytest.raises(SeriesProblem) as info:
        prepare_series(pd.Series(s.to_numpy(), index=pd.DatetimeIndex(index)), "shop-1", lines=_lines(N))
    problem = info.value
    assert problem.flag == "duplicate_timestamp"
    assert problem.row == 12  # the second observation of 2021-03-10 is on file line 12
    assert "2021-03-10" in str(problem) and "shop-1" in str(problem) and "line 12" in str(problem)
    assert "combine the observations" in str(problem)


# --- gaps -----------------------------------------------------------------------------------

def test_short_gap_stays_missing_is_counted_and_filled_linearly_on_request():
    values = np.arange(N, dtype=float) ** 1.5
    holed = values.copy()
    holed[[5, 6, 20]] = np.nan
    prepared = prepare_series(_daily(holed), "shop-1")
    assert prepared.gaps_filled == 3 and prepared.long_gaps == 0 and prepared.observed == N - 3
    assert prepared.flags == ["gaps"]
    np.testing.assert_array_equal(prepared.values, holed)
    known = ~np.isnan(holed)
    expected = np.interp(np.arange(N), np.flatnonzero(known), holed[known])
    np.testing.assert_allclose(prepared.filled, expected, rtol=1e-12)


def test_run_of_short_gap_max_is_not_a_long_gap():
    holed = _daily().to_numpy().copy()
    holed[10: 10 + SHORT_GAP_MAX] = np.nan
    prepared = prepare_series(_daily(holed), "shop-1")
    assert (prepared.gaps_filled, prepared.long_gaps) == (SHORT_GAP_MAX, 0)
    assert "long_gap" not in prepared.flags


def test_long_gap_is_flagged():
    holed = _daily().to_numpy().copy()
    holed[10: 10 + SHORT_GAP_MAX + 1] = np.nan
    prepared = prepare_series(_daily(holed), "shop-1")
    assert (prepared.gaps_filled, prepared.long_gaps) == (SHORT_GAP_MAX + 1, 1)
    assert {"gaps", "long_gap"} <= set(prepared.flags)
    assert np.isnan(prepared.values[10: 10 + SHORT_GAP_MAX + 1]).all() and np.isfinite(prepared.filled).all()


def test_missing_values_at_the_ends_are_dropped():
    holed = _daily().to_numpy().copy()
    holed[:3] = np.nan
    holed[-2:] = np.nan
    prepared = prepare_series(_daily(holed), "shop-1")
    assert prepared.n == N - 5 and prepared.gaps_filled == 0
    assert prepared.index[0] == pd.Timestamp("2021-03-04")


def test_unsorted_observations_are_sorted():
    s = _daily()
    shuffled = s.iloc[np.random.default_rng(3).permutation(N)]
    prepared = prepare_series(shuffled, "shop-1")
    np.testing.assert_array_equal(prepared.values, s.to_numpy())
    assert prepared.index.equals(s.index)


# --- grids ----------------------------------------------------------------------------------

def test_off_grid_timestamp_error_names_timestamp_and_line():
    s = _daily()
    index = s.index.tolist()
    index[10] = index[10] + pd.Timedelta(hours=12)
    with pytest.raises(SeriesProblem) as info:
        prepare_series(pd.Series(s.to_numpy(), index=pd.DatetimeIndex(index)), "shop-1", lines=_lines(N))
    assert info.value.flag == "irregular"
    assert info.value.row == 12
    assert "timestamp 2021-03-11 12:00 is off the grid the other timestamps follow, sampled daily" in str(info.value)


def test_integer_steps_with_a_gap():
    index = pd.Index([i for i in range(1, N + 1) if i != 17])
    values = np.arange(1.0, N + 1)[index.to_numpy() - 1] * 2.0
    prepared = prepare_series(pd.Series(values, index=index), "sensor-3")
    assert prepared.freq == "step" and prepared.n == N
    assert prepared.gaps_filled == 1 and np.isnan(prepared.values[16]) and prepared.filled[16] == pytest.approx(34.0)


def test_integer_steps_of_five():
    prepared = prepare_series(pd.Series(np.random.default_rng(1).normal(size=N), index=pd.Index(np.arange(0, 5 * N, 5))), "s")
    assert prepared.freq == "5 steps" and prepared.n == N and prepared.gaps_filled == 0


def test_off_grid_integer_step_is_an_error():
    index = pd.Index(list(range(0, 310, 10)) + [305])
    with pytest.raises(SeriesProblem) as info:
        prepare_series(pd.Series(np.random.default_rng(0).normal(size=index.size), index=index), "sensor-3")
    assert info.value.flag == "irregular" and "305" in str(info.value)


def test_monthly_series_with_a_missing_month():
    index = pd.date_range("2019-01-01", periods=36, freq="MS").delete(5)
    values = 100 + np.arange(36.0)[np.r_[0:5, 6:36]] * 3
    prepared = prepare_series(pd.Series(values, index=index), "store-9")
    assert prepared.freq == "MS" and prepared.n == 36
    assert prepared.index[5] == pd.Timestamp("2019-06-01")
    assert prepared.gaps_filled == 1 and np.isnan(prepared.values[5]) and prepared.filled[5] == pytest.approx(115.0)


def test_yearly_series_over_three_centuries():
    # The yearly sunspot numbers from 1700 (statsmodels' sunspots dataset): a span longer than
    # the 292 years a pandas Timedelta holds in nanoseconds (the unit the file reader gives),
    # with one year missing.
    data = sm.datasets.sunspots.load_pandas().data
    index = pd.to_datetime(data["YEAR"].astype(int).astype(str), format="%Y").astype("datetime64[ns]")
    values = pd.Series(data["SUNACTIVITY"].to_numpy(), index=index).drop(pd.Timestamp("1800-01-01"))
    prepared = prepare_series(values, "sunspots")
    assert prepared.freq in ("YS", "YS-JAN") and prepared.n == data.shape[0] and prepared.gaps_filled == 1


def test_month_end_series_with_missing_months():
    index = pd.date_range("2019-01-31", periods=36, freq="ME").delete([7, 8])
    prepared = prepare_series(pd.Series(np.random.default_rng(2).normal(size=34), index=index), "store-9")
    assert prepared.freq == "ME" and prepared.n == 36 and prepared.gaps_filled == 2


@pytest.mark.xfail(
    strict=True,
    reason="a business-day series with one missing day is put on a calendar-day grid (modal spacing 1 day): "
    "every weekend becomes a filled gap, 23 invented values out of 82",
)
def test_business_day_series_with_a_missing_day_keeps_business_days():
    index = pd.bdate_range("2022-01-03", periods=60).delete(7)
    prepared = prepare_series(pd.Series(np.random.default_rng(2).normal(size=59), index=index), "desk-2")
    assert prepared.n == 60 and prepared.gaps_filled == 1


# --- values that cannot be used ---------------------------------------------------------------

def test_infinite_value_names_the_row():
    values = _daily().to_numpy().copy()
    values[4] = np.inf
    with pytest.raises(SeriesProblem) as info:
        prepare_series(_daily(values), "shop-1", lines=_lines(N))
    assert info.value.flag == "bad_value" and info.value.row == 6
    assert "not finite" in str(info.value) and "line 6" in str(info.value)


def test_constant_series_is_a_problem():
    with pytest.raises(SeriesProblem) as info:
        prepare_series(_daily(np.full(N, 4.2)), "shop-1")
    assert info.value.flag == "constant" and "4.2" in str(info.value)


def test_a_series_that_varies_too_little_to_model_is_not_called_constant():
    # Readings near 1e-20 that vary were refused as "constant (every value is 1e-20)" (a server
    # attack): below the absolute floor the engine is not trusted, but the words say what is wrong.
    values = 1e-20 * (1.0 + np.random.default_rng(3).random(N))
    with pytest.raises(SeriesProblem) as info:
        prepare_series(_daily(values), "probe-1")
    assert info.value.flag == "constant"
    assert "varies by only" in str(info.value) and "rescale it" in str(info.value) and "is constant" not in str(info.value)


def test_too_short_series_is_a_problem():
    s = _daily().iloc[: MIN_POINTS - 1]
    with pytest.raises(SeriesProblem) as info:
        prepare_series(s, "shop-1")
    assert info.value.flag == "too_short"
    assert f"has {MIN_POINTS - 1} observations" in str(info.value)


def test_filled_points_do_not_count_towards_the_minimum():
    values = _daily().to_numpy()[:20].copy()
    values[1:10] = np.nan  # 11 observed points, 9 of them filled in
    with pytest.raises(SeriesProblem) as info:
        prepare_series(pd.Series(values, index=_daily().index[:20]), "shop-1")
    assert info.value.flag == "too_short"


def test_short_but_usable_series_is_flagged():
    prepared = prepare_series(_daily().iloc[: RECOMMENDED_POINTS - 1], "shop-1")
    assert "too_short" in prepared.flags and prepared.n == RECOMMENDED_POINTS - 1


def test_all_missing_series_is_a_problem():
    with pytest.raises(SeriesProblem) as info:
        prepare_series(_daily(np.full(N, np.nan)), "shop-1")
    assert info.value.flag == "empty"


def test_a_moment_of_an_hourly_series_keeps_its_hour_at_midnight():
    hourly = pd.date_range("2024-04-10 22:00", periods=4, freq="h")
    assert [moment_in(hourly, k) for k in (1, 2)] == ["2024-04-10 23:00", "2024-04-11 00:00"]
    daily = pd.date_range("2024-04-10", periods=3, freq="D")
    assert moment_in(daily, 1) == "2024-04-11"
    assert moment_in(pd.RangeIndex(5), -1) == "4"


def test_a_date_reads_without_a_midnight_time_only_when_the_series_has_no_times_of_day():
    hourly = pd.date_range("2024-04-10 22:00", periods=4, freq="h")
    daily = pd.date_range("2024-04-10", periods=3, freq="D")
    stamped_at_nine = pd.date_range("2024-04-10 09:00", periods=3, freq="D")
    assert (has_time_of_day(hourly), has_time_of_day(daily), has_time_of_day(stamped_at_nine)) == (True, False, True)
    assert has_time_of_day(pd.RangeIndex(5)) is False
    midnight = pd.Timestamp("2024-04-11")
    assert (moment(midnight), moment(midnight, time_of_day=True)) == ("2024-04-11", "2024-04-11 00:00")
    assert moment(pd.Timestamp("2024-04-11 09:30:00")) == "2024-04-11 09:30"


# --- the sampling frequency in words --------------------------------------------------------

@pytest.mark.parametrize(("freq", "words"), [
    ("D", "daily"), ("h", "hourly"), ("15min", "every 15 minutes"), ("2D", "every 2 days"),
    ("B", "every business day"), ("W-SUN", "weekly (on Sundays)"), ("W-WED", "weekly (on Wednesdays)"),
    ("MS", "monthly"), ("ME", "monthly (month ends)"), ("BMS", "monthly (first business day of the month)"),
    ("QS-JAN", "quarterly"), ("QE-DEC", "quarterly (quarter ends)"),
    ("QS-FEB", "quarterly (quarters starting in February, May, August and November)"),
    ("YS-JAN", "yearly"), ("YS-APR", "yearly (years starting in April)"), ("YE-DEC", "yearly (year ends)"),
])
def test_the_frequency_prepare_infers_reads_in_plain_words(freq, words):
    # pandas' own calendar for each code lays out the timestamps; prepare_series infers the code back.
    index = pd.date_range("2021-01-01", periods=N, freq=freq)
    prepared = prepare_series(pd.Series(np.random.default_rng(3).normal(size=N), index=index), "s")
    assert prepared.frequency_words == words


def test_integer_steps_and_codes_pandas_does_not_read_in_words():
    assert (frequency_words("step"), frequency_words("5 steps")) == ("every step", "every 5 steps")
    assert frequency_words("90min") == "every 90 minutes"
    assert frequency_words("not-a-code") == "at pandas frequency not-a-code"


def test_the_grid_messages_name_the_frequency_in_words_and_dates_without_a_midnight_time():
    months = pd.date_range("2018-01-01", periods=30, freq="MS").append(pd.DatetimeIndex(["2020-07-15"]))
    with pytest.raises(SeriesProblem) as off:
        prepare_series(pd.Series(np.arange(31.0), index=months), "m")
    assert "timestamp 2020-07-15 is off the grid the other timestamps follow, sampled monthly: the spacing is irregular" in str(off.value)
    weeks = pd.date_range("2018-01-07", periods=40, freq="W-SUN")
    with pytest.raises(SeriesProblem) as sparse:
        prepare_series(pd.Series(np.arange(13.0), index=weeks[:3].append(weeks[30:])), "w")
    assert sparse.value.flag == "mostly_gaps"
    assert "on a grid of 40 points, sampled weekly (on Sundays): most of the grid" in str(sparse.value)
    for problem in (off.value, sparse.value):
        assert not any(code in str(problem) for code in ("00:00", "MS", "W-SUN")), problem


def test_an_off_grid_time_of_an_hourly_series_keeps_its_time():
    hours = pd.date_range("2018-01-01", periods=40, freq="h").append(pd.DatetimeIndex(["2018-01-03 00:30"]))
    with pytest.raises(SeriesProblem) as off:
        prepare_series(pd.Series(np.arange(41.0), index=hours), "h")
    assert "timestamp 2018-01-03 00:30 is off the grid the other timestamps follow, sampled hourly" in str(off.value)
