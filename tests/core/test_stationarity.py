"""Checks of app.core.stationarity: known integration orders, statsmodels' KPSS/ADF, sunspots.

Sources: statsmodels ``kpss`` and ``adfuller`` (reference library); simulated series whose
order of integration is known by construction; the yearly sunspot numbers
(``statsmodels.datasets.sunspots``), published as a stationary AR(2) by Yule (1927) and used
as Series E by Box, Jenkins, Reinsel & Ljung (2015) [spans in results/reference_values.json,
from memory].
"""

from __future__ import annotations

import json
import math
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from statsmodels.stats.sandwich_covariance import cov_hac
from statsmodels.tools.sm_exceptions import InterpolationWarning
from statsmodels.tsa.arima_process import ArmaProcess
from statsmodels.tsa.stattools import adfuller, kpss

from app.core import stationarity
from app.core.analysis import UnitRootTest
from app.core.errors import SeriesProblem
from app.core.identify import identify_series
from app.core.stationarity import LEVEL_NAMES, SEASONAL_LEVEL_NAMES, choose_differencing, long_run_t
from app.core.vocabulary import Flag

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


def test_tests_on_a_seasonal_difference_are_named_for_it():
    # Found by a new user: after D = 1 the page said the tests ran "on the series as observed".
    decision = choose_differencing(_noise(SEEDS[0]), seasonally_differenced=True)
    assert {t.on for t in decision.tests} == {SEASONAL_LEVEL_NAMES[0]}
    assert decision.explanation[0].startswith("On the seasonal difference, ")
    assert {t.on for t in choose_differencing(_noise(SEEDS[0])).tests} == {"levels"}


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


def test_trend_stationary_series_leads_with_d_0_and_leaves_d_1_to_the_fits():
    # KPSS(ct) at 5% rejects a true trend-stationarity null about 1 time in 20 (Kwiatkowski et al.
    # 1992), so a few of 20 seeds may go astray; at least 80% must be read as d = 0 with a trend,
    # d = 1 searched beside it (the module notes: a trend read by a pre-test is checked by the fits).
    decisions = [choose_differencing(_trend_plus_ar1(seed)) for seed in range(20)]
    right = [(d.d, d.uncertain, d.alternative_d, d.trend_stationary) == (0, True, 1, True) for d in decisions]
    assert sum(right) >= 16, f"only {sum(right)} of 20 trend-stationary series read as such"
    for decision in decisions:
        assert {(t.name, t.regression) for t in decision.tests} >= {("KPSS", "ct"), ("ADF", "ct")}


def test_disagreeing_trend_tests_do_not_give_a_firm_difference():
    decision = choose_differencing(_trend_plus_ar1(1))
    ct = {t.name: t for t in decision.tests if t.regression == "ct"}
    assert ct["KPSS"].rejects and ct["ADF"].rejects, "precondition: the trend tests disagree"
    assert decision.d == 0 or decision.uncertain


def test_first_difference_that_both_tests_reject_is_open_between_d_1_and_d_2():
    # US real personal consumption, quarterly 1959-2009 (statsmodels.datasets.macrodata). On its
    # first difference KPSS rejects stationarity and ADF rejects a unit root (statsmodels, run
    # directly): KPSS alone, as Hyndman & Khandakar (2008, §3.2) choose d, would difference
    # again, ADF alone would not; the decision leaves both to the fits, d = 1 first (ADF's p < 0.1).
    x = sm.datasets.macrodata.load_pandas().data["realcons"].to_numpy()
    step = np.diff(x)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", InterpolationWarning)
        k = kpss(step, regression="c", nlags="auto", result_object=True)
    assert k.statistic > k.critical_values["5%"] and adfuller(step, autolag="AIC", result_object=True).pvalue < 0.05, "precondition"
    decision = choose_differencing(x)
    assert (decision.d, decision.uncertain, decision.alternative_d) == (1, True, 2)
    assert "d = 1 and d = 2" in decision.explanation[-1]


@pytest.mark.parametrize("kpss_rejects, adf_rejects, expected", [
    (False, True, (1, False, None)),   # stationary: stop
    (True, False, (2, False, None)),   # unit root: difference again
    (True, True, (1, True, 2)),        # disagree, KPSS rejecting: both d searched
    (False, False, (1, False, None)),  # disagree, neither rejecting: KPSS alone would stop too
])
def test_decision_table_on_the_first_difference(monkeypatch, kpss_rejects, adf_rejects, expected):
    # The table of the module notes, with the outcomes of the two tests prescribed: the levels
    # have a unit root by both tests, the first difference gets the outcome of each row.
    def outcome(name: str, rejects: dict[str, bool]):
        def test(x, regression, on):
            return UnitRootTest(name=name, regression=regression, on=on, statistic=0.0, p_value=0.01 if rejects[on] else 0.5,
                                lags=0, rejects=rejects[on], null="")
        return test
    monkeypatch.setattr(stationarity, "kpss_test", outcome("KPSS", {"levels": True, "first difference": kpss_rejects, "second difference": False}))
    monkeypatch.setattr(stationarity, "adf_test", outcome("ADF", {"levels": False, "first difference": adf_rejects, "second difference": True}))
    decision = choose_differencing(np.arange(50.0))
    assert (decision.d, decision.uncertain, decision.alternative_d) == expected


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
        assert stored.statistic == pytest.approx(ref.statistic, rel=1e-9, abs=1e-12)
        assert stored.p_value == pytest.approx(ref.pvalue, rel=1e-9, abs=1e-12)
        assert stored.lags == ref.lags
        assert stored.rejects == rejects


def test_the_tests_do_not_depend_on_the_units():
    # With a constant in the regression the ADF and KPSS statistics are unchanged by the units
    # (Dickey & Fuller 1979; KPSS 1992). statsmodels' least squares judge rank on the raw
    # columns: US real GDP in currency units (about 1e13) lost ADF(ct)'s trend column as
    # rank-deficient. Lagdesk's tests on it equal statsmodels' on the published figures.
    gdp = sm.datasets.macrodata.load_pandas().data["realgdp"].to_numpy()
    reference = choose_differencing(gdp).tests
    scaled = choose_differencing(gdp * 1e10).tests
    assert [(t.name, t.regression, t.on, t.lags) for t in scaled] == [(t.name, t.regression, t.on, t.lags) for t in reference]
    for stored, ref in zip(scaled, reference, strict=True):
        assert stored.statistic == pytest.approx(ref.statistic, rel=1e-9)
    direct = adfuller(gdp, regression="ct", autolag="AIC", result_object=True)
    trend_test = next(t for t in scaled if (t.name, t.regression) == ("ADF", "ct"))
    assert (trend_test.statistic, trend_test.lags) == (pytest.approx(direct.statistic, rel=1e-9), direct.lags)


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


def test_a_trend_the_tests_read_but_the_criterion_leaves_out_is_neither_flagged_nor_claimed():
    # Found by a new user: the words said "d = 0 with a linear trend leads" and the queue's reason
    # was "stationary around a trend" while the suggestion had a mean only. An AR(1) (phi 0.7)
    # around a slope of 0.005 per year: the tests read a trend (KPSS with a trend does not reject,
    # ADF with a trend rejects; Kwiatkowski et al. 1992), the criterion keeps the mean.
    rng = np.random.default_rng([20261205, 8])
    x = 10 + 0.005 * np.arange(100) + ArmaProcess([1, -0.7]).generate_sample(100, distrvs=rng.standard_normal, burnin=100)
    found = identify_series(pd.Series(x, index=pd.date_range("1900-01-01", periods=100, freq="YS")), "slight trend")
    assert found.differencing.trend_stationary
    assert found.suggested.model.full_label() == "ARIMA(1,0,0) with a mean"
    assert Flag.TREND_STATIONARY not in found.flags
    assert found.to_analysis().differencing.explanation[-1] == (
        "The criterion preferred ARIMA(1,0,0) with a mean to the linear trend the tests read: "
        "the suggestion has no trend to extrapolate.")


def test_a_seasonal_difference_is_not_read_as_trend_stationary():
    # The same series read as a seasonal difference: a linear trend in it would be a quadratic
    # one in the levels, which no candidate carries, so the trend regressions are not run and
    # the level tests decide alone: KPSS rejects, ADF does not (p = 0.20), one more difference.
    rng = np.random.default_rng([20261205, 8])
    x = 10 + 0.005 * np.arange(100) + ArmaProcess([1, -0.7]).generate_sample(100, distrvs=rng.standard_normal, burnin=100)
    on_levels = choose_differencing(x)
    assert (on_levels.d, on_levels.alternative_d, on_levels.trend_stationary) == (0, 1, True)
    seasonal = choose_differencing(x, seasonally_differenced=True)
    assert (seasonal.d, seasonal.uncertain, seasonal.trend_stationary) == (1, False, False)
    assert all(t.regression == "c" for t in seasonal.tests)


def test_long_run_t_uses_the_newey_west_variance_of_statsmodels():
    # Newey & West (1987): the HAC variance of a mean, Bartlett weights; statsmodels' cov_hac of
    # a regression on a constant gives the same with the same truncation lag (4 (n/100)^(2/9),
    # Newey & West 1994). Positive autocorrelation makes the ordinary t several times too large.
    rng = np.random.default_rng(1)
    e = rng.standard_normal(300)
    x = np.zeros(300)
    for t in range(1, 300):
        x[t] = 0.8 * x[t - 1] + e[t]
    x += 0.3
    fit = sm.OLS(x, np.ones_like(x)).fit()
    lags = int(4 * (300 / 100) ** (2 / 9))
    reference = abs(x.mean()) / math.sqrt(cov_hac(fit, nlags=lags, use_correction=False)[0, 0])
    assert long_run_t(x) == pytest.approx(reference, rel=1e-9)
    assert long_run_t(x) < 0.6 * abs(x.mean()) / (x.std(ddof=1) / math.sqrt(x.size))
    with_gap = x.copy()
    with_gap[10] = np.nan
    assert long_run_t(with_gap) == pytest.approx(long_run_t(np.delete(x, 10)))
    assert long_run_t(np.array([1.0])) == 0.0
