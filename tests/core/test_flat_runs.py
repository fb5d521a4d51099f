"""Runs of one repeated value (app.core.flat_runs): the run found where it lies, judged against
the series' own rate of repeats with the Bonferroni bound (Dunn 1961), and named by the engine."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from app.core.flat_runs import FAMILY_LEVEL, longest_flat_run
from app.core.identify import identify_series
from app.core.vocabulary import Confidence, Flag

HOURS = pd.date_range("2024-03-01", periods=400, freq="h")


def _temperatures(seed: int = 3) -> np.ndarray:
    rng = np.random.default_rng(seed)
    x = np.zeros(400)
    for t in range(1, 400):
        x[t] = 0.7 * x[t - 1] + rng.normal()
    return 60.0 + 3.0 * np.sin(2 * np.pi * np.arange(400) / 24) + x


def test_a_stuck_stretch_of_a_continuous_reading_is_found_where_it_lies():
    y = _temperatures()
    y[150:222] = y[149]  # 73 equal points: the sensor stopped at 149
    found = longest_flat_run(y, HOURS)
    assert found is not None and (found.start, found.end, found.length) == (149, 221, 73)
    assert (found.first, found.last) == ("2024-03-07 05:00", "2024-03-10 05:00")
    assert found.repeat_rate == 0.0 and "safety monitoring" in found.words()


def test_the_bound_follows_the_series_own_rate_of_repeats():
    # Readings rounded to whole degrees repeat often: with p the larger of the share of equal
    # neighbours and the share of points at the run's value (each by Laplace's rule), a run of L
    # points is flagged when n p^(L-1) < 0.05, so a run that passes for rounded data is short of
    # the bound and one long enough is not.
    y = np.round(_temperatures(5))
    pairs = y[1:] == y[:-1]
    rate = max((pairs.sum() + 1) / (pairs.size + 2), (np.sum(y == y[199]) + 1) / (y.size + 2))
    needed = int(np.ceil(1 + np.log(FAMILY_LEVEL / y.size) / np.log(rate)))
    assert longest_flat_run(y, HOURS) is None  # the data's own runs are within the bound
    short, long = y.copy(), y.copy()
    short[200:200 + needed - 2] = y[199]
    long[200:200 + needed + 1] = y[199]
    assert longest_flat_run(short, HOURS) is None
    assert longest_flat_run(long, HOURS) is not None


def test_a_gap_ends_a_run_and_zeros_of_demand_are_no_run():
    y = _temperatures()
    y[100:104] = y[99]
    y[104] = np.nan
    y[105:108] = y[99]
    assert longest_flat_run(y, HOURS).length == 5
    sales = np.where(np.random.default_rng(2).random(400) < 0.3, 4.0, 0.0)
    sales[50:80] = 0.0
    assert longest_flat_run(sales, HOURS, demand=True) is None
    assert longest_flat_run(sales, HOURS).value == 0.0


def test_chance_runs_of_equal_demands_are_not_flagged_and_a_sensor_stuck_at_zero_is():
    # Intermittent unit demand (a demand in half the periods, 1 or now and then 2): equal
    # demands follow each other often, and the stretches without demand must not dilute that
    # rate. Seeded simulation, 200 series of 200 periods: at the family level 0.05 at most a
    # few may be flagged by chance (a third were, with the rate counted among all pairs).
    rng = np.random.default_rng(97)
    flagged = 0
    for _ in range(200):
        y = np.where(rng.random(200) < 0.5, 1.0 + (rng.random(200) < 0.2), 0.0)
        flagged += longest_flat_run(y, HOURS[:200], demand=True) is not None
    assert flagged <= 20
    # A reading of about 50 stuck at 0 for 15 hours is no stretch without demand.
    reading = np.round(_temperatures(), 2) - 10.0
    reading[100:115] = 0.0
    result = identify_series(pd.Series(reading, index=HOURS), "plant/boiler-2/temp")
    assert result.demand_class is not None and Flag.FLAT_RUN in result.flags
    assert result.confidence.reasons[0] == f"15 equal values (0) from {HOURS[100]:%Y-%m-%d %H:%M} to {HOURS[114]:%Y-%m-%d %H:%M}"


def test_chance_runs_of_the_commonest_value_keep_to_the_family_level():
    # Smooth demand (a demand in five periods of six, gamma sizes, CV^2 0.3) keeps its zeros as
    # readings, and a run of zeros continues with P(0) = 1/6, not with the chance that two
    # neighbours agree (about 1/36): judged by the latter, 15-20% of such series were flagged at
    # n = 120-240 (a review; 1,000 series a cell). Seeded, 300 series of 240: at most the family
    # level and its binomial spread (0.05 + 2 SE, about 7.5%).
    rng = np.random.default_rng(20270603)
    index = pd.RangeIndex(240)
    flagged = sum(
        longest_flat_run(np.where(rng.random(240) < 1 / 1.2, rng.gamma(1 / 0.3, 3.0, 240), 0.0), index) is not None
        for _ in range(300))
    assert flagged / 300 <= FAMILY_LEVEL + 2 * np.sqrt(FAMILY_LEVEL * (1 - FAMILY_LEVEL) / 300)


def test_the_engine_names_the_run_and_withholds_firm():
    y = _temperatures()
    y[150:222] = y[149]
    result = identify_series(pd.Series(y, index=HOURS), "plant/boiler-1/temp")
    assert Flag.FLAT_RUN in result.flags and result.confidence.level is not Confidence.FIRM
    assert result.data_notes[0].startswith(f"The value {y[149]:g} repeats over 73 consecutive points")
    # The queue's main reason is the stuck stretch, not a doubt about the model (it was
    # fixed_seasonality here): what the reviewer of a sensor channel must see first.
    assert result.confidence.reasons[0].startswith("73 equal values")
    clean = identify_series(pd.Series(_temperatures(), index=HOURS), "plant/boiler-2/temp")
    assert Flag.FLAT_RUN not in clean.flags


@pytest.mark.parametrize("n", [3, 2])
def test_too_short_a_series_or_run_is_never_flagged(n):
    assert longest_flat_run(np.ones(n) if n < 3 else np.array([1.0, 2.0, 2.0]), HOURS[:n]) is None
