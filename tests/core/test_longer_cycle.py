"""A longer cycle left in the suggestion's residuals (app.core.longer_cycle): the residual
autocorrelation at the cycle's lag against statsmodels' ``acf``, the 1% band of Box & Pierce
(1970), and the engine naming a weekly cycle of hourly data that a daily season does not take."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from statsmodels.tsa.stattools import acf

from app.core.identify import identify_series
from app.core.longer_cycle import LEVEL_Z, cycle_of, longer_cycle
from app.core.vocabulary import Flag

HOURS = 24 * 7 * 6  # six weeks of hourly readings


def _hourly(weekly: float, seed: int = 1) -> pd.Series:
    rng = np.random.default_rng(seed)
    t = np.arange(HOURS)
    x = np.zeros(HOURS)
    for k in range(1, HOURS):
        x[k] = 0.6 * x[k - 1] + rng.normal()
    weekend = ((t // 24) % 7 >= 5).astype(float)  # a line idle at weekends
    y = 40.0 + 4.0 * np.sin(2 * np.pi * t / 24) - weekly * weekend + x
    return pd.Series(y, index=pd.date_range("2024-01-01", periods=HOURS, freq="h"))


def test_the_statistic_is_the_autocorrelation_at_the_cycle_and_the_band_is_1_percent():
    e = np.random.default_rng(4).normal(size=600)
    e[168:] += 0.5 * e[:-168]
    found = longer_cycle(e, "h", 24)
    assert found is not None and found.r == pytest.approx(acf(e, nlags=168, fft=True)[168], rel=1e-9)
    assert found.band == pytest.approx(LEVEL_Z / np.sqrt(600 - 168)) and LEVEL_Z == pytest.approx(2.5758, abs=1e-4)


def test_the_cycles_of_the_sampling_frequencies():
    assert cycle_of("h") == (168, "a week") and cycle_of("60min") == (168, "a week")
    assert cycle_of("D") is None  # a seasonal ARIMA at 365 is no practical advice
    assert cycle_of("2h") is None and cycle_of("MS") is None and cycle_of("step") is None
    e = np.random.default_rng(4).normal(size=600)
    e[168:] += 0.5 * e[:-168]
    assert longer_cycle(e, "h", 168) is None  # the model's season is the week already
    assert longer_cycle(e[:500], "h", 24) is None  # fewer than three weeks


def test_the_engine_names_a_weekly_cycle_of_hourly_data_and_not_a_missing_one():
    with_week = identify_series(_hourly(weekly=6.0), "line-3/power")
    assert Flag.LONGER_CYCLE in with_week.flags
    assert any("correlate at lag 168 (a week)" in note and "--period 168" in note for note in with_week.data_notes)
    assert Flag.LONGER_CYCLE not in identify_series(_hourly(weekly=0.0), "line-4/power").flags
