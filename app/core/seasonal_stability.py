"""Is the seasonal pattern fixed or does it wander? The Canova-Hansen test.

A strong seasonal pattern (:func:`app.core.seasonality.seasonal_strength`) can be a fixed
profile (the same seasonal means every year, plus stationary noise) or a stochastic one that
drifts from year to year (a seasonal unit root). Only the second needs a seasonal difference; a
seasonal difference of a fixed profile leaves a seasonal MA factor with a root on the unit
circle (Θ near −1), which is the differenced form of fixed seasonal means. The strength measure
cannot tell the two apart; this test can.

* **Null hypothesis**: the seasonal pattern is deterministic (stable seasonal means).
  **Alternative**: the seasonal coefficients follow random walks, i.e. unit roots at the
  seasonal frequencies (Canova & Hansen 1995, §2).
* **Regression**: the series on a constant and the ``s − 1`` trigonometric seasonal regressors
  ``cos(2πjt/s)``, ``sin(2πjt/s)``, ``j = 1 … ⌊s/2⌋`` (the sine at ``j = s/2`` is identically
  zero and dropped), by least squares.
* **Statistic**: ``L = n⁻² Σ_t F_t' Ω̂⁻¹ F_t`` with ``F_t = Σ_{i ≤ t} f_i ê_i`` the partial sums
  of the regressors times the residuals and ``Ω̂`` the Newey-West long-run covariance of
  ``f_t ê_t`` (Bartlett weights). Under the null ``L`` tends to the generalised von Mises
  distribution ``VM(s − 1)`` (Canova & Hansen 1995, Theorem 1; Nyblom 1989), the law of
  ``∫₀¹ B(r)'B(r) dr`` for ``s − 1`` independent Brownian bridges.
* **Zero frequency**: the test assumes no unit root at frequency zero. The series is therefore
  tested in first differences; a difference leaves a fixed seasonal profile fixed (the
  difference of seasonal means is again a set of seasonal means) and keeps the spectrum at the
  seasonal frequencies away from zero, so the null distribution is unchanged and only some
  power is lost when the levels were stationary.
* **Lag truncation** of ``Ω̂``: Schwert's (1989) short rule ``⌊4 (n/100)^{1/4}⌋``. The power of
  this family of tests falls as the truncation grows (Kwiatkowski et al. 1992, §5, for KPSS):
  with the long rule ``⌊12 (n/100)^{1/4}⌋`` the long-run covariance absorbs the wandering
  seasonal pattern, and a monthly seasonal random walk of 240 points was rejected in none of 60
  runs, against nearly all with the short rule (``tests/core/test_seasonal_stability.py``).
* **p-value**: exact, from the distribution function of ``VM(p)`` computed by inverting its
  characteristic function ``Π_k (1 − 2it/(k²π²))^{−p/2}`` (Gil-Pelaez 1951), because
  ``∫B² = Σ_k Z_k²/(k²π²)`` for a Brownian bridge (Anderson & Darling 1952). For ``p = 1`` this
  is the KPSS level-stationarity distribution, whose published 5% point is 0.463 (Kwiatkowski
  et al. 1992, Table 1).

References
----------
.. [1] Canova, F. & Hansen, B.E. (1995). Are seasonal patterns constant over time? A test for
   seasonal stability. *Journal of Business & Economic Statistics* 13, 237-252.
.. [2] Nyblom, J. (1989). Testing for the constancy of parameters over time. *JASA* 84, 223-230.
.. [3] Kwiatkowski, D., Phillips, P.C.B., Schmidt, P. & Shin, Y. (1992). Testing the null
   hypothesis of stationarity against the alternative of a unit root. *J. Econometrics* 54,
   159-178.
.. [4] Newey, W.K. & West, K.D. (1987). A simple, positive semi-definite, heteroskedasticity and
   autocorrelation consistent covariance matrix. *Econometrica* 55, 703-708.
.. [5] Schwert, G.W. (1989). Tests for unit roots: a Monte Carlo investigation. *J. Business &
   Economic Statistics* 7, 147-159.
.. [6] Gil-Pelaez, J. (1951). Note on the inversion theorem. *Biometrika* 38, 481-482.
.. [7] Anderson, T.W. & Darling, D.A. (1952). Asymptotic theory of certain "goodness of fit"
   criteria based on stochastic processes. *Ann. Math. Statist.* 23, 193-212.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from scipy.optimize import brentq

from app.core.p_values import p_words

STABILITY_LEVEL = 0.05
_SERIES_TERMS = 600  # terms of the product form; the rest enter through their first-order term
_GRID_POINTS = 6000


@dataclass(frozen=True)
class SeasonalStability:
    """The Canova-Hansen statistic, its 5% critical value and p-value, and whether the null of a
    fixed seasonal pattern stands at :data:`STABILITY_LEVEL`."""

    statistic: float
    critical_value: float
    p_value: float
    df: int
    lags: int

    @property
    def fixed(self) -> bool:
        return self.p_value >= STABILITY_LEVEL

    def words(self) -> str:
        verdict = ("does not reject a fixed seasonal pattern" if self.fixed
                   else "rejects a fixed seasonal pattern: the seasonal pattern wanders")
        sign = "<" if self.statistic < self.critical_value else ">="
        return (f"Canova-Hansen test of seasonal stability: L = {self.statistic:.2f} {sign} {self.critical_value:.2f} "
                f"(5% point, {self.df} seasonal frequencies), {p_words(self.p_value)}; it {verdict}.")


@lru_cache(maxsize=32)
def _characteristic_grid(p: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The characteristic function of ``VM(p)`` on a grid ``t = u²`` and the trapezoid weights.

    The product form ``Π_k (1 − 2it/(k²π²))^{−p/2}`` is summed in logs (principal log of each
    factor, all with real part 1) over :data:`_SERIES_TERMS` terms; the remaining terms enter
    through their first-order term ``it Σ_{k>K} 2/(k²π²) ≈ 2it/(π²K)``. ``|φ(t)|`` falls like
    ``exp(−c p √t)``, so ``t`` runs to ``3000/p + 100``, where it is below 1e-10.
    """
    u = np.linspace(0.0, math.sqrt(3000.0 / p + 100.0), _GRID_POINTS)[1:]
    t = u * u
    k = np.arange(1, _SERIES_TERMS + 1, dtype=float)
    a = 2.0 / (k * k * math.pi**2)
    log_phi = np.empty(t.size, dtype=complex)
    for chunk in range(0, t.size, 2000):
        tc = t[chunk:chunk + 2000, None]
        log_phi[chunk:chunk + 2000] = -0.5 * p * np.log(1.0 - 1j * tc * a).sum(axis=1)
    log_phi += 1j * t * p / (math.pi**2 * _SERIES_TERMS)
    weights = np.full(u.size, u[1] - u[0])
    weights[-1] *= 0.5
    return t, np.exp(log_phi), weights


def vm_cdf(x: float, p: int) -> float:
    """Distribution function of the generalised von Mises law ``VM(p)`` at ``x``.

    Gil-Pelaez inversion ``F(x) = 1/2 − (1/π) ∫₀^∞ Im(e^{−itx} φ(t))/t dt``, integrated over
    ``u = √t`` (``dt/t = 2 du/u``; the integrand tends to ``2u (E VM − x)`` at 0) by the
    trapezoid rule on :func:`_characteristic_grid`.

    Parameters
    ----------
    x : float
        Where to evaluate it (``x <= 0`` gives 0).
    p : int
        Degrees of freedom: the number of independent Brownian bridges.

    References
    ----------
    .. [1] Gil-Pelaez (1951), *Biometrika* 38, 481-482.
    .. [2] Nyblom (1989), *JASA* 84, 223-230 (the law of the statistic).
    """
    if x <= 0.0:
        return 0.0
    t, phi, weights = _characteristic_grid(p)
    integrand = 2.0 * (np.exp(-1j * t * x) * phi).imag / t * np.sqrt(t)
    value = float(np.sum(weights * integrand))
    return float(min(1.0, max(0.0, 0.5 - value / math.pi)))


@lru_cache(maxsize=64)
def vm_quantile(level: float, p: int) -> float:
    """The ``level`` quantile of ``VM(p)`` (e.g. ``level = 0.95`` for the 5% critical value)."""
    mean, sd = p / 6.0, math.sqrt(p / 45.0)  # E VM(p) = p Σ 1/(k²π²), Var = p Σ 2/(k⁴π⁴)
    return float(brentq(lambda x: vm_cdf(x, p) - level, 1e-6, mean + 12.0 * sd + 2.0, xtol=1e-6))


def seasonal_regressors(n: int, period: int) -> np.ndarray:
    """The ``n × (period − 1)`` trigonometric seasonal regressors of Canova & Hansen (1995), §2."""
    t = np.arange(1, n + 1, dtype=float)
    columns = []
    for j in range(1, period // 2 + 1):
        angle = 2.0 * math.pi * j * t / period
        columns.append(np.cos(angle))
        if 2 * j != period:
            columns.append(np.sin(angle))
    return np.column_stack(columns)


def schwert_lags(n: int) -> int:
    """``⌊4 (n/100)^{1/4}⌋`` (Schwert 1989, the short rule), the long-run covariance's lag truncation."""
    return int(math.floor(4.0 * (n / 100.0) ** 0.25))


def canova_hansen(x: np.ndarray, period: int) -> SeasonalStability:
    """Canova-Hansen test of a fixed seasonal pattern against seasonal unit roots.

    Parameters
    ----------
    x : ndarray
        The series (after any variance-stabilising transform, before any differencing); it is
        tested in first differences (see the module notes).
    period : int
        The seasonal period ``s >= 2``.

    Returns
    -------
    SeasonalStability
        The statistic ``L``, the 5% point and p-value of ``VM(s − 1)``, and the lags used.

    References
    ----------
    .. [1] Canova & Hansen (1995), *JBES* 13, 237-252, §2 (statistic), Theorem 1 (null law).
    .. [2] Newey & West (1987), *Econometrica* 55, 703-708 (long-run covariance).
    """
    y = np.diff(np.asarray(x, dtype=float))
    n = y.size
    f = seasonal_regressors(n, period)
    design = np.column_stack([np.ones(n), f])
    beta, *_ = np.linalg.lstsq(design, y, rcond=None)
    e = y - design @ beta
    scores = f * e[:, None]
    lags = min(schwert_lags(n), n - 1)
    omega = scores.T @ scores / n
    for j in range(1, lags + 1):
        gamma = scores[j:].T @ scores[:-j] / n
        omega += (1.0 - j / (lags + 1.0)) * (gamma + gamma.T)
    partial = np.cumsum(scores, axis=0)
    solved = np.linalg.solve(omega, partial.T)
    statistic = float(np.sum(partial.T * solved) / n**2)
    df = f.shape[1]
    return SeasonalStability(statistic=statistic, critical_value=vm_quantile(1.0 - STABILITY_LEVEL, df),
                             p_value=1.0 - vm_cdf(statistic, df), df=df, lags=lags)
