"""The real-data benchmark's paired comparison of Lagdesk with the stepwise search
(tests/benchmarks/real_forecasts.py, :func:`paired_ratio`), checked against scipy, and its
forecast origins (:func:`split`)."""

import math
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

sys.path.insert(0, str(Path(__file__).parent / "benchmarks"))
import pandas as pd  # noqa: E402
from real_forecasts import paired_ratio, split  # noqa: E402
from real_series import RealSeries  # noqa: E402


def _row(lagdesk: float, stepwise: float, name: str = "") -> dict:
    return {"name": name, "lagdesk": {"mase": lagdesk}, "stepwise": {"mase": stepwise}, "snaive": {"mase": 1.0}}


def test_the_ratio_and_its_interval_are_scipy_paired_t_interval_on_the_log_ratios():
    rng = np.random.default_rng(4)
    lagdesk, stepwise = np.exp(rng.normal(-0.4, 0.5, 40)), np.exp(rng.normal(-0.35, 0.5, 40))
    found = paired_ratio([_row(a, b, f"s{i}") for i, (a, b) in enumerate(zip(lagdesk, stepwise))])
    # The paired t-test's confidence interval of the mean difference of the logs (scipy >= 1.11).
    reference = stats.ttest_rel(np.log(lagdesk), np.log(stepwise)).confidence_interval(0.95)
    assert found["series"] == 40
    assert found["ratio"] == pytest.approx(math.exp(np.mean(np.log(lagdesk / stepwise))), rel=1e-12)
    assert (found["low"], found["high"]) == pytest.approx((math.exp(reference.low), math.exp(reference.high)), rel=1e-12)


def test_series_a_method_could_not_score_are_left_out_and_one_series_gives_no_interval():
    rows = [_row(0.5, 1.0, "a"), _row(math.nan, 1.0, "b")]
    found = paired_ratio(rows)
    assert found["series"] == 1
    assert math.isnan(found["ratio"]) and math.isnan(found["low"])


def test_a_series_forecast_from_several_origins_counts_once_with_its_mean_log_ratio():
    rng = np.random.default_rng(5)
    logs = rng.normal(0.02, 0.3, (30, 3))  # 30 series, 3 origins each
    rows = [_row(math.exp(v), 1.0, f"s{i}") for i in range(30) for v in logs[i]]
    found = paired_ratio(rows)
    # The one-sample t-interval of the per-series means (the paired interval on those means).
    reference = stats.ttest_1samp(logs.mean(axis=1), 0.0).confidence_interval(0.95)
    assert found["series"] == 30
    assert found["ratio"] == pytest.approx(math.exp(logs.mean()), rel=1e-12)
    assert (found["low"], found["high"]) == pytest.approx((math.exp(reference.low), math.exp(reference.high)), rel=1e-12)


def test_each_origin_holds_out_the_season_before_the_last_ones_training_on_what_precedes_it():
    values = pd.Series(np.arange(1.0, 61.0), index=pd.date_range("2020-01", periods=60, freq="MS"))
    entry = RealSeries("x", "invented", "monthly", 12, "none", values)
    for origin in range(3):
        part = split(entry, origin)
        end = 60 - 12 * origin
        assert part.actual.tolist() == values.iloc[end - 12:end].tolist()
        assert part.y.tolist() == values.iloc[:end - 12].tolist()
