"""The real-data benchmark's paired comparison of Lagdesk with the stepwise search
(tests/benchmarks/real_forecasts.py, :func:`paired_ratio`), checked against scipy."""

import math
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

sys.path.insert(0, str(Path(__file__).parent / "benchmarks"))
from real_forecasts import paired_ratio  # noqa: E402


def _row(lagdesk: float, stepwise: float) -> dict:
    return {"lagdesk": {"mase": lagdesk}, "stepwise": {"mase": stepwise}, "snaive": {"mase": 1.0}}


def test_the_ratio_and_its_interval_are_scipy_paired_t_interval_on_the_log_ratios():
    rng = np.random.default_rng(4)
    lagdesk, stepwise = np.exp(rng.normal(-0.4, 0.5, 40)), np.exp(rng.normal(-0.35, 0.5, 40))
    found = paired_ratio([_row(a, b) for a, b in zip(lagdesk, stepwise)])
    # The paired t-test's confidence interval of the mean difference of the logs (scipy >= 1.11).
    reference = stats.ttest_rel(np.log(lagdesk), np.log(stepwise)).confidence_interval(0.95)
    assert found["series"] == 40
    assert found["ratio"] == pytest.approx(math.exp(np.mean(np.log(lagdesk / stepwise))), rel=1e-12)
    assert (found["low"], found["high"]) == pytest.approx((math.exp(reference.low), math.exp(reference.high)), rel=1e-12)


def test_series_a_method_could_not_score_are_left_out_and_one_series_gives_no_interval():
    rows = [_row(0.5, 1.0), _row(math.nan, 1.0)]
    found = paired_ratio(rows)
    assert found["series"] == 1
    assert math.isnan(found["ratio"]) and math.isnan(found["low"])
