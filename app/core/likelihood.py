"""Exact Gaussian likelihood of a seasonal ARMA model, compiled, and its maximum.

The engine fits every candidate order by exact maximum likelihood. This module does it with a
Kalman filter compiled by numba, so that the cost of a fit is the arithmetic of its likelihood
evaluations rather than the bookkeeping around them.

* Model: the (already differenced) series ``w`` follows ``phi(B) Phi(B^s) (w_t - mu) =
  theta(B) Theta(B^s) e_t`` with ``e_t`` iid N(0, sigma2). The multiplicative polynomials are
  expanded to one AR and one MA polynomial and put in Harvey's state-space form
  (state dimension ``r = max(p_full, q_full + 1)``, transition with the AR coefficients in the
  first column and an identity above the diagonal; Harvey 1989, §3.3; Durbin & Koopman 2012,
  §3.4).
* Start-up: the state starts at its stationary distribution; its covariance solves
  ``P = T P T' + R R'`` and is built from the model's autocovariances in O(r^2) (Brockwell &
  Davis 1991, §3.3; McLeod 1975), the route of Gardner, Harvey & Phillips (1980), instead of
  doubling (Anderson & Moore 1979, §6.7), whose O(r^3) products cost up to half of a seasonal
  evaluation; a complete series needs only its first column (:func:`_stationary_first_column`).
  The likelihood is the exact one of Gardner, Harvey & Phillips (1980), not a
  conditional sum of squares.
* Recursions: from a stationary start every change of the state covariance has rank one, so
  a complete series is filtered by the Chandrasekhar recursions in O(r) per step (Morf, Sidhu
  & Kailath 1974; Herbst 2015) rather than by the O(r^2) covariance update, which a seasonal
  model with an MA root near the unit circle runs to the end of the series (in a profile of
  three real monthly series of tests/benchmarks/real_forecasts.py none of the costliest
  seasonal fits reached its steady state). A series with missing points keeps the covariance
  update for its residuals; for the likelihood alone, a few missing points are instead given
  a regression column each, which keeps the Chandrasekhar path and, with a determinant
  correction, gives the same likelihood (Gomez, Maravall & Pena 1999; :func:`_with_indicators`).
  On the last 2,688 hours of the JFK temperatures of ``nycflights13::weather`` (14 missing),
  whose seasonal candidates have state dimensions of 25 to 49, the whole identification took
  258 s of CPU this way; on the covariance update it had not finished after 13 minutes.
* Profiled out: the innovation variance (``sigma2 = S / n`` with ``S`` the weighted sum of
  squared innovations) and the coefficients of the regression columns (a mean, a time trend):
  the columns go through the same filter and their coefficients are the generalised-least-
  squares ones (Harvey 1989, §3.4.2; Kohn & Ansley 1985). The log-likelihood left to maximise is
  ``-n/2 (log 2 pi + 1 + log sigma2_hat) - 1/2 sum log F_t``.
* Missing points: a NaN in ``w`` is a missing observation. The filter skips its measurement
  update, so the state and its covariance are carried forward by the transition alone; the
  likelihood sums over the observed points only and ``n`` above is their number (Jones 1980;
  Durbin & Koopman 2012, §4.10). The residual at a missing point is NaN.
* Parameters: each polynomial is written through its partial autocorrelations, mapped from the
  real line by ``x / sqrt(1 + x^2)`` and turned into coefficients by the Durbin-Levinson
  recursion (Barndorff-Nielsen & Schou 1973; Monahan 1984; Jones 1980), so every point the
  optimiser visits is stationary and invertible. This is the parameterisation statsmodels uses
  when it enforces stationarity and invertibility.
* Optimiser: BFGS with a backtracking line search (Nocedal & Wright 2006, §6.1 and §3.1),
  compiled with the likelihood so that a whole optimisation runs without returning to Python
  (scipy's L-BFGS-B spent as long in its Python bookkeeping as in the likelihood here), on the
  profile log-likelihood per observation with a finite-difference gradient (forward differences
  while it is large, central ones near the optimum and at every stop), from several
  starts: two-step Hannan-Rissanen regressions (Hannan & Rissanen 1982) with two lengths of
  the long autoregression, and the optimum of any smaller order the caller passes
  (:func:`nested_start`); the best optimum is kept, which protects against the local optima a
  single start can end in. Most later starts lead to the optimum an earlier one reached; such a
  run stops as soon as it is next to that optimum (:data:`BASIN_RADIUS`). White noise is a
  start of its own only where no regression start exists (a short series); elsewhere it
  competes only to be the one a screen continues from (:func:`screen_arma`). Measured over the 3,509 fits the engine made on 75 real series
  (monthly, quarterly, weekly, daily, yearly): the runs from white noise took 34% of all
  optimiser steps and reached a higher optimum than every other start in 8 fits (0.2%), by
  0.4-1.3 log-likelihood units, all of over-parameterised seasonal orders.
* Standard errors: from a central-difference Hessian of the log-likelihood (variance still
  concentrated out) in the model's own coefficients and the regression coefficients; the
  inverse of a profile Hessian is the matching block of the full inverse Hessian; computed
  when first asked for (:attr:`ArmaFit.standard_errors`), as most fits are never shown.

References
----------
.. [1] Harvey, A.C. (1989). *Forecasting, Structural Time Series Models and the Kalman
   Filter*. Cambridge University Press, §3.3-3.4.
.. [2] Gardner, G., Harvey, A.C. & Phillips, G.D.A. (1980). Algorithm AS 154: An algorithm for
   exact maximum likelihood estimation of autoregressive-moving average models by means of
   Kalman filtering. *Applied Statistics* 29, 311-322.
.. [3] Durbin, J. & Koopman, S.J. (2012). *Time Series Analysis by State Space Methods*, 2nd
   ed. Oxford University Press, §3.4, §4.3 and §4.10 (missing observations; that section
   number from memory).
.. [4] Anderson, B.D.O. & Moore, J.B. (1979). *Optimal Filtering*. Prentice-Hall, §6.7.
.. [5] Monahan, J.F. (1984). A note on enforcing stationarity in autoregressive-moving average
   models. *Biometrika* 71, 403-404.
.. [6] Jones, R.H. (1980). Maximum likelihood fitting of ARMA models to time series with
   missing observations. *Technometrics* 22, 389-395.
.. [7] Hannan, E.J. & Rissanen, J. (1982). Recursive estimation of mixed autoregressive-moving
   average order. *Biometrika* 69, 81-94.
.. [8] Kohn, R. & Ansley, C.F. (1985). Efficient estimation and prediction in time series
   regression models. *Biometrika* 72, 694-697.
.. [9] Nocedal, J. & Wright, S.J. (2006). *Numerical Optimization*, 2nd ed. Springer, ch. 3
   and 6.
.. [10] Boyd, S. & Vandenberghe, L. (2004). *Convex Optimization*. Cambridge University Press,
   §9.5.1 (the Newton decrement).
.. [11] Morf, M., Sidhu, G.S. & Kailath, T. (1974). Some new algorithms for recursive
   estimation in constant, linear, discrete-time systems. *IEEE Transactions on Automatic
   Control* 19, 315-323.
.. [12] Herbst, E. (2015). Using the "Chandrasekhar recursions" for likelihood evaluation of
   DSGE models. *Computational Economics* 45, 693-705.
.. [13] Brockwell, P.J. & Davis, R.A. (1991). *Time Series: Theory and Methods*, 2nd ed.
   Springer, §3.3 (section from memory).
.. [14] McLeod, I. (1975). Derivation of the theoretical autocovariance function of
   autoregressive-moving average time series. *Applied Statistics* 24, 255-256 (from memory).
.. [15] Gomez, V., Maravall, A. & Pena, D. (1999). Missing observations in ARIMA models:
   skipping approach versus additive outlier approach. *Journal of Econometrics* 88, 341-363.
.. [16] Golub, G.H. & Van Loan, C.F. (2013). *Matrix Computations*, 4th ed. Johns Hopkins
   University Press, §5.3 (section from memory).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from functools import cached_property

import numpy as np

from app.core.numba_cache import njit
from app.core.prepare import interpolate_gaps

# Every function compiled here runs without Python's global lock (app.core.numba_cache.njit).
# numba keys its cache on this file's contents, not on the compile options: a change of options
# reaches an existing cache only with a change of this file.

LOG_2PI = math.log(2.0 * math.pi)
STEADY_STATE_TOLERANCE = 1e-13
# The filters sum log F_t as a running product of the F_t (each at least 1), flushed into the sum
# once it passes PRODUCT_FLUSH: one logarithm per many steps instead of one per step.
PRODUCT_FLUSH = 1e250
# The two helpers the filters call at every time step are inlined into them (numba's
# inline='always'): each cached njit function is compiled to a library of its own, and a call
# from one into another is not inlined by the compiler. Measured 2026-12-04 (an njit loop over
# the objective, n = 220, five orders from ARMA(1,1) to (2,1)(2,2)12, with and without a mean):
# with the running product above and one division less per step, 10-38% less time per
# likelihood evaluation, the most on the smaller states.
INLINED = "always"
GRADIENT_STEP = 1e-6
# Below this largest gradient element the optimiser switches to central differences. Tuned on
# 80 seasonal orders on each of three real monthly series (txhousing Houston, economics unemploy,
# AER DutchSales): every fit within 0.003 log-likelihood units of all-central ones, 1.4-1.7x faster.
CENTRAL_BELOW = 1e-5
HESSIAN_STEP = 1e-4
MAX_ITERATIONS = 500
# A run stops once the gradient's largest element (of minus the log-likelihood per observation)
# is below FLAT_GRADIENT, the same bound by which a run that stops for another reason counts as
# an optimum. It was 1e-8: on the 53 real monthly and quarterly series of
# tests/benchmarks/real_series.py (2026-12-04) 1e-5 cost 22% less CPU, changed no suggestion or
# confidence, and moved no top-5 candidate's maximum by more than 0.0022 log-likelihood units
# (the fits are held to statsmodels' optimum within 0.01); over all 77 series of the real
# benchmark it changed two near-tied suggestions (a weekly and a daily series).
FLAT_GRADIENT = 1e-5
RELATIVE_DECREASE = 1e-13
ARMIJO = 1e-4
LINE_SEARCH_HALVINGS = 40
MAX_STEP = 2.0
# A screen stops once the optimiser predicts less than SCREEN_SETTLED log-likelihood units still
# to gain (on the accuracy batch 90% of screens after 2 steps, 99% within 5), or after
# SCREEN_ITERATIONS steps, when it is not trusted to leave an order out. Runs that end within
# SAME_MAXIMUM units of each other share a maximum.
SCREEN_ITERATIONS = 20
SCREEN_SETTLED = 0.5
SAME_MAXIMUM = 1e-6
# A run that comes within BASIN_RADIUS (largest coordinate) and BASIN_RISE log-likelihood units
# of an optimum an earlier start already reached ends there (see _maximise). Measured on the 35
# real monthly series of tests/benchmarks/real_series.py (1,991 fits): 8-10% fewer optimiser
# steps, every fit's maximum within 1e-7 units of the one all runs reach.
BASIN_RADIUS = 1e-2
BASIN_RISE = 1e-2
START_PACF_LIMIT = 0.95
FAILED = 1e10


@dataclass(frozen=True)
class ArmaSpec:
    """Orders of a seasonal ARMA model for an already differenced series."""

    p: int = 0
    q: int = 0
    P: int = 0
    Q: int = 0
    s: int = 0

    @property
    def n_coefficients(self) -> int:
        return self.p + self.q + self.P + self.Q

    def names(self) -> list[str]:
        """Coefficient names in statsmodels' order and spelling (``ar.L1``, ``ma.S.L12``)."""
        names = [f"ar.L{i}" for i in range(1, self.p + 1)] + [f"ma.L{i}" for i in range(1, self.q + 1)]
        names += [f"ar.S.L{i * self.s}" for i in range(1, self.P + 1)]
        names += [f"ma.S.L{i * self.s}" for i in range(1, self.Q + 1)]
        return names

    def blocks(self, values: np.ndarray) -> list[np.ndarray]:
        """``values`` in this order's layout split into (AR, MA, seasonal AR, seasonal MA)."""
        p, q, big_p = self.p, self.q, self.P
        return [values[:p], values[p:p + q], values[p + q:p + q + big_p], values[p + q + big_p:self.n_coefficients]]


@dataclass(frozen=True)
class ArmaFit:
    """The maximum of the exact likelihood and what the fit needs around it.

    ``coefficients`` follow :meth:`ArmaSpec.names`; ``beta`` are the regression coefficients
    of the columns of the design (the mean, a trend slope). ``standard_errors`` cover the
    coefficients and then ``beta``; NaN where the Hessian is not negative definite.
    ``residuals`` are the one-step prediction errors ``w_t - E(w_t | w_1..w_{t-1})``, NaN where
    ``w_t`` is missing; ``sigma2`` is profiled over the observed points.
    ``unconstrained`` is the optimum in the optimiser's coordinates, a start for a larger order
    (:func:`nested_start`). ``inputs`` are the series the optimiser filtered (the one fitted, less
    its least-squares fit on the design, :func:`_inputs`), the design, and those least-squares
    coefficients; ``design_information`` is ``X' Sigma^-1 X`` at the optimum (``sigma2`` units).
    """

    spec: ArmaSpec
    coefficients: np.ndarray
    beta: np.ndarray
    sigma2: float
    loglik: float
    residuals: np.ndarray
    ar_polynomial: np.ndarray
    ma_polynomial: np.ndarray
    converged: bool
    unconstrained: np.ndarray
    inputs: tuple[np.ndarray, np.ndarray, np.ndarray] = field(repr=False, compare=False)
    design_information: np.ndarray = field(repr=False, compare=False)
    evaluated: bool = True  # False when the filter broke down at every start: ``loglik`` is no likelihood

    @cached_property
    def standard_errors(self) -> np.ndarray:
        """Computed when first asked for: the central-difference Hessian costs ``2 k^2``
        likelihood evaluations for ``k`` parameters, and most fits of a search (those of the
        orders and scales that lose) are never shown with their errors.

        They are taken on the centred series, at the regression coefficients less the
        least-squares ones: the likelihood depends on ``w - x beta`` alone, so the Hessian is
        the same, but the difference step, which scales with a coefficient's size, then scales
        with its distance from the least-squares value rather than with the series' level (a
        mean of 1e6 would otherwise be stepped by 100)."""
        z, x, offset = self.inputs
        return _standard_errors(z, x, self.spec, self.coefficients, self.beta - offset)

    @cached_property
    def regression_standard_errors(self) -> np.ndarray:
        """Standard errors of ``beta`` by generalised least squares at the ARMA optimum:
        the square roots of the diagonal of ``sigma2 (X' Sigma^-1 X)^-1``, ``Sigma`` the
        covariance of the ARMA errors over ``sigma2``.

        ``X' Sigma^-1 X`` (:attr:`design_information`) is the weighted cross product of the
        design's one-step prediction errors, which the filter pass at the optimum already gave.
        In a Gaussian model with mean ``X beta``
        and a covariance that depends on other parameters, the information matrix is block
        diagonal between ``beta`` and those parameters, so this is the ``beta`` block of the
        inverse information, the errors a regression with ARMA errors reports (Magnus 1978;
        Brockwell & Davis 2002, §6.6, from memory). It costs one small inverse against the
        ``2 k^2`` likelihood evaluations of :attr:`standard_errors`, which estimate the same
        block from the observed Hessian: :mod:`app.core.interventions` takes its ``t`` from these.

        References
        ----------
        .. [1] Magnus, J.R. (1978). Maximum likelihood estimation of the GLS model with unknown
           parameters in the disturbance covariance matrix. *J. Econometrics* 7, 281-312.
        .. [2] Brockwell, P.J. & Davis, R.A. (2002). *Introduction to Time Series and
           Forecasting*, 2nd ed., Springer.
        """
        columns = self.design_information.shape[0]
        if not columns:
            return np.zeros(0)
        try:
            variances = self.sigma2 * np.diag(np.linalg.inv(self.design_information))
        except np.linalg.LinAlgError:
            return np.full(columns, np.nan)
        return np.where(variances > 0, np.sqrt(np.abs(variances)), np.nan)


# --- compiled core -----------------------------------------------------------------------------

@njit(cache=True)
def _pacf_to_coefficients(x):
    """Unconstrained reals -> coefficients of a stationary ``1 - sum a_j z^j`` (Monahan 1984)."""
    k = x.size
    a = np.zeros(k)
    previous = np.zeros(k)
    for m in range(k):
        r = x[m] / math.sqrt(1.0 + x[m] * x[m])
        for j in range(m):
            previous[j] = a[j]
        for j in range(m):
            a[j] = previous[j] - r * previous[m - 1 - j]
        a[m] = r
    return a


@njit(cache=True)
def _expand(short, seasonal, s, sign):
    """Coefficients of ``(1 + sign sum short_j z^j)(1 + sign sum seasonal_j z^(s j))``, as the
    lag-``1..`` terms in the same ``sign`` convention."""
    p, big_p = short.size, seasonal.size
    full = np.zeros(p + s * big_p + 1)
    for i in range(p + 1):
        u = 1.0 if i == 0 else sign * short[i - 1]
        for k in range(big_p + 1):
            v = 1.0 if k == 0 else sign * seasonal[k - 1]
            full[i + s * k] += u * v
    return sign * full[1:]


@njit(cache=True)
def _polynomials(x, p, q, big_p, big_q, s):
    """Unconstrained parameter vector -> expanded AR (``w_t = sum a_j w_{t-j} + ...``) and MA
    (``... + e_t + sum b_j e_{t-j}``) coefficients."""
    phi = _pacf_to_coefficients(x[:p])
    theta = -_pacf_to_coefficients(x[p:p + q])
    big_phi = _pacf_to_coefficients(x[p + q:p + q + big_p])
    big_theta = -_pacf_to_coefficients(x[p + q + big_p:p + q + big_p + big_q])
    return _expand(phi, big_phi, s, -1.0), _expand(theta, big_theta, s, 1.0)


@njit(cache=True)
def _stationary_first_column(coef, big_r):
    """The first column of the stationary covariance ``P`` of Harvey's state (``P = T P T' +
    R R'``, ``T`` with ``coef`` in its first column, ``R = big_r``) from the model's
    autocovariances, in O(r^2) after one linear system the size of the AR order: all that the
    Chandrasekhar recursions need (:func:`_chandrasekhar_filter`). NaN where there is no
    stationary distribution.

    The autocovariances ``gamma(0..p)`` solve the first ``p + 1`` Yule-Walker-type equations
    ``gamma(k) - sum_i a_i gamma(|k - i|) = sum_{j >= k} b_j psi_{j-k}`` (``psi`` the MA(inf)
    weights, unit innovation variance), the higher lags follow by the recursion (Brockwell &
    Davis 1991, §3.3, the third method; McLeod 1975). The state's element ``i`` is
    ``sum_{k >= i} (a_k w_{t-1-k+i} + b_k e_{t-k+i})``, so the first row of ``P`` is
    ``P[0, j] = sum_{k >= j} (a_k gamma(k-j+1) + b_k psi_{k-j})``.
    """
    r = coef.size
    order = r
    while order > 0 and coef[order - 1] == 0.0:
        order -= 1
    psi = np.zeros(r)
    for j in range(r):
        psi[j] = big_r[j]
        for i in range(1, min(j, order) + 1):
            psi[j] += coef[i - 1] * psi[j - i]
    # c[k] = sum_{j >= k} b_j psi_{j-k}: the covariance of w_t's MA part with w_{t-k}.
    c = np.zeros(r + 1)
    for k in range(r):
        for j in range(k, r):
            c[k] += big_r[j] * psi[j - k]
    gamma = np.zeros(r + 1)
    system = np.eye(order + 1)
    for k in range(order + 1):
        for i in range(1, order + 1):
            system[k, abs(k - i)] -= coef[i - 1]
    try:
        gamma[:order + 1] = np.linalg.solve(system, c[:order + 1])
    except Exception:  # a singular system (an AR root on the unit circle); numba catches no narrower class
        return np.full(r, np.nan)  # no stationary start: the filter reports a breakdown
    for k in range(order + 1, r + 1):
        gamma[k] = c[k]
        for i in range(1, order + 1):
            gamma[k] += coef[i - 1] * gamma[k - i]
    first = np.zeros(r)
    for j in range(r):
        for k in range(j, r):
            first[j] += coef[k] * gamma[k - j + 1] + big_r[k] * psi[k - j]
    return first


@njit(cache=True)
def _stationary_covariance(coef, big_r):
    """The whole stationary covariance ``P`` of Harvey's state, which the covariance filter of a
    series with missing points carries (:func:`_covariance_filter`), in O(r^2) from its first
    column (:func:`_stationary_first_column`): the Lyapunov equation, written out with the
    shift structure of ``T``,
    ``P[i, j] = P[i+1, j+1] + a_i P[0, j+1] + a_j P[0, i+1] + a_i a_j P[0, 0] + b_i b_j``,
    gives the other rows from the last one up. Doubling (Anderson & Moore 1979, §6.7) cost
    a few dozen O(r^3) products instead, up to half of a seasonal evaluation.
    """
    r = coef.size
    p = np.zeros((r, r))
    first = _stationary_first_column(coef, big_r)
    for j in range(r):
        p[0, j] = first[j]
        p[j, 0] = first[j]
    for i in range(r - 1, 0, -1):
        for j in range(r - 1, i - 1, -1):
            value = coef[i] * coef[j] * p[0, 0] + big_r[i] * big_r[j]
            if i + 1 < r:  # j >= i: nothing below or to the right of the last row
                value += coef[j] * p[0, i + 1]
            if j + 1 < r:
                value += p[i + 1, j + 1] + coef[i] * p[0, j + 1]
            p[i, j] = value
            p[j, i] = value
    return p


@njit(cache=True, inline=INLINED)
def _record(t, w, x, a, v, inverse, cross, innovations, keep, active):
    """The innovations of ``w_t`` and of the regression columns at time ``t`` with variance
    ``1 / inverse``, added to the weighted cross products (and stored when ``keep``). Only the first
    ``active`` columns (``w`` and the leading regressors) are touched: the others are still
    zero, state and innovation alike (:func:`_joining_times`)."""
    v[0] = w[t] - a[0, 0]
    for c in range(1, active):
        v[c] = x[t, c - 1] - a[0, c]
    for c in range(active):
        if keep:
            innovations[c, t] = v[c]
        for e in range(active):
            cross[c, e] += v[c] * v[e] * inverse


@njit(cache=True)
def _joining_times(x):
    """For each column count ``c`` (``w`` and the first ``c - 1`` columns of ``x``), the first
    time from which those columns are all in use, so that ``_record`` and ``_predict_state``
    can leave out the ones after them: a regression column that has been zero so far has a zero
    state and zero innovations. Column ``j`` of ``x`` starts at its first non-zero entry; when
    the starts do not rise with ``j`` (interventions in any order), every column counts from
    time 0. Indicator columns of missing points come in time order, so each joins at its own
    point (:func:`_with_indicators`)."""
    n, k = x.shape
    joins = np.zeros(k + 2, dtype=np.int64)
    for j in range(k):
        start = n
        for t in range(n):
            if x[t, j] != 0.0:
                start = t
                break
        joins[j + 2] = start
    for j in range(2, k + 2):
        if joins[j] < joins[j - 1]:
            return np.zeros(k + 2, dtype=np.int64)
    return joins


@njit(cache=True, inline=INLINED)
def _predict_state(a, coef, gain, v, active):
    """``a_{t+1} = T (a_t + K v_t)`` for the first ``active`` columns: ``T`` shifts the state
    up and adds ``coef`` times its first element; O(r) per column."""
    r = coef.size
    for c in range(active):
        first = a[0, c] + gain[0] * v[c]
        for i in range(r - 1):
            a[i, c] = coef[i] * first + a[i + 1, c] + gain[i + 1] * v[c]
        a[r - 1, c] = coef[r - 1] * first


@njit(cache=True, inline=INLINED)
def _state_form(ar, ma):
    """Harvey's state form of the ARMA with AR coefficients ``ar`` and MA coefficients ``ma``:
    the first column ``coef`` of the transition and the shock loadings ``big_r``, both of
    length ``r = max(p, q + 1)``."""
    r = max(ar.size, ma.size + 1)
    coef = np.zeros(r)
    coef[:ar.size] = ar
    big_r = np.zeros(r)
    big_r[0] = 1.0
    big_r[1:ma.size + 1] = ma
    return coef, big_r


@njit(cache=True)
def stationary_state(ar, ma):
    """``(coef, big_r, P)``: the state form of the ARMA (:func:`_state_form`) and the stationary
    covariance ``P`` of its state at unit innovation variance (:func:`_stationary_covariance`,
    NaN where there is none), which the filter starts from. For checks that follow the filter's
    prediction variances outside it (:func:`app.core.residual_outliers.prediction_variance_ratios`)."""
    coef, big_r = _state_form(ar, ma)
    return coef, big_r, _stationary_covariance(coef, big_r)


@njit(cache=True)
def _filter(w, x, ar, ma, innovations):
    """Run the Kalman filter over ``w`` and, with the same gains, over each column of ``x``.

    Returns ``(S_ww, S_xw, S_xx, sum log F, n)``, the innovations' weighted cross products
    ``sum v v' / F`` over the ``n`` observed points; with ``innovations`` of ``len(w)`` columns
    it also stores the one-step prediction errors of ``w`` (row 0) and of the columns of ``x``
    (rows 1..). ``S_ww`` is negative when the filter broke down.

    A complete series goes through :func:`_chandrasekhar_filter` (O(r) per step). One with
    missing points goes through :func:`_covariance_filter`, whose covariance update is O(r^2),
    or, when only the likelihood is wanted and there are few missing points next to ``r``
    (:func:`_few_missing`), on the Chandrasekhar path with an indicator column per missing
    point (:func:`_with_indicators`, :func:`_without_indicators`), which gives the same
    likelihood.
    """
    coef, big_r = _state_form(ar, ma)
    r = coef.size
    missing = 0
    for t in range(w.size):
        if math.isnan(w[t]):
            missing += 1
    columns = x.shape[1]
    if missing and (innovations.shape[1] == w.size or not _few_missing(missing, columns, r)):
        return _covariance_filter(w, x, coef, big_r, _stationary_covariance(coef, big_r), innovations)
    if missing:
        w, x = _with_indicators(w, x, missing)
    # One call for both routes: every call site of the filter adds to numba's compile.
    s_ww, s_xw, s_xx, log_f, count = _chandrasekhar_filter(w, x, coef, _stationary_first_column(coef, big_r), innovations)
    if missing and s_ww >= 0.0:
        return _without_indicators(s_ww, s_xw, s_xx, log_f, count, columns)
    return s_ww, s_xw, s_xx, log_f, count


@njit(cache=True)
def _few_missing(missing, columns, r):
    """Whether the indicator route (:func:`_with_indicators`) costs less than
    :func:`_covariance_filter`: per step it carries ``columns + missing + 1`` columns through
    the state and their cross products, about ``c (c + r)`` operations, against the ``3 r^2``
    of a covariance update."""
    c = columns + missing + 1
    return c * (c + r) < 3 * r * r


@njit(cache=True)
def _cholesky_solve(a, b):
    """``a^-1 b`` and ``log |a|`` for a symmetric positive definite ``a``, both from its
    Cholesky factor; ``log |a|`` is ``-inf`` (and ``b`` is returned) when ``a`` is not positive
    definite."""
    n = a.shape[0]
    low = np.zeros((n, n))
    log_det = 0.0
    for j in range(n):
        d = a[j, j]
        for k in range(j):
            d -= low[j, k] * low[j, k]
        if not d > 0.0:
            return b, -np.inf
        low[j, j] = math.sqrt(d)
        log_det += 2.0 * math.log(low[j, j])
        for i in range(j + 1, n):
            value = a[i, j]
            for k in range(j):
                value -= low[i, k] * low[j, k]
            low[i, j] = value / low[j, j]
    y = b.copy()
    for c in range(b.shape[1]):
        for i in range(n):
            value = y[i, c]
            for k in range(i):
                value -= low[i, k] * y[k, c]
            y[i, c] = value / low[i, i]
        for i in range(n - 1, -1, -1):
            value = y[i, c]
            for k in range(i + 1, n):
                value -= low[k, i] * y[k, c]
            y[i, c] = value / low[i, i]
    return y, log_det


@njit(cache=True)
def _with_indicators(w, x, missing):
    """The series with its ``missing`` missing points set to zero, and ``x`` with an indicator
    column for each of them, in time order (Gomez, Maravall & Pena 1999).

    Filtered as a complete series, with the indicators' coefficients then profiled out of the
    weighted sums (:func:`_without_indicators`), it gives exactly the sums of the observed
    points and, with a determinant correction, their likelihood: the route a few missing
    points take when only the likelihood is wanted. It gives no innovations of the observed
    points (the profiled indicators use later observations)."""
    n, m = x.shape
    filled = w.copy()
    z = np.zeros((n, m + missing))
    z[:, :m] = x
    j = m
    for t in range(n):
        if math.isnan(w[t]):
            filled[t] = 0.0
            z[t, j] = 1.0
            j += 1
    return filled, z


@njit(cache=True)
def _without_indicators(s_ww, s_zw, s_zz, log_f, n, m):
    """The filter's sums with the indicator columns (those after the first ``m``) profiled out:
    their Schur complements, which are the sums over the observed points. The determinant of
    the indicators' block ``D' V^-1 D`` turns ``log |V|`` of the whole grid into that of the
    observed points, ``log |V_oo| = log |V| + log |D' V^-1 D|``, since ``D' V^-1 D`` is the
    inverse of the missing points' covariance given the observed ones."""
    missing = s_zz.shape[0] - m
    rhs = np.empty((missing, m + 1))
    rhs[:, 0] = s_zw[m:]
    rhs[:, 1:] = s_zz[m:, :m]
    solved, log_det = _cholesky_solve(s_zz[m:, m:], rhs)
    if not log_det > -np.inf:
        return -1.0, np.zeros(m), np.zeros((m, m)), 0.0, 0
    # The Schur complements.
    s_ww_o = s_ww
    s_xw_o = s_zw[:m].copy()
    s_xx_o = s_zz[:m, :m].copy()
    for d in range(missing):
        s_ww_o -= s_zw[m + d] * solved[d, 0]
        for c in range(m):
            s_xw_o[c] -= s_zz[c, m + d] * solved[d, 0]
            for e in range(m):
                s_xx_o[c, e] -= s_zz[c, m + d] * solved[d, 1 + e]
    return s_ww_o, s_xw_o, s_xx_o, log_f + log_det, n - missing


@njit(cache=True)
def _chandrasekhar_filter(w, x, coef, p_first, innovations):
    """The filter of a complete series by the Chandrasekhar recursions (Morf, Sidhu & Kailath
    1974; Herbst 2015).

    With the state started at its stationary distribution, ``P_1 = T P_1 T' + R R'``, the
    first change ``P_2 - P_1 = -T P_1 e1 e1' P_1 T' / F_1`` has rank one, and so has every
    later one: ``P_{t+1} - P_t = M_t W_t W_t'`` with ``W_{t+1} = T (I - P_{t+1} e1 e1' / F_{t+1})
    W_t`` and ``M_{t+1} = M_t + M_t^2 W_t[0]^2 / F_t``. Only ``P_t e1`` (the gain's numerator,
    ``p_first``) is ever needed, and it moves by ``M_t W_t W_t[0]``: O(r) per step instead of
    the O(r^2) of the covariance recursion, which a seasonal model with an MA root near the
    unit circle runs to the series' end (its steady state is never reached within a few hundred
    points).
    """
    n, k = x.shape
    r = coef.size
    keep = innovations.shape[1] == n
    a = np.zeros((r, k + 1))
    v = np.zeros(k + 1)
    cross = np.zeros((k + 1, k + 1))
    gain = np.zeros(r)
    big_w = np.zeros(r)
    pcol = p_first
    f = pcol[0]
    if not f > 0.0:
        return -1.0, np.zeros(k), np.zeros((k, k)), 0.0, 0
    # W_1 = T P_1 e1, M_1 = -1 / F_1.
    for i in range(r):
        big_w[i] = coef[i] * pcol[0] + (pcol[i + 1] if i + 1 < r else 0.0)
    big_m = -1.0 / f
    log_f = 0.0
    product = 1.0  # of the F_t since the last flush into log_f (PRODUCT_FLUSH)
    joins = _joining_times(x)
    active = 1
    for t in range(n):
        while active <= k and joins[active + 1] <= t:
            active += 1
        inverse = 1.0 / f
        for i in range(r):
            gain[i] = pcol[i] * inverse
        _record(t, w, x, a, v, inverse, cross, innovations, keep, active)
        product *= f
        if product > PRODUCT_FLUSH:
            log_f += math.log(product)
            product = 1.0
        _predict_state(a, coef, gain, v, active)
        # P_{t+1} e1 = P_t e1 + M_t W_t W_t[0], then W and M move on.
        w0 = big_w[0]
        for i in range(r):
            pcol[i] += big_m * big_w[i] * w0
        f_before = f
        f = pcol[0]
        if not f > 0.0:
            return -1.0, np.zeros(k), np.zeros((k, k)), 0.0, 0
        scaled = w0 / f
        first = big_w[0] - pcol[0] * scaled
        for i in range(r - 1):
            big_w[i] = coef[i] * first + big_w[i + 1] - pcol[i + 1] * scaled
        big_w[r - 1] = coef[r - 1] * first
        big_m += big_m * big_m * w0 * w0 / f_before
    return cross[0, 0], cross[1:, 0].copy(), cross[1:, 1:].copy(), log_f + math.log(product), n


@njit(cache=True)
def _covariance_filter(w, x, coef, big_r, p, innovations):
    """The filter of a series with missing points, the covariance carried in full from the
    stationary ``p``.

    A missing ``w_t`` (NaN) has no measurement update (Jones 1980; Durbin & Koopman 2012,
    §4.10): ``a_{t+1} = T a_t``, ``P_{t+1} = T P_t T' + R R'``; it adds nothing to the sums or
    to ``log F`` and its innovation is NaN. The regression columns skip the same rows. The
    steady-state shortcut is left at a gap and taken again once ``F_t`` settles after it.
    """
    n, k = x.shape
    r = coef.size
    rr = np.outer(big_r, big_r)
    # Column 0 of the state arrays is the series, columns 1.. the regressors.
    a = np.zeros((r, k + 1))
    v = np.zeros(k + 1)
    gain = np.zeros(r)
    m = np.zeros((r, r))
    cross = np.zeros((k + 1, k + 1))
    log_f = 0.0
    steady = False
    calm = 0
    f = 1.0
    observed = 0
    keep = innovations.shape[1] == n
    for t in range(n):
        missing = math.isnan(w[t])
        if missing:
            # No update: the prediction carries on from a_t and P_t alone.
            steady = False
            calm = 0
            for c in range(k + 1):
                v[c] = 0.0
                if keep:
                    innovations[c, t] = np.nan
            for i in range(r):
                gain[i] = 0.0
        else:
            if not steady:
                f = p[0, 0]
                if not f > 0.0:
                    return -1.0, np.zeros(k), np.zeros((k, k)), 0.0, 0
                for i in range(r):
                    gain[i] = p[i, 0] / f
            _record(t, w, x, a, v, 1.0 / f, cross, innovations, keep, k + 1)
            log_f += math.log(f)
            observed += 1
        _predict_state(a, coef, gain, v, k + 1)
        if steady:
            continue
        # P_{t+1} = T (P - P e1 e1' P / F) T' + R R' (no P e1 e1' P / F term at a missing point),
        # using the shape of T: O(r^2) per step.
        for i in range(r):
            for j in range(r):
                m[i, j] = p[i, j] if missing else p[i, j] - p[i, 0] * p[0, j] / f
        for i in range(r):
            for j in range(r):
                below_i = m[i + 1, j] if i + 1 < r else 0.0
                p[i, j] = coef[i] * m[0, j] + below_i
        for i in range(r):
            for j in range(r):
                below_j = p[i, j + 1] if j + 1 < r else 0.0
                m[i, j] = coef[j] * p[i, 0] + below_j + rr[i, j]
        # Once F_t has stopped moving for r steps in a row the filter has reached its steady
        # state: gain and F stay fixed. One calm step is not enough: with a seasonal MA part, F
        # can stand still within a season and move again at the seasonal lag, and stopping
        # there left the likelihood with small jumps that upset the optimiser.
        if not missing:
            calm = calm + 1 if abs(m[0, 0] - f) < STEADY_STATE_TOLERANCE else 0
            steady = calm >= r
        p[:, :] = m
    return cross[0, 0], cross[1:, 0].copy(), cross[1:, 1:].copy(), log_f, observed


@njit(cache=True)
def _concentrated(ssr, log_f, n):
    if not ssr > 0.0:
        return -np.inf
    return -0.5 * n * (LOG_2PI + 1.0 + math.log(ssr / n)) - 0.5 * log_f


@njit(cache=True)
def _profile_loglik(u, w, x, p, q, big_p, big_q, s):
    """The log-likelihood with the variance and the regression coefficients profiled out."""
    ar, ma = _polynomials(u, p, q, big_p, big_q, s)
    s_ww, s_xw, s_xx, log_f, observed = _filter(w, x, ar, ma, np.zeros((0, 0)))
    if s_ww < 0.0:
        return -np.inf
    ssr = s_ww
    if x.shape[1]:
        ssr -= s_xw @ np.linalg.solve(s_xx, s_xw)
    return _concentrated(ssr, log_f, observed)


@njit(cache=True)
def _objective(u, w, x, p, q, big_p, big_q, s):
    """Minus the profile log-likelihood per observation; :data:`FAILED` where the filter breaks down."""
    value = -_profile_loglik(u, w, x, p, q, big_p, big_q, s) / w.size
    return value if math.isfinite(value) else FAILED


@njit(cache=True)
def _gradient(u, f, central, w, x, p, q, big_p, big_q, s):
    """Finite-difference gradient of :func:`_objective` at ``u`` (where it is ``f``): central
    differences when ``central``, forward ones otherwise; all zeros (and False) when a
    neighbouring point is outside the region where the filter works."""
    gradient = np.zeros(u.size)
    z = u.copy()
    for i in range(u.size):
        h = GRADIENT_STEP * max(1.0, abs(u[i]))
        z[i] = u[i] + h
        up = _objective(z, w, x, p, q, big_p, big_q, s)
        down = f
        if central:
            z[i] = u[i] - h
            down = _objective(z, w, x, p, q, big_p, big_q, s)
        z[i] = u[i]
        if up == FAILED or down == FAILED:
            return np.zeros(u.size), False
        gradient[i] = (up - down) / (2.0 * h) if central else (up - down) / h
    return gradient, True


@njit(cache=True)
def _half_decrement(g, h_inv):
    """``g' H^-1 g / 2``: the decrease a quadratic model with gradient ``g`` still predicts."""
    return 0.5 * (g @ h_inv @ g)


@njit(cache=True)
def _maximise(u0, w, x, p, q, big_p, big_q, s, max_iterations, settled, known_u, known_f):
    """Minimise :func:`_objective` from ``u0`` by BFGS with a backtracking (Armijo) line search.

    The inverse Hessian approximation starts as the identity scaled after the first step
    (Nocedal & Wright 2006, eq. 6.20) and skips an update whose curvature ``s'y`` is not
    positive; a step moves no coordinate by more than :data:`MAX_STEP`. Stops when the
    gradient's largest element is below :data:`FLAT_GRADIENT`, when a step lowers the
    objective by less than :data:`RELATIVE_DECREASE` of its size, or when the line search
    cannot lower it; in the last two cases the point counts as an optimum only if its gradient
    is below :data:`FLAT_GRADIENT`. Returns ``(u, objective, converged, iterations, remaining)``,
    ``remaining`` being the decrease the quadratic model still predicts, ``g' H^-1 g / 2`` (the
    half squared Newton decrement; Boyd & Vandenberghe 2004, §9.5.1), infinite where unknown.
    A screen stops as soon as ``remaining`` falls below ``settled`` (after the first updates
    have scaled the approximation); a full fit passes 0.

    ``known_u`` (empty for none) is an optimum an earlier start reached, ``known_f`` its
    objective. A run whose step lands within :data:`BASIN_RADIUS` of it in every coordinate, no
    more than :data:`BASIN_RISE` log-likelihood units below it and not above it, is on its way
    to the same optimum: it stops there, unconverged, and the caller keeps the optimum it has.
    """
    k = u0.size
    u = u0.copy()
    f = _objective(u, w, x, p, q, big_p, big_q, s)
    if f == FAILED:
        return u, f, False, 0, np.inf
    g, ok = _gradient(u, f, True, w, x, p, q, big_p, big_q, s)
    if not ok:
        return u, f, False, 0, np.inf
    h_inv = np.eye(k)
    # Forward differences (half the evaluations) while the gradient is large; central ones
    # once it is below CENTRAL_BELOW, and for good as soon as a stopping test meets a forward
    # gradient, so that no run ends on one.
    central = True
    precise = False
    for iteration in range(max_iterations):
        if not central and np.abs(g).max() < FLAT_GRADIENT:
            g, ok = _gradient(u, f, True, w, x, p, q, big_p, big_q, s)
            central = precise = True
            if not ok:
                return u, f, False, iteration, np.inf
        if np.abs(g).max() < FLAT_GRADIENT:
            return u, f, True, iteration, _half_decrement(g, h_inv)
        if iteration >= 2 and _half_decrement(g, h_inv) < settled:
            return u, f, np.abs(g).max() < FLAT_GRADIENT, iteration, _half_decrement(g, h_inv)
        direction = -(h_inv @ g)
        slope = g @ direction
        if not slope < 0.0:  # not a descent direction: restart from steepest descent
            h_inv = np.eye(k)
            direction = -g
            slope = g @ direction
        largest = np.abs(direction).max()
        t = 1.0 if largest <= MAX_STEP else MAX_STEP / largest
        accepted = False
        for _ in range(LINE_SEARCH_HALVINGS):
            trial = u + t * direction
            f_trial = _objective(trial, w, x, p, q, big_p, big_q, s)
            if f_trial <= f + ARMIJO * t * slope:
                accepted = True
                break
            t *= 0.5
        if not accepted:
            if not central:
                g, ok = _gradient(u, f, True, w, x, p, q, big_p, big_q, s)
                central = precise = True
                if not ok:
                    return u, f, False, iteration, np.inf
                continue
            return u, f, np.abs(g).max() < FLAT_GRADIENT, iteration, _half_decrement(g, h_inv)
        central = precise or np.abs(g).max() < CENTRAL_BELOW
        g_trial, ok = _gradient(trial, f_trial, central, w, x, p, q, big_p, big_q, s)
        if not ok:
            return trial, f_trial, False, iteration + 1, np.inf
        step = trial - u
        change = g_trial - g
        decrease = f - f_trial
        u, f, g = trial, f_trial, g_trial
        if decrease <= RELATIVE_DECREASE * max(abs(f), 1.0):
            if not central:
                g, ok = _gradient(u, f, True, w, x, p, q, big_p, big_q, s)
                central = precise = True
                if not ok:
                    return u, f, False, iteration + 1, np.inf
                continue
            return u, f, np.abs(g).max() < FLAT_GRADIENT, iteration + 1, _half_decrement(g, h_inv)
        if known_u.size and np.abs(u - known_u).max() < BASIN_RADIUS and 0.0 <= (f - known_f) * w.size < BASIN_RISE:
            return u, f, False, iteration + 1, np.inf
        curvature = step @ change
        if curvature > 1e-12 * math.sqrt((step @ step) * (change @ change)):
            if iteration == 0:
                h_inv = np.eye(k) * (curvature / (change @ change))
            rho = 1.0 / curvature
            hy = h_inv @ change
            h_inv += (rho * rho * (change @ hy) + rho) * np.outer(step, step) - rho * (np.outer(hy, step) + np.outer(step, hy))
    return u, f, np.abs(g).max() < FLAT_GRADIENT, max_iterations, _half_decrement(g, h_inv)


@njit(cache=True)
def _coefficient_loglik(phi, theta, big_phi, big_theta, s, beta, w, x):
    """The log-likelihood (variance profiled out) at given coefficients and regression
    coefficients ``beta``; -inf when the filter breaks down."""
    ar = _expand(phi, big_phi, s, -1.0)
    ma = _expand(theta, big_theta, s, 1.0)
    s_ww, _, _, log_f, observed = _filter(w - x @ beta, np.zeros((w.size, 0)), ar, ma, np.zeros((0, 0)))
    return _concentrated(s_ww, log_f, observed)


# --- fitting ---------------------------------------------------------------------------------

def profile_loglik(w: np.ndarray, spec: ArmaSpec, unconstrained: np.ndarray, design: np.ndarray | None = None) -> float:
    """Exact log-likelihood at ``unconstrained`` parameters, variance and regression profiled out."""
    z, x, _ = _inputs(w, design)
    return float(_profile_loglik(np.asarray(unconstrained, float), z, x, spec.p, spec.q, spec.P, spec.Q, spec.s))


def coefficients_to_unconstrained(coefficients: np.ndarray, sign: float = 1.0) -> np.ndarray:
    """Inverse of the partial-autocorrelation map for ``1 - sum a_j z^j`` (``sign = 1``) or an
    MA polynomial ``1 + sum b_j z^j`` (``sign = -1``), by the Durbin-Levinson recursion run
    backwards. Partial autocorrelations are clipped to ``+-START_PACF_LIMIT`` so that a start
    value on the boundary moves inside; a polynomial with a root inside the unit circle gives
    zeros (white noise) instead."""
    a = sign * np.asarray(coefficients, dtype=float)
    k = a.size
    r = np.zeros(k)
    for m in range(k - 1, -1, -1):
        r[m] = a[m]
        if not abs(r[m]) < 1:
            return np.zeros(k)
        a = (a[:m] + r[m] * a[:m][::-1]) / (1 - r[m] ** 2)
    r = np.clip(r, -START_PACF_LIMIT, START_PACF_LIMIT)
    return r / np.sqrt(1 - r**2)


def nested_start(fit: ArmaFit, spec: ArmaSpec) -> np.ndarray:
    """Start values for ``spec`` from the optimum of a smaller order: each polynomial's partial
    autocorrelations, padded with zeros. A zero partial autocorrelation adds nothing to the
    polynomial, so the start reaches exactly the smaller model's likelihood and the larger
    order cannot end below it."""
    sizes = (spec.p, spec.q, spec.P, spec.Q)
    return np.concatenate([np.r_[block, np.zeros(size - block.size)][:size] for block, size in zip(fit.spec.blocks(fit.unconstrained), sizes)])


def is_nested_in(inner: ArmaSpec, outer: ArmaSpec) -> bool:
    """Whether ``inner`` is ``outer`` with some coefficients fixed at zero (same season)."""
    same_season = inner.s == outer.s or not (inner.P or inner.Q)
    return same_season and inner != outer and all(
        a <= b for a, b in zip((inner.p, inner.q, inner.P, inner.Q), (outer.p, outer.q, outer.P, outer.Q))
    )


@dataclass(frozen=True)
class ArmaScreen:
    """A cheap look at an order before its full fit (:func:`screen_arma`).

    ``loglik`` is the profile log-likelihood reached, a lower bound on the maximum;
    ``remaining`` the further rise the optimiser's quadratic model predicts (log-likelihood
    units; infinite when the screen stopped on a failure). ``start`` is the start the steps
    began from and ``unconstrained`` where they ended, so that a full fit continues from there
    instead of repeating them; ``own_starts`` are the order's white-noise and Hannan-Rissanen
    starts, which the full fit need not compute again.
    """

    spec: ArmaSpec
    loglik: float
    remaining: float
    start: np.ndarray
    unconstrained: np.ndarray
    own_starts: tuple[np.ndarray, ...] = ()

    @property
    def settled(self) -> bool:
        """Whether the quadratic model puts the maximum within :data:`SCREEN_SETTLED` of ``loglik``."""
        return self.remaining <= SCREEN_SETTLED


def screen_arma(w: np.ndarray, spec: ArmaSpec, design: np.ndarray | None = None, starts: Sequence[np.ndarray] = ()) -> ArmaScreen:
    """Screen ``spec``: evaluate the likelihood at every start (white noise, Hannan-Rissanen,
    ``starts``) and run the optimiser from the best of them until the rise it still predicts
    is below :data:`SCREEN_SETTLED` log-likelihood units, for at most :data:`SCREEN_ITERATIONS`
    steps.

    The Hannan-Rissanen estimate alone is often several log-likelihood units short of the
    maximum and for some orders dozens (a root near the unit circle); a few quasi-Newton steps
    close most of that gap. A screen that has not settled says so (:attr:`ArmaScreen.settled`),
    and its loglik says little. A screen is a lower bound for its own start only: another start
    can lead the full fit to a higher optimum, which is why screening keeps a margin.
    """
    w, x, _ = _inputs(w, design)
    args = (w, x, spec.p, spec.q, spec.P, spec.Q, spec.s)
    if not spec.n_coefficients:
        return ArmaScreen(spec, float(_profile_loglik(np.zeros(0), *args)), 0.0, np.zeros(0), np.zeros(0))
    own = _own_starts(w, x, spec)
    start = min(_distinct([*own, *starts]), key=lambda u: _objective(u, *args))
    u, value, _, _, remaining = _maximise(start, *args, SCREEN_ITERATIONS, SCREEN_SETTLED / w.size, np.zeros(0), 0.0)
    return ArmaScreen(spec, -float(value) * w.size, float(remaining) * w.size, start, u, tuple(own))


def fit_arma(
    w: np.ndarray, spec: ArmaSpec, design: np.ndarray | None = None, starts: Sequence[np.ndarray] = (), screen: ArmaScreen | None = None
) -> ArmaFit:
    """Maximise the exact likelihood of ``spec`` for the series ``w`` (see the module notes).

    Parameters
    ----------
    w : ndarray
        The differenced series.
    spec : ArmaSpec
        The orders.
    design : ndarray, optional
        Regression columns (``n x m``) whose coefficients are profiled out: a column of ones for
        a mean, and a time index for a trend. None for a zero-mean model.
    starts : list of ndarray
        Extra start values in the optimiser's coordinates (:func:`nested_start`), tried after
        the Hannan-Rissanen regressions (and white noise when there is no regression start).
    screen : ArmaScreen, optional
        The screen of the same order and series (:func:`screen_arma`): the optimisation from
        its start continues where the screen stopped.
    """
    z, x, offset = _inputs(w, design)
    args = (z, x, spec.p, spec.q, spec.P, spec.Q, spec.s)
    k = spec.n_coefficients
    if not k:  # only the variance and the regression: nothing left to optimise
        return _finished(z, x, offset, spec, np.zeros(0), float(_profile_loglik(np.zeros(0), *args)), True)
    own = _own_starts(z, x, spec) if screen is None else list(screen.own_starts)
    if len(own) > 1:  # a regression start exists: white noise (always first) is no run of its own
        own = own[1:]
    if screen is None:
        begins = _distinct([*own, *starts])
    else:
        begins = _distinct([screen.unconstrained, *(u for u in [*own, *starts] if not _same(u, screen.start))])
    runs: list[tuple[np.ndarray, float, bool, int, float]] = []
    for start in begins:
        # A later run stops where it meets the optimum of an earlier one that converged.
        known = min((run for run in runs if run[2]), key=lambda run: run[1], default=None)
        known_u, known_f = (known[0], known[1]) if known is not None else (np.zeros(0), 0.0)
        runs.append(_maximise(start, *args, MAX_ITERATIONS, 0.0, known_u, known_f))
    best_u, best_value, _, _, _ = min(runs, key=lambda run: run[1])
    # The maximum counts as reached when any run that ended there converged: a run continued
    # from a screen can stop on a flat ridge just short of the test another run passed.
    converged = any(ok and (value - best_value) * w.size <= SAME_MAXIMUM for _, value, ok, _, _ in runs)
    fit = _finished(z, x, offset, spec, best_u, -float(best_value) * w.size, converged)
    return replace(fit, evaluated=False) if best_value >= FAILED else fit


def _inputs(w: np.ndarray, design: np.ndarray | None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """What the optimiser filters: ``w - x b``, the columns ``x`` of the design (none without
    one) and ``b``, their ordinary least-squares coefficients on the observed points (empty
    without columns).

    The profile likelihood is the same for ``w`` and ``w - x b``, as ``x b`` lies in the span
    the generalised-least-squares coefficients are profiled over, and their coefficients
    differ by ``b``. Numerically they are not: the profiled sum of squares ``S_ww - S_xw'
    S_xx^-1 S_xw`` cancels ``S_ww``, and for a series far from zero next to its variation (a
    lake level of about 579 ft varying by about 1, with a mean and a trend) the cancellation leaves noise
    that the finite-difference gradient turns into a gradient of 4e-5 per observation at the
    optimum: the optimiser could not reach :data:`FLAT_GRADIENT` there, reported no convergence,
    and the ranking demoted the fit. Taking the least-squares fit out first keeps ``S_ww`` of the
    order of the residual variation (the centring that regression software does before forming
    cross products; Golub & Van Loan 2013, §5.3, on the normal equations; section from memory).
    """
    w = np.ascontiguousarray(w, dtype=float)
    x = np.zeros((w.size, 0)) if design is None else np.ascontiguousarray(design, dtype=float).reshape(w.size, -1)
    if not x.shape[1]:
        return w, x, np.zeros(0)
    seen = ~np.isnan(w)
    offset = np.linalg.lstsq(x[seen], w[seen], rcond=None)[0]
    return np.ascontiguousarray(w - x @ offset), x, offset


def _own_starts(w: np.ndarray, x: np.ndarray, spec: ArmaSpec) -> list[np.ndarray]:
    """White noise and two Hannan-Rissanen estimates, without repeats (white noise first)."""
    reach = max(spec.p + spec.s * spec.P, spec.q + spec.s * spec.Q)
    # Two lengths of the long autoregression: a generous one and a short one (twice the MA reach):
    # on an over-parameterised order their starts tend to lead to different optima.
    long_orders = (max(2 * reach, 10), max(2 * (spec.q + spec.s * spec.Q), 1))
    return _distinct([np.zeros(spec.n_coefficients), *(_hannan_rissanen_start(w, x, spec, m) for m in long_orders)])


def _distinct(candidates: list[np.ndarray | None]) -> list[np.ndarray]:
    """The start values in order, without missing ones and without repeats (to 1e-8)."""
    starts: list[np.ndarray] = []
    for start in candidates:
        if start is not None and not any(_same(start, seen) for seen in starts):
            starts.append(np.asarray(start, dtype=float))
    return starts


def _same(a: np.ndarray, b: np.ndarray) -> bool:
    return bool(np.abs(np.asarray(a) - np.asarray(b)).max(initial=0.0) <= 1e-8)


def _hannan_rissanen_start(w: np.ndarray, x: np.ndarray, spec: ArmaSpec, long_order: int) -> np.ndarray | None:
    """Start values by two regressions: a long autoregression estimates the innovations, then
    ``w`` is regressed on its own lags and the innovations' lags (Hannan & Rissanen 1982). A
    seasonal part is read at the seasonal lags of the same regression, additively. The series
    is first freed of the regression columns by least squares.

    The regressions need every point: a series with missing points (NaN) is filled by linear
    interpolation first. That series serves only as a start; the likelihood maximised from it
    is the exact one, with the points missing."""
    w = interpolate_gaps(w)
    z = w - x @ np.linalg.lstsq(x, w, rcond=None)[0] if x.shape[1] else w
    n = z.size
    reach = max(spec.p + spec.s * spec.P, spec.q + spec.s * spec.Q)
    long_order = min(long_order, n // 4)
    if n - long_order - reach < 2 * spec.n_coefficients + 5:
        return None
    lagged = np.column_stack([z[long_order - j:n - j] for j in range(1, long_order + 1)])
    e = np.zeros(n)
    e[long_order:] = z[long_order:] - lagged @ np.linalg.lstsq(lagged, z[long_order:], rcond=None)[0]
    first = long_order + reach
    ar_lags = list(range(1, spec.p + 1)) + [spec.s * i for i in range(1, spec.P + 1)]
    ma_lags = list(range(1, spec.q + 1)) + [spec.s * i for i in range(1, spec.Q + 1)]
    columns = [z[first - j:n - j] for j in ar_lags] + [e[first - j:n - j] for j in ma_lags]
    beta = np.linalg.lstsq(np.column_stack(columns), z[first:], rcond=None)[0]
    p, big_p, q = spec.p, spec.P, spec.q
    phi, big_phi, theta, big_theta = beta[:p], beta[p:p + big_p], beta[p + big_p:p + big_p + q], beta[p + big_p + q:]
    return np.concatenate([
        coefficients_to_unconstrained(phi), coefficients_to_unconstrained(theta, -1.0),
        coefficients_to_unconstrained(big_phi), coefficients_to_unconstrained(big_theta, -1.0),
    ])


def _finished(z: np.ndarray, x: np.ndarray, offset: np.ndarray, spec: ArmaSpec, u: np.ndarray, loglik: float, converged: bool) -> ArmaFit:
    """The fit at the optimum ``u``, found on ``z``, the series less ``x offset`` (:func:`_inputs`)."""
    u = np.asarray(u, dtype=float)
    phi_u, theta_u, big_phi_u, big_theta_u = spec.blocks(u)
    phi, theta = _pacf_to_coefficients(phi_u), -_pacf_to_coefficients(theta_u)
    big_phi, big_theta = _pacf_to_coefficients(big_phi_u), -_pacf_to_coefficients(big_theta_u)
    ar, ma = _expand(phi, big_phi, spec.s, -1.0), _expand(theta, big_theta, spec.s, 1.0)
    innovations = np.zeros((1 + x.shape[1], z.size))
    s_ww, s_xw, s_xx, _, observed = _filter(z, x, ar, ma, innovations)
    beta = np.linalg.solve(s_xx, s_xw) if x.shape[1] else np.zeros(0)
    coefficients = np.concatenate([phi, theta, big_phi, big_theta])
    residuals = innovations[0] - beta @ innovations[1:]
    return ArmaFit(
        spec=spec, coefficients=coefficients, beta=beta + offset, sigma2=float((s_ww - s_xw @ beta) / observed),
        loglik=float(loglik), residuals=residuals, ar_polynomial=np.r_[1.0, -ar], ma_polynomial=np.r_[1.0, ma],
        converged=converged, unconstrained=u, inputs=(z, x, offset), design_information=s_xx,
    )


def _standard_errors(w: np.ndarray, x: np.ndarray, spec: ArmaSpec, coefficients: np.ndarray, beta: np.ndarray) -> np.ndarray:
    """Square roots of the diagonal of minus the inverse central-difference Hessian."""
    theta0 = np.r_[coefficients, beta]
    k = theta0.size
    if not k:
        return np.zeros(0)

    def loglik(theta: np.ndarray) -> float:
        phi, ma, big_phi, big_ma = spec.blocks(theta)
        return float(_coefficient_loglik(phi, ma, big_phi, big_ma, spec.s, theta[spec.n_coefficients:], w, x))

    steps = HESSIAN_STEP * np.maximum(1.0, np.abs(theta0))
    shift = np.diag(steps)
    centre = loglik(theta0)
    hessian = np.empty((k, k))
    for i in range(k):
        for j in range(i, k):
            if i == j:
                value = (loglik(theta0 + shift[i]) - 2 * centre + loglik(theta0 - shift[i])) / steps[i] ** 2
            else:
                value = (loglik(theta0 + shift[i] + shift[j]) - loglik(theta0 + shift[i] - shift[j])
                         - loglik(theta0 - shift[i] + shift[j]) + loglik(theta0 - shift[i] - shift[j])) / (4 * steps[i] * steps[j])
            hessian[i, j] = hessian[j, i] = value
    if not np.all(np.isfinite(hessian)):
        return np.full(k, np.nan)
    try:
        covariance = np.linalg.inv(-hessian)
    except np.linalg.LinAlgError:
        return np.full(k, np.nan)
    variances = np.diag(covariance)
    return np.where(variances > 0, np.sqrt(np.abs(variances)), np.nan)
