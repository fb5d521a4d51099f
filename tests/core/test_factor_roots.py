"""Root checks factor by factor: app.core.fitting.factor_polynomials, factor_roots, root_flags.

A multiplicative seasonal model ``phi(B) Phi(B^s) w_t = theta(B) Theta(B^s) e_t`` (Box, Jenkins,
Reinsel & Ljung 2015, *Time Series Analysis*, 5th ed., §9.1, from memory) is stationary and
invertible when each factor is, each factor's roots taken in its own variable (``B`` for
``phi`` and ``theta``, ``B^s`` for ``Phi`` and ``Theta``); a common factor, the redundancy that
makes an order over-specified (BJRL 2015 §7.3, from memory), is shared by ``phi`` and ``theta``
or by ``Phi`` and ``Theta``. Judged on the expanded polynomials both checks go wrong: ``1 - 0.8
B^12`` has its 12 roots at modulus ``0.8^(-1/12) = 1.019``, inside the 1.02 margin, and an
ordinary root lies close to one of those 12 without being a common factor.

Sources: numpy's ``np.roots`` on the factor coefficients; statsmodels ``SARIMAX`` results
(reference library) for the factor polynomials, their product and the roots of the product
(``arroots``/``maroots``, which statsmodels computes for the expanded polynomial only); monthly
Mauna Loa CO2 (``statsmodels.datasets.co2``), to which Cryer & Chan (2008, *Time Series
Analysis with Applications in R*, 2nd ed., ch. 10, from memory) fit the airline model
ARIMA(0,1,1)(0,1,1)12 of BJRL (2015) §9.2.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import statsmodels.api as sm
from statsmodels.tsa.arima_process import ArmaProcess
from statsmodels.tsa.statespace.sarimax import SARIMAX

from app.core.fitting import CANCELLING_ROOT_DISTANCE, NEAR_UNIT_ROOT, factor_polynomials, factor_roots, fit_candidate, root_flags
from app.core.likelihood import ArmaSpec
from app.core.order import validate_order

FLAGS = {"near_unit_root", "redundant_roots"}


def _flags(spec: ArmaSpec, coefficients: list[float]) -> list[str]:
    return root_flags(*factor_roots(spec, np.array(coefficients)))


def _in_b(factor: np.ndarray, s: int) -> np.ndarray:
    """A seasonal factor in ``z = B^s`` written as a polynomial in ``B`` (increasing powers)."""
    out = np.zeros(s * (factor.size - 1) + 1)
    out[::s] = factor
    return out


def _expanded_roots_flags(ar: np.ndarray, ma: np.ndarray) -> set[str]:
    """What judging the expanded polynomials (increasing powers) would say: the old rule."""
    ar_roots, ma_roots = np.roots(ar[::-1]), np.roots(ma[::-1])
    found = set()
    if any(np.abs(r).min() < NEAR_UNIT_ROOT for r in (ar_roots, ma_roots) if r.size):
        found.add("near_unit_root")
    if ar_roots.size and ma_roots.size and np.abs(1 / ar_roots[:, None] - 1 / ma_roots[None, :]).min() < CANCELLING_ROOT_DISTANCE:
        found.add("redundant_roots")
    return found


# --- the factor rule on given coefficients ---------------------------------------------------

@pytest.mark.parametrize(
    "spec, coefficients, old_flag",
    [
        (ArmaSpec(Q=1, s=12), [-0.8], "near_unit_root"),  # 1 - 0.8 B^12: roots at modulus 1.019
        (ArmaSpec(P=1, s=52), [0.4], "near_unit_root"),  # weekly data, yearly cycle: 0.4^(-1/52) = 1.018
        (ArmaSpec(p=1, Q=1, s=12), [0.9, -0.4], "redundant_roots"),  # 1/0.9 near a root of 1 - 0.4 B^12
    ],
    ids=["seasonal MA -0.8, s=12", "seasonal AR 0.4, s=52", "AR 0.9 with seasonal MA -0.4"],
)
def test_seasonal_factors_are_judged_on_their_own_scale(spec, coefficients, old_flag):
    ar_factor, ma_factor, sar_factor, sma_factor = factor_polynomials(spec, np.array(coefficients))
    expanded = _expanded_roots_flags(np.polymul(ar_factor, _in_b(sar_factor, spec.s)), np.polymul(ma_factor, _in_b(sma_factor, spec.s)))
    assert old_flag in expanded, "precondition: the expanded polynomial would raise the flag"
    assert _flags(spec, coefficients) == []


@pytest.mark.parametrize(
    "spec, coefficients, flag",
    [
        (ArmaSpec(p=1, q=1), [0.5, -0.45], "redundant_roots"),  # inverse roots 0.5 and 0.45
        (ArmaSpec(p=1), [0.995], "near_unit_root"),  # root 1/0.995 = 1.005
        (ArmaSpec(Q=1, s=12), [-0.995], "near_unit_root"),  # root 1.005 in B^12
        (ArmaSpec(P=1, Q=1, s=4), [0.6, -0.55], "redundant_roots"),  # (1 - 0.6 B^4) against (1 - 0.55 B^4)
    ],
    ids=["ARMA(1,1) 0.5 -0.45", "AR(1) 0.995", "seasonal MA -0.995", "seasonal ARMA(1,1) 0.6 -0.55"],
)
def test_genuine_problems_are_still_flagged(spec, coefficients, flag):
    assert _flags(spec, coefficients) == [flag]


def test_thresholds_apply_to_each_factor_roots():
    # Just inside and just outside the margins, factor by factor.
    assert _flags(ArmaSpec(P=1, s=12), [1 / (NEAR_UNIT_ROOT - 1e-3)]) == ["near_unit_root"]
    assert _flags(ArmaSpec(P=1, s=12), [1 / (NEAR_UNIT_ROOT + 1e-3)]) == []
    gap = CANCELLING_ROOT_DISTANCE
    assert _flags(ArmaSpec(P=1, Q=1, s=12), [0.3, -(0.3 + gap - 1e-3)]) == ["redundant_roots"]
    assert _flags(ArmaSpec(P=1, Q=1, s=12), [0.3, -(0.3 + gap + 1e-3)]) == []


# --- the factors against numpy and statsmodels -----------------------------------------------

ORDERS = [((2, 0, 1), (1, 0, 1, 12)), ((1, 0, 2), (2, 0, 1, 7)), ((0, 0, 1), (0, 0, 2, 4))]


@pytest.fixture(scope="module", params=ORDERS, ids=[f"{o}{so}" for o, so in ORDERS])
def fitted(request):
    order, seasonal = request.param
    s = seasonal[3]
    ar = np.polymul([1, -0.5, 0.2], _in_b(np.array([1, -0.4]), s))
    ma = np.polymul([1, 0.3], _in_b(np.array([1, -0.5]), s))
    rng = np.random.default_rng([20261205, s])
    y = ArmaProcess(ar, ma).generate_sample(400, distrvs=rng.standard_normal, burnin=400)
    model = validate_order(order, seasonal, trend="n")
    fit = fit_candidate(y, model)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        reference = SARIMAX(y, order=order, seasonal_order=seasonal).smooth(np.r_[fit.estimate.coefficients, fit.estimate.sigma2])
    return model, fit, reference


def _assert_same_roots(got: np.ndarray, want: np.ndarray, tol: float) -> None:
    """The same multiset of complex numbers, each matched to its nearest (order-free)."""
    assert got.size == want.size
    if not got.size:
        return
    for a, b in ((got, want), (want, got)):
        assert np.abs(a[:, None] - b[None, :]).min(axis=1).max() < tol * max(1.0, np.abs(b).max())


def test_factor_roots_are_numpy_roots_of_the_factor_coefficients(fitted):
    model, fit, _ = fitted
    spec, coefficients = fit.estimate.spec, fit.estimate.coefficients
    by_name = dict(zip(spec.names(), coefficients))
    assert [p.name for p in fit.params[:-1]] == spec.names()

    def named(prefix: str) -> np.ndarray:
        return np.array([v for name, v in by_name.items() if name.startswith(prefix) and (".S." in name) == (".S." in prefix)])

    # 1 - phi_1 z - ... (AR) and 1 + theta_1 z + ... (MA); np.roots takes the highest power first.
    expected = [np.r_[1.0, -named("ar.L")], np.r_[1.0, named("ma.L")], np.r_[1.0, -named("ar.S.")], np.r_[1.0, named("ma.S.")]]
    assert [f.size - 1 for f in expected] == [model.p, model.q, model.P, model.Q]
    for got, coefficients_increasing in zip(factor_roots(spec, coefficients), expected):
        _assert_same_roots(got, np.roots(coefficients_increasing[::-1]), 1e-10)


def test_factors_are_statsmodels_factors_and_their_product_the_expanded_polynomial(fitted):
    _, fit, reference = fitted
    spec, estimate = fit.estimate.spec, fit.estimate
    s = spec.s
    ar_factor, ma_factor, sar_factor, sma_factor = factor_polynomials(spec, estimate.coefficients)
    np.testing.assert_allclose(ar_factor, reference.polynomial_ar, atol=1e-12)
    np.testing.assert_allclose(ma_factor, reference.polynomial_ma, atol=1e-12)
    np.testing.assert_allclose(_in_b(sar_factor, s), reference.polynomial_seasonal_ar, atol=1e-12)
    np.testing.assert_allclose(_in_b(sma_factor, s), reference.polynomial_seasonal_ma, atol=1e-12)
    # The engine's expanded polynomials (what its Kalman filter runs on) are the products.
    np.testing.assert_allclose(estimate.ar_polynomial, np.polymul(ar_factor, _in_b(sar_factor, s)), atol=1e-12)
    np.testing.assert_allclose(estimate.ma_polynomial, np.polymul(ma_factor, _in_b(sma_factor, s)), atol=1e-12)
    np.testing.assert_allclose(estimate.ar_polynomial, reference.polynomial_reduced_ar, atol=1e-12)
    # statsmodels' arroots/maroots, of the expanded polynomial: the union of each factor's
    # roots in B and the s-th roots of the seasonal factor's roots.
    ar_roots, ma_roots, sar_roots, sma_roots = factor_roots(spec, estimate.coefficients)
    for own, seasonal, reference_roots in ((ar_roots, sar_roots, reference.arroots), (ma_roots, sma_roots, reference.maroots)):
        in_b = [complex(r) ** (1 / s) * np.exp(2j * np.pi * k / s) for r in seasonal for k in range(s)]
        _assert_same_roots(np.r_[own, np.array(in_b, dtype=complex)], np.asarray(reference_roots), 1e-6)


# --- fits -------------------------------------------------------------------------------------

@pytest.fixture(scope="module")
def co2_1959_1990() -> np.ndarray:
    """Monthly mean Mauna Loa CO2 1959-1990 (weekly record averaged to months, the empty months
    linearly interpolated)."""
    weekly = sm.datasets.co2.load_pandas().data["co2"]
    return weekly.resample("MS").mean().loc["1959-01":"1990-12"].interpolate(method="linear").to_numpy()


def test_airline_model_on_co2_has_no_root_flags(co2_1959_1990):
    # Cryer & Chan (2008) ch. 10 and BJRL (2015) §9.2 (from memory): the airline model fits.
    fit = fit_candidate(co2_1959_1990, validate_order((0, 1, 1), (0, 1, 1, 12)))
    assert fit.converged
    theta, big_theta = (p.value for p in fit.params[:2])
    assert -0.95 < big_theta < -0.6 and -0.6 < theta < -0.2, fit.params
    assert "near_unit_root" in _expanded_roots_flags(fit.estimate.ar_polynomial, fit.estimate.ma_polynomial), \
        "precondition: the expanded MA polynomial has roots within the margin"
    assert FLAGS.isdisjoint(fit.flags), fit.flags


def _ar1_seasonal_ma1(seed: int, n: int = 240) -> np.ndarray:
    """ARIMA(1,0,0)(0,1,1)12 with phi = 0.85, Theta = -0.6: the stationary ARMA part by
    statsmodels ArmaProcess, then the seasonal difference undone from zero starting values."""
    rng = np.random.default_rng([20261206, seed])
    w = ArmaProcess([1, -0.85], _in_b(np.array([1.0, -0.6]), 12)).generate_sample(n - 12, distrvs=rng.standard_normal, burnin=400)
    y = np.zeros(n)
    for t in range(12, n):
        y[t] = y[t - 12] + w[t - 12]
    return y


def test_true_ar1_seasonal_ma1_fitted_at_its_order_has_no_root_flags():
    model = validate_order((1, 0, 0), (0, 1, 1, 12))
    old_rule = 0
    for seed in range(6):
        fit = fit_candidate(_ar1_seasonal_ma1(seed), model)
        assert fit.converged
        assert FLAGS.isdisjoint(fit.flags), (seed, fit.flags, fit.params)
        old_rule += bool(_expanded_roots_flags(fit.estimate.ar_polynomial, fit.estimate.ma_polynomial))
    assert old_rule >= 3, "precondition: the expanded polynomials would have flagged most of these fits"


def test_over_seasonally_differenced_white_noise_gets_near_unit_root():
    # A seasonal difference of white noise is a seasonal MA(1) with Theta = -1: a unit root of
    # the seasonal MA factor (BJRL 2015 §9.2, over-differencing, from memory). 40 seasons, so
    # the estimate of Theta gets close to -1.
    for seed in range(3):
        e = np.random.default_rng(seed).normal(size=480)
        fit = fit_candidate(e, validate_order((0, 0, 0), (0, 1, 1, 12)))
        assert fit.params[0].value < -0.98
        assert "near_unit_root" in fit.flags
