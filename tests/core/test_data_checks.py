"""Residuals the model does not explain (app/core/residual_outliers.py) and intermittent demand
(app/core/demand.py), each checked against its published definition, and the engine's use of
them: neither can leave a suggestion ``firm``."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from accuracy_batch import simulate
from scipy.stats import median_abs_deviation, norm
from scipy.stats import t as t_distribution
from statsmodels.stats.outliers_influence import OLSInfluence
from statsmodels.tsa.arima.model import ARIMA

from app.core.demand import classify_demand
from app.core.errors import SeriesProblem
from app.core.fitting import fit_candidate
from app.core.identify import EngineOptions, identify_series
from app.core.order import validate_order
from app.core.residual_outliers import (
    largest_residual,
    outlier_threshold,
    prediction_variance_ratios,
    robust_scale,
    studentized_threshold,
)
from app.core.vocabulary import Confidence, Flag


def test_robust_scale_is_scipys_normal_consistent_mad():
    e = np.random.default_rng(1).standard_t(4, size=301)
    assert robust_scale(e) == pytest.approx(median_abs_deviation(e, scale="normal"), rel=1e-4)


def test_threshold_is_the_bonferroni_bound_by_length():
    # Dunn (1961): the largest of n |z| passes norm.isf(0.05 / (2n)) with probability <= 0.05.
    for n, bound in ((100, 3.4808), (400, 3.8361), (1000, 4.0556)):
        assert outlier_threshold(n) == pytest.approx(bound, abs=1e-3)
        assert 1.0 - (1.0 - 2.0 * norm.sf(outlier_threshold(n))) ** n == pytest.approx(0.05, abs=0.002)


def test_studentized_threshold_is_the_bonferroni_t_bound():
    # Weisberg (2005, §9.1): the largest of m externally studentised residuals against the
    # 1 - 0.05 / (2m) quantile of t with m - 2 degrees of freedom.
    for m in (12, 100, 400, 1000):
        assert studentized_threshold(m) == pytest.approx(t_distribution.isf(0.05 / (2 * m), m - 2), rel=1e-9)


def test_the_statistic_is_statsmodels_externally_studentized_residual():
    # Cook & Weisberg (1982, §2.2.2): residuals regressed on a constant; the flag fires exactly
    # when statsmodels' Bonferroni outlier test rejects at 5%.
    rng = np.random.default_rng(11)
    for spike in (3.0, 4.0, 6.0):
        e = rng.normal(size=120)
        e[40] += spike
        fit = sm.OLS(e, np.ones((e.size, 1))).fit()
        external = OLSInfluence(fit).resid_studentized_external
        found = largest_residual(e, pd.RangeIndex(e.size))
        bonferroni_p = fit.outlier_test(method="bonf")[:, 2].min()
        assert (found is not None) == (bonferroni_p < 0.05)
        if found is not None:
            assert found.z == pytest.approx(external[found.position], rel=1e-9)
            assert abs(found.z) == pytest.approx(np.abs(external).max(), rel=1e-9)


@pytest.mark.parametrize("n", [50, 100, 400])
def test_chance_rate_on_gaussian_noise_is_the_family_level(n):
    # Exact t laws and a Bonferroni bound over nearly independent statistics: about 5% at
    # every length (the median-absolute-deviation scale passed it in 13% at n = 50).
    rng = np.random.default_rng(20261203 + n)
    runs = 800
    index = pd.RangeIndex(n)
    hits = sum(largest_residual(rng.normal(size=n), index) is not None for _ in range(runs))
    sd = np.sqrt(0.05 * 0.95 / runs)
    assert abs(hits / runs - 0.05) < 4 * sd


def test_a_spike_is_found_where_it_is():
    rng = np.random.default_rng(3)
    e = rng.normal(size=200)
    e[137] += 9.0
    index = pd.date_range("2024-01-01", periods=210, freq="D")
    found = largest_residual(e, index)  # residuals of the last 200 of 210 points
    assert found is not None and found.position == 147 and found.when == "2024-05-27"
    assert found.z > 8.0


def test_demand_classes_from_a_hand_computed_example():
    # y = 0 0 5 0 3 0 0 4: demands at periods 2, 4 and 7, ADI = the mean interval between
    # successive demands = (7 - 2) / 2 = 2.5 >= 1.32; sizes 5, 3, 4: mean 4, population
    # variance 2/3, CV² = 0.042 < 0.49 -> intermittent (Syntetos, Boylan & Croston 2005).
    found = classify_demand(np.array([0, 0, 5, 0, 3, 0, 0, 4.0]))
    assert found is not None
    assert found.adi == pytest.approx(2.5) and found.cv2 == pytest.approx((2 / 3) / 16)
    assert found.label == "intermittent" and found.sparse
    assert classify_demand(np.array([0, 1, 20, 0, 2, 0, 0, 30.0])).label == "lumpy"
    assert classify_demand(np.array([10, 0, 11, 9, 10, 12, 10, 9.0])).label == "smooth"
    assert classify_demand(np.array([1, 0, 20, 2, 30, 1, 25, 3.0])).label == "erratic"
    assert classify_demand(np.array([1.0, 2.0, 3.0])) is None  # no zero: not demand-like
    assert classify_demand(np.array([0.0, -1.0, 3.0, 4.0])) is None  # negative values


def test_zeros_before_the_first_demand_and_after_the_last_are_no_intervals():
    # A product launched after five years without sales, sold every period since: no interval
    # between its demands is longer than one period, so it is no intermittent demand (n / k
    # made it ADI 1.43, and its launch was never sought as a level shift); nor is one withdrawn.
    sold = np.random.default_rng(6).poisson(20, 140).astype(float) + 1.0
    assert classify_demand(np.r_[np.zeros(60), sold]) is None
    assert classify_demand(np.r_[sold, np.zeros(60)]) is None
    gapped = np.r_[np.zeros(60), sold[:70], 0.0, sold[70:]]
    assert classify_demand(gapped).adi == pytest.approx(140 / 139) and classify_demand(gapped).label == "smooth"


def _ar1(rng, n, phi):
    return simulate((1, 0, 0), [phi], [], n, rng) - 10.0


def test_engine_does_not_call_a_spiked_series_firm():
    rng = np.random.default_rng(8)
    y = 20 + _ar1(rng, 300, 0.6)
    clean = identify_series(pd.Series(y, pd.date_range("2020-01-01", periods=300, freq="D")), "clean")
    y[180] += 8.0
    spiked = identify_series(pd.Series(y, pd.date_range("2020-01-01", periods=300, freq="D")), "spiked")
    assert Flag.LARGE_RESIDUAL not in clean.flags and Flag.OUTLIERS not in clean.flags
    # The spike is found and estimated with the model (app.core.interventions), so no residual
    # is left beyond the threshold; the intervention itself keeps the suggestion from firm.
    assert Flag.OUTLIERS in spiked.flags and Flag.LARGE_RESIDUAL not in spiked.flags
    assert spiked.confidence.level != Confidence.FIRM
    assert any("2020-06-29" in reason for reason in spiked.confidence.reasons)


def test_engine_flags_intermittent_demand_and_never_calls_it_firm():
    rng = np.random.default_rng(4)
    sales = np.where(rng.random(200) < 0.15, rng.poisson(4, 200) + 1, 0).astype(float)
    found = identify_series(pd.Series(sales, pd.date_range("2022-01-03", periods=200, freq="D")), "slow/item")
    assert Flag.INTERMITTENT_DEMAND in found.flags
    assert found.confidence.level != Confidence.FIRM
    assert any("Croston" in words for words in found.data_notes)
    assert found.to_analysis().data_notes == tuple(found.data_notes)
    # The class travels with the result (the API and identify --json carry it as demand_class).
    assert found.to_analysis().demand_class == "intermittent"
    assert found.to_analysis().to_dict()["demand_class"] == "intermittent"


@pytest.mark.parametrize(("demands", "label"), [(26, "intermittent"), (27, "smooth")])
def test_the_interval_cut_off_is_1_32_inclusive(demands, label):
    # Demands at the first and the last of 34 periods and in between: with 26 demands the mean
    # interval is 33 / 25 = 1.32 exactly, the cut-off of Syntetos, Boylan & Croston (2005),
    # which counts as infrequent; with 27 it is 33 / 26 = 1.27. Equal sizes: CV² 0.
    y = np.zeros(34)
    y[[0, 33]] = 4.0
    y[1:demands - 1] = 4.0
    found = classify_demand(y)
    assert found is not None and found.label == label


@pytest.mark.parametrize(("sizes", "label"), [
    # sizes 1 and b alternate: CV² = ((b - 1) / (b + 1))^2, which crosses 0.49 (the cut-off of
    # Syntetos, Boylan & Croston 2005) at b = 17 / 3; b = 5.5 gives 0.479, b = 6 gives 0.510.
    ((1.0, 5.5), "intermittent"), ((1.0, 6.0), "lumpy"),
])
def test_the_size_variation_cut_off_is_0_49(sizes, label):
    y = np.zeros(40)
    y[::4] = np.tile(sizes, 5)  # ADI 4: infrequent
    found = classify_demand(y)
    assert found is not None
    assert found.cv2 == pytest.approx(((sizes[1] - sizes[0]) / (sizes[1] + sizes[0])) ** 2)
    assert found.label == label


def test_mostly_zero_series_are_always_flagged_and_smooth_demand_never_is():
    rng = np.random.default_rng(20)
    index = pd.date_range("2023-01-02", periods=240, freq="D")
    for k in range(6):
        # 70% zeros: a demand on a day with probability 0.3, of 1 + Poisson(2) items.
        sparse = np.where(rng.random(240) < 0.3, rng.poisson(2.0, 240) + 1, 0).astype(float)
        found = identify_series(pd.Series(sparse, index), f"sparse/{k}")
        assert Flag.INTERMITTENT_DEMAND in found.flags and found.confidence.level != Confidence.FIRM
        # Smooth demand with the odd empty day: a demand on 95% of days, 20 + Poisson(5) items.
        smooth = np.where(rng.random(240) < 0.95, rng.poisson(5.0, 240) + 20, 0).astype(float)
        assert classify_demand(smooth).label == "smooth"
        assert Flag.INTERMITTENT_DEMAND not in identify_series(pd.Series(smooth, index), f"smooth/{k}").flags


def test_a_period_longer_than_the_series_is_refused_naming_the_series_once():
    y = pd.Series(np.random.default_rng(2).normal(size=30), pd.date_range("2022-01-01", periods=30, freq="D"))
    with pytest.raises(SeriesProblem) as refused:
        identify_series(y, "plant/x", EngineOptions(period=40))
    assert str(refused.value).count("plant/x") == 1 and "seasonal period 40 is not shorter than the series" in str(refused.value)


def _persistent_ar1(n: int = 300) -> np.ndarray:
    """AR(1), phi = 0.98, unit innovations, started ten innovation SDs (two stationary SDs) above its mean."""
    rng = np.random.default_rng(4)
    y = np.empty(n)
    y[0] = 10.0
    for t in range(1, n):
        y[t] = 0.98 * y[t - 1] + rng.normal()
    return y


def _arma11(n: int = 300) -> np.ndarray:
    """ARMA(1,1), phi = 0.9, theta = 0.7 (statsmodels' sign: 1 + theta B), around a mean of 10."""
    return simulate((1, 0, 1), [0.9], [0.7], n, np.random.default_rng(5))


@pytest.mark.parametrize("series, order", [(_persistent_ar1, (1, 0, 0)), (_arma11, (1, 0, 1))])
def test_rescaled_residuals_equal_statsmodels_standardized_forecast_errors(series, order):
    # A one-step error e_t has variance r_t sigma^2 (Brockwell & Davis 1991, innovations
    # algorithm); e_t / sqrt(r_t sigma^2) is what statsmodels' Kalman filter reports as the
    # standardized forecast error v_t / sqrt(F_t) (reference library), at the same estimates.
    # The ARMA(1,1) checks the sign of the MA polynomial handed to the innovations algorithm.
    y = series()
    fit = fit_candidate(y, validate_order(order, (0, 0, 0, 0), trend="c"))
    ratios = prediction_variance_ratios(fit.estimate.ar_polynomial, fit.estimate.ma_polynomial, fit.residuals.size)
    reference = ARIMA(y, order=order, trend="c").filter(np.array([p.value for p in fit.params]))
    np.testing.assert_allclose(fit.residuals / np.sqrt(ratios * fit.estimate.sigma2),
                               reference.standardized_forecasts_error[0], rtol=1e-6, atol=1e-8)
    if order == (1, 0, 0):
        assert ratios[0] == pytest.approx(1.0 / (1.0 - fit.estimate.coefficients[0] ** 2), rel=1e-9)  # gamma_0 / sigma^2


def test_rescaled_residuals_after_a_gap_equal_statsmodels_standardized_forecast_errors():
    # After ten missing points the first error is a prediction from eleven steps back, of
    # variance sigma^2 (1 - phi^22) / (1 - phi^2), not sigma^2: the Kalman filter's F_t (Jones
    # 1980), as statsmodels' filter of the same series with its gap reports it.
    y = _persistent_ar1()
    y[100:110] = np.nan
    fit = fit_candidate(y, validate_order((1, 0, 0), (0, 0, 0, 0), trend="c"))
    ratios = prediction_variance_ratios(fit.estimate.ar_polynomial, fit.estimate.ma_polynomial, fit.residuals.size,
                                        np.isnan(fit.residuals))
    phi = fit.estimate.coefficients[0]
    assert ratios[110] == pytest.approx((1 - phi ** 22) / (1 - phi ** 2), rel=1e-9) and np.isnan(ratios[105])
    reference = ARIMA(y, order=(1, 0, 0), trend="c").filter(np.array([p.value for p in fit.params]))
    observed = ~np.isnan(y)
    np.testing.assert_allclose((fit.residuals / np.sqrt(ratios * fit.estimate.sigma2))[observed],
                               reference.standardized_forecasts_error[0][observed], rtol=1e-6, atol=1e-8)


def test_the_first_point_of_a_persistent_series_is_not_a_large_residual():
    # Predicted from the mean alone, the first error of a persistent AR is large against the
    # innovation SD (about 10 here) but ordinary against its own prediction SD.
    y = _persistent_ar1()
    fit = fit_candidate(y, validate_order((1, 0, 0), (0, 0, 0, 0), trend="c"))
    index = pd.RangeIndex(y.size)
    raw = largest_residual(fit.residuals, index)
    assert raw is not None and raw.position == 0
    ratios = prediction_variance_ratios(fit.estimate.ar_polynomial, fit.estimate.ma_polynomial, fit.residuals.size)
    assert largest_residual(fit.residuals, index, ratios) is None


def test_no_outliers_are_sought_on_intermittent_demand():
    # Found by a new user: on a monthly series with a demand in 12 of 72 months the outlier search
    # of Chen & Liu (1993), run against the smooth level a Gaussian ARIMA fits, took seven of the
    # demands for outliers and the adjusted series went below zero. A sale of 40 among sales of
    # 1 to 6 is still reported, as a large residual, for the reviewer to look at.
    rng = np.random.default_rng(20261205)
    sales = np.where(rng.random(72) < 0.17, rng.integers(1, 7, 72), 0).astype(float)
    sales[40] = 40.0
    found = identify_series(pd.Series(sales, pd.date_range("2019-01-01", periods=72, freq="MS")), "shop/cakes")
    assert Flag.INTERMITTENT_DEMAND in found.flags
    assert found.interventions == [] and Flag.OUTLIERS not in found.flags and Flag.LEVEL_SHIFT not in found.flags
    assert any("Outliers and level shifts are not sought" in words for words in found.data_notes)
    # The queue's main reason (the sale of 40 makes the sizes' CV² lumpy).
    assert found.confidence.reasons[0] == f"{found.demand_class} demand: a Gaussian ARIMA suits it poorly"
