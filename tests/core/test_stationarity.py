"""Checks of app.core.stationarity: known integration orders, statsmodels' KPSS/ADF, sunspots.

Sources: statsmodels ``kpss`` and ``adfuller`` (reference library); simulated series whose
order of integration is known by construction; the yearly sunspot numbers
(``statsmodels.datasets.sunspots``), published as a stationary AR(2) by Yule (1927) and used
as Series E by Box, Jenkins, Reinsel & Ljung (2015) [spans in results/reference_values.json,
from memory].
"""

from __future__ import annotations

import json
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from statsmodels.tools.sm_exceptions import InterpolationWarning
from statsmodels.tsa.arima_process import ArmaProcess
from statsmodels.tsa.stattools import adfuller, kpss

from app.core.errors import SeriesProblem
from app.core.identify import identify_series
from app.core.stationarity import LEVEL_NAMES, choose_differencing

REFERENCE = json.loads((Path(__file__).parent / "results" / "reference_values.json").read_text())
N = 300
SEEDS = range(5)


def _noise(seed: int) -> np.ndarray:
    return np.random.default_rng(seed).normal(size=N)


def _trend_plus_ar1(seed: int) -> np.ndarray:
    """Linear trend + stationary AR(1) noise (phi 0.5): stationary around a trend, d = 0."""
    rng = np.random.default_rng(seed)
    return 0.05 * np.arange(N) + ArmaProcess([1, -0.5]).generate_sample(N, distrvs=rng.standard_normal, burnin=100)


@pytest.fixture(scope="module")
def sunspots() -> np.ndarray:
    return sm.datasets.sunspots.load_pandas().data["SUNACTIVITY"].to_numpy()


@pytest.mark.parametrize("seed", SEEDS)
def test_white_noise_is_not_differenced(seed):
    decision = choose_differencing(_noise(seed))
    assert (decision.d, decision.uncertain, decision.trend_stationary) == (0, False, False)


@pytest.mark.parametrize("seed", SEEDS)
def test_random_walk_is_differenced_once(seed):
    decision = choose_differencing(np.cumsum(_noise(seed)))
    assert (decision.d, decision.uncertain) == (1, False)


@pytest.mark.parametrize("seed", SEEDS)
def test_doubly_integrated_series_is_differenced_twice(seed):
    decision = choose_differencing(np.cumsum(np.cumsum(_noise(seed))))
    assert (decision.d, decision.uncertain) == (2, False)


def test_trend_stationary_series_is_not_differenced():
    # KPSS(ct) at 5% rejects a true trend-stationarity null about 1 time in 20 (Kwiatkowski et al.
    # 1992), so a few of 20 seeds may go astray; at least 80% must be read as d = 0 with a trend.
    decisions = [choose_differencing(_trend_plus_ar1(seed)) for seed in range(20)]
    right = [(d.d, d.uncertain, d.trend_stationary) == (0, False, True) for d in decisions]
    assert sum(right) >= 16, f"only {sum(right)} of 20 trend-stationary series read as such"
    for decision in decisions:
        assert {(t.name, t.regression) for t in decision.tests} >= {("KPSS", "ct"), ("ADF", "ct")}


def test_disagreeing_trend_tests_do_not_give_a_firm_difference():
    decision = choose_differencing(_trend_plus_ar1(1))
    ct = {t.name: t for t in decision.tests if t.regression == "ct"}
    assert ct["KPSS"].rejects and ct["ADF"].rejects, "precondition: the trend tests disagree"
    assert decision.d == 0 or decision.uncertain


@pytest.mark.parametrize(
    "make",
    [_noise, lambda s: np.cumsum(_noise(s)), lambda s: np.cumsum(np.cumsum(_noise(s))), _trend_plus_ar1],
    ids=["white noise", "random walk", "I(2)", "trend-stationary"],
)
def test_stored_tests_equal_statsmodels_run_directly(make):
    x = make(0)
    decision = choose_differencing(x)
    assert decision.tests, "the decision records the tests behind it"
    for stored in decision.tests:
        level = np.diff(x, n=LEVEL_NAMES.index(stored.on))
        if stored.name == "KPSS":
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", InterpolationWarning)
                ref = kpss(level, regression=stored.regression, nlags="auto", result_object=True)
            rejects = ref.statistic > ref.critical_values["5%"]
        else:
            ref = adfuller(level, regression=stored.regression, autolag="AIC", result_object=True)
            rejects = ref.pvalue < 0.05
        assert stored.statistic == pytest.approx(ref.statistic, rel=1e-12, abs=1e-12)
        assert stored.p_value == pytest.approx(ref.pvalue, rel=1e-12, abs=1e-12)
        assert stored.lags == ref.lags
        assert stored.rejects == rejects


def test_sunspots_yule_span_is_stationary(sunspots):
    # Yule (1927) fitted a stationary AR(2) to the yearly numbers 1749-1924 [from memory].
    years = sm.datasets.sunspots.load_pandas().data["YEAR"].to_numpy().astype(int)
    start, end = REFERENCE["sunspots_spans"]["yule"]
    decision = choose_differencing(sunspots[(years >= start) & (years <= end)])
    assert decision.d == 0


def test_sunspots_are_stationary(sunspots):
    # Published as a stationary AR(2) (Yule 1927; Box & Jenkins Series E) [from memory].
    assert choose_differencing(sunspots).d == 0


def test_a_series_that_repeats_exactly_every_season_is_refused_by_name():
    y = pd.Series(np.tile([3.0, 1.0, 2.0, 5.0], 30), index=pd.date_range("2020-01-01", periods=120, freq="QS"))
    with pytest.raises(SeriesProblem, match="repeats itself exactly every 4 points") as raised:
        identify_series(y, "exact")
    assert raised.value.flag == "exactly_periodic"
