"""Forecast check: MASE (Hyndman & Koehler 2006), rolling origins, interval coverage, back-transforms.

Sources: the MASE definition of Hyndman & Koehler (2006, *IJF* 22:679-688): q_t = e_t divided by
(1/(n-m)) sum_{t=m+1..n} |Y_t - Y_{t-m}|, MASE = mean |q_t|; the naive forecast of a random walk
and its h-step standard deviation sigma * sqrt(h) (Hyndman & Athanasopoulos 2021, *Forecasting:
Principles and Practice*, 3rd ed., §5.5, benchmark methods' forecast distributions); the binomial
distribution (scipy) for the sampling error of an empirical coverage.
"""

from __future__ import annotations

import json
import math
import re

import numpy as np
import pandas as pd
import pytest
from scipy.stats import binom, norm
from threadpoolctl import threadpool_limits

from app.core.analysis import Intervention
from app.core.backtest import (
    DEFAULT_ORIGINS,
    NONSEASONAL_HORIZON,
    backtest_order,
    default_horizon,
    forecast_order,
    mase,
    seasonal_naive_forecast,
    seasonal_naive_scale,
)
from app.core.errors import OrderError
from app.core.order import validate_order
from app.core.prepare import prepare_series
from app.core.transform import TransformChoice
from app.core.vocabulary import InterventionKind


def _ar1(n: int, phi: float, seed: int, level: float = 0.0) -> np.ndarray:
    rng = np.random.default_rng(seed)
    e = rng.normal(size=n + 200)
    x = np.zeros(n + 200)
    for t in range(1, x.size):
        x[t] = phi * x[t - 1] + e[t]
    return level + x[200:]


def _prepared(values: np.ndarray, freq: str = "MS", series_id: str = "s"):
    return prepare_series(pd.Series(values, index=pd.date_range("2001-01-01", periods=len(values), freq=freq)), series_id)


@pytest.fixture(scope="module")
def random_walk() -> np.ndarray:
    return 100 + np.cumsum(np.random.default_rng(7).normal(size=120))


NONE = TransformChoice("none")


def test_mase_of_the_naive_forecast_against_itself_is_exactly_one(random_walk):
    # The in-sample one-step (seasonal) naive forecast is the scale's own numerator.
    assert mase(random_walk[1:], random_walk[:-1], random_walk, 1) == 1.0
    assert mase(random_walk[12:], random_walk[:-12], random_walk, 12) == 1.0


def test_mase_matches_the_published_formula_computed_by_hand():
    # Hyndman & Koehler (2006), definition of q_t and MASE, worked by hand:
    # m = 1: scale = (|3-1| + |2-3| + |5-2| + |4-5|) / 4 = 7/4; errors |6-4|, |5-4.5| -> MAE 5/4; MASE 5/7.
    assert seasonal_naive_scale([1, 3, 2, 5, 4], 1) == pytest.approx(7 / 4, rel=1e-15)
    assert mase([6, 5], [4, 4.5], [1, 3, 2, 5, 4], 1) == pytest.approx(5 / 7, rel=1e-15)
    # m = 2: scale = (|2-1| + |5-3| + |4-2| + |6-5|) / 4 = 3/2; errors 3, 2 -> MAE 5/2; MASE 5/3.
    assert mase([7, 8], [4, 6], [1, 3, 2, 5, 4, 6], 2) == pytest.approx(5 / 3, rel=1e-15)


def test_seasonal_naive_forecast_repeats_the_last_season():
    training = np.arange(10.0)
    assert seasonal_naive_forecast(training, 5, 3).tolist() == [7, 8, 9, 7, 8]
    assert seasonal_naive_forecast(training, 3, 1).tolist() == [9, 9, 9]


def test_random_walk_model_forecasts_are_the_naive_forecasts_with_sqrt_h_intervals(random_walk):
    model = validate_order((0, 1, 0))  # no drift
    check = backtest_order(_prepared(random_walk), model, NONE, period=None, horizon=4, origins=3)
    for run in check.origins:
        last = random_walk[run.origin - 1]
        np.testing.assert_allclose(run.forecast.mean, last, rtol=1e-12)
        np.testing.assert_array_equal(run.naive, last)
        # FPP3 §5.5: the naive forecast's h-step standard deviation is sigma * sqrt(h), with the
        # ML variance of the random walk's steps.
        sigma = math.sqrt(np.mean(np.diff(random_walk[:run.origin]) ** 2))
        lower, upper = run.forecast.intervals[0.95]
        half = norm.ppf(0.975) * sigma * np.sqrt(np.arange(1, 5))
        np.testing.assert_allclose(upper - last, half, rtol=1e-4)
        np.testing.assert_allclose(last - lower, half, rtol=1e-4)
    # The model's forecasts are the naive ones, so its MASE is the naive benchmark's, and both are
    # the published formula applied origin by origin.
    by_hand = np.mean([
        np.abs(random_walk[r.origin:r.origin + 4] - random_walk[r.origin - 1]) / seasonal_naive_scale(random_walk[:r.origin])
        for r in check.origins
    ])
    assert check.mase == pytest.approx(by_hand, rel=1e-10)
    assert check.naive_mase == pytest.approx(by_hand, rel=1e-15)


def test_interval_coverage_of_a_correct_ar1_is_close_to_nominal():
    # One-step forecasts of a correctly specified AR(1): each observation is inside the p interval
    # with probability p (parameter uncertainty is negligible with 300+ points), independently
    # across origins; the empirical coverage must fall in the binomial 99.9% range.
    origins = 150
    y = _ar1(400, 0.6, seed=11, level=5.0)
    with threadpool_limits(1):  # 150 small fits: BLAS threads only get in each other's way
        check = backtest_order(_prepared(y, freq="D"), validate_order((1, 0, 0)), NONE, period=None, horizon=1,
                               origins=origins)
    assert len(check.origins) == origins
    for level in (0.80, 0.95):
        low, high = binom.interval(0.999, origins, level)
        assert low / origins <= check.coverage(level) <= high / origins, (level, check.coverage(level))


def test_log_transform_forecasts_are_back_transformed_quantile_by_quantile():
    y = np.exp(_ar1(120, 0.5, seed=3, level=3.0) * 0.2)
    model = validate_order((1, 0, 0))
    on_log = forecast_order(np.log(y), model, NONE, 6)
    back = forecast_order(y, model, TransformChoice("log"), 6)
    np.testing.assert_allclose(back.mean, np.exp(on_log.mean), rtol=1e-10)
    for level in (0.80, 0.95):
        np.testing.assert_allclose(back.intervals[level][0], np.exp(on_log.intervals[level][0]), rtol=1e-10)
        np.testing.assert_allclose(back.intervals[level][1], np.exp(on_log.intervals[level][1]), rtol=1e-10)
    # Errors and coverage are measured on the original scale.
    check = backtest_order(_prepared(y), model, TransformChoice("log"), period=None)
    last = check.origins[-1]
    np.testing.assert_allclose(last.actual, y[-NONSEASONAL_HORIZON:])
    assert check.by_horizon()[0]["mae"] == pytest.approx(np.mean([abs(o.actual[0] - o.forecast.mean[0]) for o in check.origins]))


def test_box_cox_bounds_outside_the_range_become_its_edge():
    # lambda = 1 is a shift by one; a wide interval of a series near 0 has a lower bound below
    # the transform's range (lambda * z + 1 <= 0), which is the edge of the range, 0.
    y = np.abs(_ar1(80, 0.3, seed=5)) * 0.05 + 0.01
    out = forecast_order(y, validate_order((0, 0, 0)), TransformChoice("box_cox", lam=1.0), 3)
    lower, upper = out.intervals[0.95]
    assert np.all(lower >= 0) and np.all(np.isfinite(upper)) and np.all(lower <= out.mean) and np.all(out.mean <= upper)


def test_defaults_one_season_and_five_origins_spaced_by_the_horizon():
    assert (default_horizon(12), default_horizon(None), default_horizon(0)) == (12, NONSEASONAL_HORIZON, NONSEASONAL_HORIZON)
    y = 10 + np.tile(np.sin(np.arange(12) / 12 * 2 * np.pi), 10) + 0.3 * _ar1(120, 0.3, seed=9)
    check = backtest_order(_prepared(y), validate_order((1, 0, 0), (0, 1, 0, 12)), NONE, period=12)
    assert (check.horizon, len(check.origins), check.m) == (12, DEFAULT_ORIGINS, 12)
    assert [o.origin for o in check.origins] == [60, 72, 84, 96, 108]
    out = check.to_dict()
    json.dumps(out, allow_nan=False)
    plot = out["plot"]
    assert len(plot["history"]["values"]) == (DEFAULT_ORIGINS + 1) * 12
    assert plot["holdout"]["timestamps"] == plot["history"]["timestamps"][-12:]
    assert plot["holdout"]["actual"] == pytest.approx(y[-12:].tolist())
    assert plot["ahead"]["timestamps"][0] == "2011-01-01 00:00:00" and len(plot["ahead"]["forecast"]) == 12
    assert [row["step"] for row in out["by_horizon"]] == list(range(1, 13))
    assert set(out["coverage"]) == {"80", "95"}


def test_a_short_series_gets_fewer_origins_and_a_too_short_one_an_error():
    model = validate_order((1, 0, 0))
    short = backtest_order(_prepared(_ar1(50, 0.5, seed=1)), model, NONE, period=None)
    assert len(short.origins) == 2 and "Only 2 of 5 origins" in short.notes[0]
    with pytest.raises(OrderError, match=r"too few for a forecast check .*; a horizon of at most (\d+) steps fits") as refused:
        backtest_order(_prepared(_ar1(35, 0.5, seed=1)), model, NONE, period=None)
    # The horizon the refusal names is one the check takes (found by a new user on a weekly series).
    fits = int(re.search(r"at most (\d+) steps", str(refused.value)).group(1))
    assert len(backtest_order(_prepared(_ar1(35, 0.5, seed=1)), model, NONE, period=None, horizon=fits).origins) == 1


def test_a_level_shift_before_the_origin_is_taken_out_and_carried_into_the_forecast():
    # The intervention model y_t = z_t + ω S_t(T) (Box & Tiao 1975): forecasting y is forecasting
    # z from the adjusted data and adding ω back, since the step stays on beyond T.
    y = _ar1(200, 0.6, seed=5, level=10.0)
    y[150:] += 5.0
    shift = Intervention(150, "t150", InterventionKind.LEVEL_SHIFT, 5.0, 9.0)
    model = validate_order([1, 0, 0], None)
    with threadpool_limits(limits=1):
        taken = forecast_order(y, model, TransformChoice("none"), 8, interventions=[shift])
        adjusted = forecast_order(np.r_[y[:150], y[150:] - 5.0], model, TransformChoice("none"), 8)
        before = forecast_order(y[:150], model, TransformChoice("none"), 8, interventions=[shift])
        plain = forecast_order(y[:150], model, TransformChoice("none"), 8)
    np.testing.assert_allclose(taken.mean, adjusted.mean + 5.0, rtol=1e-10)
    for level in (0.8, 0.95):
        np.testing.assert_allclose(np.asarray(taken.intervals[level]), np.asarray(adjusted.intervals[level]) + 5.0, rtol=1e-10)
    np.testing.assert_array_equal(before.mean, plain.mean)  # a shift after the data is not yet known


def test_the_check_of_a_shifted_series_scores_the_model_the_hand_off_uses():
    y = _ar1(240, 0.5, seed=9, level=20.0)
    y[120:] += 6.0
    prepared = _prepared(y, freq="D")
    shift = Intervention(120, str(prepared.index[120].date()), InterventionKind.LEVEL_SHIFT, 6.0, 20.0)
    model = validate_order([1, 0, 0], None)
    with threadpool_limits(limits=1):
        modelled = backtest_order(prepared, model, TransformChoice("none"), None, interventions=[shift])
        ignored = backtest_order(prepared, model, TransformChoice("none"), None)
    # Left in, the mean of the stationary model sits between the two levels and every forecast
    # after the shift is biased; taken out, the forecasts follow the new level.
    assert modelled.mase < ignored.mase
    assert any("level shift at" in note for note in modelled.notes)
