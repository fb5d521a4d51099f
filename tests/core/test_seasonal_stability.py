"""The Canova-Hansen test of a fixed seasonal pattern (app/core/seasonal_stability.py).

Checked against: the KPSS critical values (Kwiatkowski, Phillips, Schmidt & Shin 1992, Table 1,
as statsmodels' ``kpss`` carries them), which are the p = 1 case of the von Mises law; a Monte
Carlo of the law's series representation ``Σ_k χ²_p / (k²π²)`` (Anderson & Darling 1952); and
simulated processes whose seasonal pattern is fixed or wanders.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd
import pytest
from accuracy_batch import simulate
from statsmodels.tsa.stattools import kpss

from app.core.identify import identify_series
from app.core.seasonal_stability import canova_hansen, seasonal_regressors, vm_cdf, vm_quantile
from app.core.vocabulary import Flag


def test_one_degree_of_freedom_is_the_kpss_law():
    # KPSS (1992) Table 1, eta_mu, simulated: 10% 0.347, 5% 0.463, 2.5% 0.574, 1% 0.739
    # (statsmodels' table).
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        table = kpss(np.random.default_rng(0).normal(size=200), regression="c", nlags="legacy")[3]
    for label, level in (("10%", 0.90), ("5%", 0.95), ("2.5%", 0.975), ("1%", 0.99)):
        assert vm_quantile(level, 1) == pytest.approx(table[label], abs=0.008)


def test_one_degree_of_freedom_is_the_cramer_von_mises_limit():
    # The asymptotic Cramér-von Mises W² points computed from the exact law by Anderson &
    # Darling (1952): 0.3473, 0.4614, 0.5806, 0.7435 (values from memory).
    for level, point in ((0.90, 0.3473), (0.95, 0.4614), (0.975, 0.5806), (0.99, 0.7435)):
        assert vm_quantile(level, 1) == pytest.approx(point, abs=0.0006)


@pytest.mark.parametrize("p", [3, 11])
def test_distribution_matches_its_series_representation(p):
    rng = np.random.default_rng(20261203)
    k = np.arange(1, 301)
    draws = (rng.chisquare(p, size=(40_000, k.size)) / (k**2 * math.pi**2)).sum(axis=1) + p / (math.pi**2 * k.size)
    for x in np.quantile(draws, [0.5, 0.9, 0.95, 0.99]):
        assert vm_cdf(float(x), p) == pytest.approx(float(np.mean(draws <= x)), abs=0.006)


def test_mean_of_the_law():
    # E VM(p) = p Σ 1/(k²π²) = p/6: the integral of the survival function.
    grid = np.linspace(0.0, 8.0, 1601)
    survival = np.array([1.0 - vm_cdf(float(x), 6) for x in grid])
    assert float(np.sum(survival) * (grid[1] - grid[0])) == pytest.approx(1.0, abs=0.02)


def test_regressors_span_the_seasonal_means():
    s = 12
    f = seasonal_regressors(48, s)
    assert f.shape == (48, s - 1)
    dummies = np.tile(np.eye(s), (4, 1))
    design = np.column_stack([np.ones(48), f])
    # A constant plus s - 1 trigonometric terms span exactly the s seasonal dummies.
    coefficients, *_ = np.linalg.lstsq(design, dummies, rcond=None)
    assert np.allclose(design @ coefficients, dummies, atol=1e-10)


def _ar1(rng, n, phi):
    return simulate((1, 0, 0), [phi], [], n, rng) - 10.0


def _seasonal_walk(rng, n, s):
    e = rng.normal(size=n + s)
    z = np.zeros(n + s)
    for t in range(s, n + s):
        z[t] = z[t - s] + e[t]
    return z[s:]


def test_fixed_profile_kept_and_wandering_one_rejected():
    rng = np.random.default_rng(7)
    s, n, runs = 4, 240, 40
    profile = np.array([3.0, -1.0, 0.5, -2.5])
    fixed = [canova_hansen(np.tile(profile, n // s) + _ar1(rng, n, 0.5), s) for _ in range(runs)]
    wandering = [canova_hansen(_seasonal_walk(rng, n, s), s) for _ in range(runs)]
    assert np.mean([r.fixed for r in fixed]) >= 0.85
    assert np.mean([not r.fixed for r in wandering]) >= 0.85
    assert all(r.df == 3 and r.critical_value == pytest.approx(vm_quantile(0.95, 3)) for r in fixed)


@pytest.mark.slow
def test_power_grows_with_length_at_monthly_period():
    """The figures the seasonality module quotes: a monthly seasonal random walk is rarely
    rejected at 72 points and nearly always at 240 (Schwert lags; 5% level)."""
    rng = np.random.default_rng(11)
    rejected = {n: np.mean([not canova_hansen(_seasonal_walk(rng, n, 12), 12).fixed for _ in range(60)]) for n in (72, 240)}
    assert rejected[72] <= 0.2
    assert rejected[240] >= 0.9


def test_engine_flags_a_fixed_profile_but_not_a_wandering_one():
    rng = np.random.default_rng(5)
    n, s = 240, 12
    index = pd.date_range("2000-01-01", periods=n, freq="MS")
    flagged = 0
    for _ in range(3):
        y = np.tile(rng.normal(size=s) * 3, n // s) + _ar1(rng, n, 0.7) + 50
        found = identify_series(pd.Series(y, index), "fixed")
        assert found.seasonal.differencing.stability is not None
        flagged += Flag.FIXED_SEASONALITY in found.flags
    assert flagged >= 2
    # Airline process (Box & Jenkins' series G model form): theta = -0.4, Theta = -0.6.
    e = rng.normal(size=n + 13)
    w = e[13:] - 0.4 * e[12:-1] - 0.6 * e[1:-12] + 0.24 * e[:-13]
    z = np.zeros(n)
    for t in range(n):
        z[t] = w[t] + (z[t - 1] if t >= 1 else 0) + (z[t - 12] if t >= 12 else 0) - (z[t - 13] if t >= 13 else 0)
    found = identify_series(pd.Series(z + 100, index), "airline")
    assert Flag.FIXED_SEASONALITY not in found.flags
