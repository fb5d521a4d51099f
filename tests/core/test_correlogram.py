"""Checks of app.core.correlogram against statsmodels, Brockwell & Davis and ARMA theory.

Sources: statsmodels ``acf``/``pacf``/``ArmaProcess`` (reference library); Brockwell & Davis
(2016) Example 5.1.1 (values in results/reference_values.json); theoretical ACF/PACF formulas
of Box, Jenkins, Reinsel & Ljung (2015) ch. 3 and Brockwell & Davis (1991) §3.3, §5.2.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from scipy.stats import norm
from statsmodels.tsa.arima.datasets.brockwell_davis_2002 import dowj
from statsmodels.tsa.arima_process import ArmaProcess
from statsmodels.tsa.stattools import acf, pacf

from app.core.correlogram import (
    autocorrelations,
    correlogram,
    correlograms_by_length,
    lag_count,
    partial_autocorrelations,
    portfolio_correlograms,
    z_value,
)

REFERENCE = json.loads((Path(__file__).parent / "results" / "reference_values.json").read_text())
LONG_N = 20_000
SAMPLING_SES = 4  # a sample value is accepted within 4 standard errors of its theoretical value


def _simulate(ar: list[float], ma: list[float], n: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return ArmaProcess(ar, ma).generate_sample(n, distrvs=rng.standard_normal, burnin=500)


@pytest.fixture(scope="module")
def sample_series() -> dict[str, np.ndarray]:
    """Short series of several kinds, where estimator differences would show."""
    return {
        "white noise": np.random.default_rng(1).normal(size=60),
        "AR(1) 0.8": _simulate([1, -0.8], [1], 120, seed=2),
        "MA(2)": _simulate([1], [1, 0.7, -0.4], 97, seed=3),
        "random walk": np.cumsum(np.random.default_rng(4).normal(size=150)),
    }


# --- agreement with statsmodels --------------------------------------------------------------

def test_acf_and_bartlett_band_equal_statsmodels(sample_series):
    # statsmodels acf(alpha=...) centres Bartlett's MA(k-1) interval on r_k; half-width = upper - r_k.
    for name, x in sample_series.items():
        nlags = lag_count(x.size)
        ref = acf(x, nlags=nlags, alpha=0.05, fft=True, result_object=True)
        cg = correlogram(x, nlags)
        np.testing.assert_allclose(cg.acf, ref.acf[1:], atol=1e-10, err_msg=name)
        np.testing.assert_allclose(cg.acf_band, ref.confint[1:, 1] - ref.acf[1:], atol=1e-10, err_msg=name)
        np.testing.assert_array_equal(cg.lags, np.arange(1, nlags + 1))


@pytest.mark.parametrize("method", ["ldb", "ywm"])
def test_pacf_equals_statsmodels_biased_estimators(sample_series, method):
    # The module documents its PACF as statsmodels pacf(method="ldb"), which equals "ywm".
    for name, x in sample_series.items():
        nlags = lag_count(x.size)
        ref = pacf(x, nlags=nlags, method=method)
        np.testing.assert_allclose(correlogram(x, nlags).pacf, ref[1:], atol=1e-10, err_msg=name)


def test_pacf_band_is_quenouille_white_noise_band(sample_series):
    # Quenouille (1949): beyond the AR order the sample PACF is ~ N(0, 1/n).
    x = sample_series["AR(1) 0.8"]
    cg = correlogram(x, 10)
    np.testing.assert_allclose(cg.pacf_band, norm.ppf(0.975) / math.sqrt(x.size), rtol=1e-12)
    assert z_value(0.05) == pytest.approx(norm.ppf(0.975), abs=1e-12)
    assert z_value(0.01) == pytest.approx(norm.ppf(0.995), abs=1e-12)


def test_portfolio_correlograms_equal_per_row_results(sample_series):
    n = min(x.size for x in sample_series.values())
    rows = np.vstack([x[:n] for x in sample_series.values()])
    nlags = lag_count(n)
    together = portfolio_correlograms(rows, nlags)
    assert len(together) == rows.shape[0]
    for row, cg in zip(rows, together):
        alone = correlogram(row, nlags)
        np.testing.assert_allclose(cg.acf, alone.acf, atol=1e-12)
        np.testing.assert_allclose(cg.acf_band, alone.acf_band, atol=1e-12)
        np.testing.assert_allclose(cg.pacf, alone.pacf, atol=1e-12)
        np.testing.assert_allclose(cg.pacf_band, alone.pacf_band, atol=1e-12)
        np.testing.assert_allclose(cg.pacf, pacf(row, nlags=nlags, method="ldb")[1:], atol=1e-10)


def test_correlograms_by_length_group_series_of_equal_length(sample_series):
    # Series of three lengths, interleaved, in chunks of 2 rows: every one equals statsmodels'
    # acf (Bartlett bands) and pacf(method="ldb") on its own, at its own lag count.
    series = {f"{name}/{n}": x[:n] for name, x in sample_series.items() for n in (60, 90, x.size)}
    found = correlograms_by_length(series, chunk=2)
    assert list(found) == list(series)
    for name, x in series.items():
        nlags = lag_count(x.size)
        ref = acf(x, nlags=nlags, alpha=0.05, result_object=True)
        assert found[name].lags.tolist() == list(range(1, nlags + 1))
        np.testing.assert_allclose(found[name].acf, ref.acf[1:], atol=1e-10, err_msg=name)
        np.testing.assert_allclose(found[name].acf_band, ref.confint[1:, 1] - ref.acf[1:], atol=1e-10, err_msg=name)
        np.testing.assert_allclose(found[name].pacf, pacf(x, nlags=nlags, method="ldb")[1:], atol=1e-10, err_msg=name)


def test_autocorrelations_reject_impossible_lag():
    with pytest.raises(ValueError, match=r"nlags \(10\)"):
        autocorrelations(np.arange(10.0), 10)


# --- Brockwell & Davis (2016), Example 5.1.1 -----------------------------------------------

def test_dowj_differenced_autocovariances_and_pacf():
    # Dow Jones Utilities, differenced (n = 77); values from B&D Example 5.1.1, see
    # results/reference_values.json. The engine gives autocorrelations; times the biased
    # variance they are the sample autocovariances gamma(0..2).
    ref = REFERENCE["dowj_differenced"]
    x = dowj.diff().iloc[1:].to_numpy()
    assert x.size == ref["n"]
    r = autocorrelations(x, 2)
    np.testing.assert_allclose(r * np.var(x), ref["autocovariances"], atol=1e-5)
    pac = correlogram(x, 2).pacf
    # phi_11 is the Yule-Walker AR(1) coefficient, phi_22 the last Durbin-Levinson AR(2) one.
    assert pac[0] == pytest.approx(ref["yule_walker_ar1"][0], abs=1e-4)
    assert pac[1] == pytest.approx(ref["durbin_levinson_ar2"][1], abs=1e-4)


# --- theoretical ACF / PACF -------------------------------------------------------------------

def _ma1_pacf(theta: float, k: np.ndarray) -> np.ndarray:
    """phi_kk = -(-theta)^k (1 - theta^2) / (1 - theta^(2(k+1))) (Box, Jenkins, Reinsel & Ljung
    2015, §3.3; sign convention X_t = Z_t + theta Z_{t-1})."""
    return -((-theta) ** k) * (1 - theta**2) / (1 - theta ** (2 * (k + 1)))


@pytest.mark.parametrize(
    "ar, ma",
    [([1, -0.5, -0.3], [1]), ([1], [1, 0.6]), ([1, -0.7], [1, 0.4]), ([1], [1, 0.5, 0.4]), ([1, 0.6, -0.2], [1, -0.3])],
    ids=["AR(2)", "MA(1)", "ARMA(1,1)", "MA(2)", "ARMA(2,1)"],
)
def test_durbin_levinson_maps_theoretical_acf_to_theoretical_pacf(ar, ma):
    # Durbin-Levinson (Brockwell & Davis 1991, §5.2) applied to the exact ACF gives the exact PACF.
    process = ArmaProcess(ar, ma)
    np.testing.assert_allclose(partial_autocorrelations(process.acf(16)), process.pacf(16)[1:], atol=1e-10)


def test_ma1_theoretical_pacf_formula():
    theta, k = 0.6, np.arange(1, 13)
    r = ArmaProcess([1], [1, theta]).acf(13)
    np.testing.assert_allclose(partial_autocorrelations(r), _ma1_pacf(theta, k), atol=1e-12)


def _assert_within_sampling_error(sample, theory, se, label):
    z = np.abs(np.asarray(sample) - np.asarray(theory)) / np.asarray(se)
    assert np.all(z < SAMPLING_SES), f"{label}: largest deviation {z.max():.2f} standard errors at lag {int(np.argmax(z)) + 1}"


def test_ar1_acf_is_phi_to_the_k_on_long_series():
    # AR(1): rho_k = phi^k, PACF phi then 0 (Box, Jenkins, Reinsel & Ljung 2015, §3.2.4).
    phi, nlags = 0.7, 15
    k = np.arange(1, nlags + 1)
    np.testing.assert_allclose(ArmaProcess([1, -phi]).acf(nlags + 1)[1:], phi**k, atol=1e-12)
    cg = correlogram(_simulate([1, -phi], [1], LONG_N, seed=11), nlags)
    _assert_within_sampling_error(cg.acf, phi**k, cg.acf_band / z_value(), "AR(1) ACF")
    _assert_within_sampling_error(cg.pacf, np.r_[phi, np.zeros(nlags - 1)], cg.pacf_band / z_value(), "AR(1) PACF")


def test_ma1_acf_cuts_off_after_lag_one_on_long_series():
    # MA(1): rho_1 = theta / (1 + theta^2), rho_k = 0 for k >= 2 (Box, Jenkins, Reinsel & Ljung 2015, §3.3).
    theta, nlags = 0.6, 15
    rho = np.r_[theta / (1 + theta**2), np.zeros(nlags - 1)]
    np.testing.assert_allclose(ArmaProcess([1], [1, theta]).acf(nlags + 1)[1:], rho, atol=1e-12)
    cg = correlogram(_simulate([1], [1, theta], LONG_N, seed=12), nlags)
    _assert_within_sampling_error(cg.acf, rho, cg.acf_band / z_value(), "MA(1) ACF")
    _assert_within_sampling_error(cg.pacf, _ma1_pacf(theta, np.arange(1, nlags + 1)), cg.pacf_band / z_value(), "MA(1) PACF")


def test_ar2_check_values_on_long_series():
    # AR(2) phi = (0.5, 0.3): rho_1 = phi_1/(1-phi_2) = 0.714286, phi_22 = phi_2 = 0.3, PACF 0
    # beyond lag 2 (Box, Jenkins, Reinsel & Ljung 2015, §3.2; values in results/reference_values.json).
    ref = REFERENCE["ar2_theory"]
    phi1, phi2 = ref["phi"]
    nlags = lag_count(LONG_N)
    process = ArmaProcess([1, -phi1, -phi2])
    theory_acf, theory_pacf = process.acf(nlags + 1)[1:], process.pacf(nlags + 1)[1:]
    assert theory_acf[0] == pytest.approx(ref["rho_1"], abs=1e-6)
    assert theory_acf[1] == pytest.approx(phi2 + phi1**2 / (1 - phi2), abs=1e-12)
    assert theory_pacf[1] == pytest.approx(ref["phi_22"], abs=1e-12)
    cg = correlogram(_simulate([1, -phi1, -phi2], [1], LONG_N, seed=13), nlags)
    _assert_within_sampling_error(cg.acf, theory_acf, cg.acf_band / z_value(), "AR(2) ACF")
    _assert_within_sampling_error(cg.pacf[:2], [ref["rho_1"], ref["phi_22"]], cg.pacf_band[:2] / z_value(), "AR(2) PACF")
    # Beyond p the sample PACF is ~ N(0, 1/n) (Quenouille 1949).
    _assert_within_sampling_error(cg.pacf[2:], 0.0, cg.pacf_band[2:] / z_value(), "AR(2) PACF beyond lag 2")


def test_arma11_lag_one_formula_on_long_series():
    # ARMA(1,1): rho_1 = (1 + phi theta)(phi + theta) / (1 + 2 phi theta + theta^2), rho_k = phi rho_{k-1}
    # (Box, Jenkins, Reinsel & Ljung 2015, §3.4).
    phi, theta, nlags = 0.7, 0.4, 12
    rho1 = (1 + phi * theta) * (phi + theta) / (1 + 2 * phi * theta + theta**2)
    rho = rho1 * phi ** np.arange(nlags)
    np.testing.assert_allclose(ArmaProcess([1, -phi], [1, theta]).acf(nlags + 1)[1:], rho, atol=1e-12)
    cg = correlogram(_simulate([1, -phi], [1, theta], LONG_N, seed=14), nlags)
    _assert_within_sampling_error(cg.acf, rho, cg.acf_band / z_value(), "ARMA(1,1) ACF")


# --- how many lags are shown -------------------------------------------------------------------

@pytest.mark.parametrize(
    "n, period, expected",
    [
        (100, None, 20),  # floor(10 log10 100) = 20, below the cap 49
        (1000, None, 30),  # floor(30) = 30
        (100, 12, 25),  # raised to 2s + 1 = 25 so two seasonal lags show
        (300, 4, 24),  # floor(24.77) = 24 already exceeds 2s + 1 = 9
        (30, None, 14),  # floor(14.77) = 14, also the cap n // 2 - 1 = 14
        (40, 12, 19),  # 2s + 1 = 25, capped at 19
        (4, None, 1),  # never below one lag
    ],
)
def test_lag_count_follows_documented_rule(n, period, expected):
    assert lag_count(n, period) == expected


def test_lag_count_is_r_default_it_cites():
    for n in (50, 77, 120, 309):
        assert lag_count(n) == math.floor(10 * math.log10(n)), n


def test_lag_count_stays_within_what_statsmodels_pacf_accepts():
    # statsmodels pacf refuses nlags >= n // 2 (statsmodels #4663); the cap keeps us inside it.
    rng = np.random.default_rng(5)
    for n in (13, 20, 31, 50, 51, 80):
        x = rng.normal(size=n)
        nlags = lag_count(n, 12)
        np.testing.assert_allclose(correlogram(x, nlags).pacf, pacf(x, nlags=nlags, method="ldb")[1:], atol=1e-10)
