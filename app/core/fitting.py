"""Fitting one candidate ARIMA / SARIMA order by exact maximum likelihood and checking it.

A fit keeps what a reviewer needs to judge it: log-likelihood, AIC, AICc, BIC, parameter
estimates with standard errors, whether the optimiser converged, a Ljung-Box test on the
residuals, the residual ACF, and root checks.

* Fitting: exact Gaussian maximum likelihood of the differenced series by the compiled Kalman
  filter of :mod:`app.core.likelihood`, with the innovation variance and the deterministic
  terms profiled out. The model is a regression with ARMA errors, as in statsmodels ``ARIMA``:
  ``const`` is the mean of an undifferenced series, ``drift`` the slope of a linear trend in
  levels, which at d = 1 is the mean of the differenced series. The likelihood is the one
  statsmodels ``ARIMA`` computes at the same parameters on a complete series (the tests check it
  to 1e-9); with gaps it is that of the differences observed (statsmodels' ``SARIMAX`` with
  ``simple_differencing=True``), which leaves out every observation whose difference reaches a
  gap, where statsmodels' default counts the observed levels (see Missing points below); the
  optimum is sought from several starts, the optimum of any smaller order already fitted among
  them, so a larger order never ends below an order it contains.
* Ljung-Box: ``h = 10`` lags for non-seasonal data and ``h = 2s`` for data with period ``s``,
  at most ``n/5`` (Hyndman & Athanasopoulos' rule, common practice), degrees of freedom
  ``h - (p + q + P + Q)``; ``h`` is raised to at least ``p + q + P + Q + 3`` so the test keeps
  three degrees of freedom, and for seasonal data to at least ``s + p + q + P + Q + 3`` when
  that is below ``n``, so lag ``s`` is always tested (see :func:`ljung_box_lags`). The period is
  the data's: a model without seasonal terms fitted to data that show a season is tested at the
  seasonal lags too. Residuals are those of the
  differenced series, so the ``d + sD`` start-up values that a levels filter would produce never
  enter the test.
* Residual ACF: drawn and judged against the white-noise band ``+-1.96/sqrt(n)`` at every lag,
  not Bartlett's widening band: the residuals of an adequate model are white noise, and that is
  the hypothesis they are checked against.
* Missing points: the differences that reach a missing point are missing (:func:`difference`),
  the exact likelihood skips them and their residuals are NaN. The residual ACF and the
  Ljung-Box test then use the pairs of residuals present (:mod:`app.core.correlogram`), with
  ``n`` at lag k the pairs present on the complete-data scale, ``n_k``; ``nobs`` and the
  criteria count the observed residuals.
* Roots, factor by factor: the model is ``phi(B) Phi(B^s) w_t = theta(B) Theta(B^s) e_t``, and
  each factor is judged on its own scale, ``phi`` and ``theta`` as polynomials in ``z = B``,
  ``Phi`` and ``Theta`` as polynomials in ``z = B^s``. A root of any factor with modulus below
  :data:`NEAR_UNIT_ROOT` is flagged ``near_unit_root`` (the model sits on the edge of
  stationarity/invertibility); an inverse root of ``phi`` and one of ``theta``, or of ``Phi`` and
  of ``Theta``, closer than :data:`CANCELLING_ROOT_DISTANCE` are flagged ``redundant_roots``
  (they nearly cancel: the order is over-specified). The expanded polynomials are not judged:
  a seasonal root ``r`` becomes ``s`` roots of modulus ``|r|^(1/s)``, all close to the unit
  circle (``1 + 0.8 z^12`` has its 12 roots at modulus ``0.8^(-1/12) = 1.019``), and an ordinary
  root near one of those is no common factor of the multiplicative model.

References
----------
.. [1] Ljung, G.M. & Box, G.E.P. (1978). On a measure of lack of fit in time series models.
   *Biometrika* 65, 297-303.
.. [2] Hurvich, C.M. & Tsai, C.-L. (1989). Regression and time series model selection in small
   samples. *Biometrika* 76, 297-307 (AICc).
.. [3] Hyndman, R.J. & Athanasopoulos, G. (2021). *Forecasting: Principles and Practice*, 3rd ed.,
   §5.4 (Ljung-Box lags) and §9.7 (roots near the unit circle).
.. [4] Box, G.E.P., Jenkins, G.M., Reinsel, G.C. & Ljung, G.M. (2015). *Time Series Analysis:
   Forecasting and Control*, 5th ed., Wiley, §8.2.1 (residual autocorrelations against
   ``+-2/sqrt(n)``) and §9.1 (the multiplicative seasonal model); sections from memory.
.. [5] Akaike, H. (1974). A new look at the statistical model identification. *IEEE Trans.
   Automatic Control* 19, 716-723; Schwarz, G. (1978). Estimating the dimension of a model.
   *Annals of Statistics* 6, 461-464; Hannan, E.J. & Quinn, B.G. (1979). The determination of
   the order of an autoregression. *JRSS B* 41, 190-195.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass, field, replace
from functools import cached_property

import numpy as np
from scipy.special import chdtrc

from app.core.analysis import Candidate, Correlation, Parameter
from app.core.correlogram import DEFAULT_ALPHA, Correlogram, autocorrelations, correlogram, effective_sizes, lag_count
from app.core.likelihood import ArmaFit, ArmaScreen, ArmaSpec, fit_arma, is_nested_in, nested_start, screen_arma
from app.core.order import Order
from app.core.vocabulary import Flag

NEAR_UNIT_ROOT = 1.02
CANCELLING_ROOT_DISTANCE = 0.15
LJUNG_BOX_LEVEL = 0.05
# A decided order's residuals fail at this level: approving or saving such an order asks for a
# note (or a confirmation), and new data that fail it send a decided order back to recheck.
# Stricter than the 5% of a suggestion's check (which only keeps it from firm): a verdict is a
# person's, and re-tested at every import at 5%, a right order came back once in twenty imports.
DECISION_LJUNG_BOX_LEVEL = 0.01


@dataclass
class CandidateFit:
    """One fitted candidate with its statistics and diagnostics."""

    model: Order
    loglik: float
    aic: float
    aicc: float
    bic: float
    hqic: float
    nobs: int
    n_params: int
    converged: bool
    term_names: list[str]
    ljung_box_p: float | None
    ljung_box_lags: int
    residual_correlogram: Correlogram
    residuals: np.ndarray
    flags: list[str] = field(default_factory=list)
    source: list[str] = field(default_factory=list)
    estimate: ArmaFit | None = field(default=None, repr=False)

    @cached_property
    def params(self) -> list[Parameter]:
        """The estimates in statsmodels ARIMA's order (deterministic terms named ``term_names``,
        then the ARMA coefficients) with their standard errors, and ``sigma2``; built when first
        asked for, since the standard errors are (:attr:`app.core.likelihood.ArmaFit.standard_errors`)."""
        estimate = self.estimate
        if estimate is None:
            return []
        spec = estimate.spec
        se = estimate.standard_errors
        errors = [*se[spec.n_coefficients:], *se[:spec.n_coefficients], math.nan]
        names = [*self.term_names, *spec.names(), "sigma2"]
        return [Parameter(name, float(value), _finite_or_none(float(error)))
                for name, value, error in zip(names, self.estimates(), errors)]

    def estimates(self) -> np.ndarray:
        """The values of :attr:`params`, in its order, without their standard errors."""
        estimate = self.estimate
        if estimate is None:
            return np.zeros(0)
        return np.r_[estimate.beta, estimate.coefficients, estimate.sigma2]

    @property
    def passes_ljung_box(self) -> bool:
        return self.ljung_box_p is None or math.isnan(self.ljung_box_p) or self.ljung_box_p >= LJUNG_BOX_LEVEL

    def to_candidate(self, rank_score: float | None = None, keep_residuals: bool = True) -> Candidate:
        """The fit as the typed result keeps it (residuals only when ``keep_residuals``)."""
        cg = self.residual_correlogram
        return Candidate(
            order=self.model, source=tuple(self.source), loglik=self.loglik, aic=self.aic, aicc=self.aicc,
            bic=self.bic, hqic=self.hqic, nobs=self.nobs, n_params=self.n_params, converged=self.converged,
            params=tuple(self.params), ljung_box_p=_finite_or_none(self.ljung_box_p), ljung_box_lags=self.ljung_box_lags,
            residual_acf=Correlation(tuple(cg.lags.tolist()), tuple(cg.acf.tolist()), tuple(cg.acf_band.tolist())),
            residuals=tuple(float(v) for v in self.residuals) if keep_residuals else None,
            flags=tuple(self.flags), rank_score=rank_score,
        )


def _finite_or_none(value: float | None) -> float | None:
    return None if value is None or not math.isfinite(value) else float(value)


def ljung_box_lags(n: int, model: Order, period: int | None = None) -> int:
    """Lags ``h`` of the Ljung-Box test on the ``n`` residuals of a fit of ``model`` to data
    with seasonal ``period``.

    The rule, with ``k = p + q + P + Q`` the number of ARMA coefficients and ``s`` the period of
    the data (the model's own when it has seasonal terms, else ``period``):

    1. ``h = min(10, n // 5)`` for non-seasonal data, ``h = min(2s, n // 5)`` for seasonal data
       (Hyndman & Athanasopoulos 2021, §5.4: "common practice"; the rule is stated for the
       data, so a non-seasonal model of seasonal monthly data is tested at lag 12 too, which is
       where dropping a season the data have shows);
    2. ``h`` is raised to ``k + 3``, so the chi-square reference keeps three degrees of freedom;
    3. for seasonal data ``h`` is raised to ``s + k + 3`` when that is below ``n``.

    Step 3 is there because lag ``s`` is where a wrong seasonal part shows in the residuals, and
    the ``n/5`` cap alone leaves it out of the test on short or long-period series (``s = 52``
    below 260 residuals, ``s = 24`` below 120, ``s = 12`` below 60). ``s + k + 3`` lags take in
    lag ``s`` and leave, as step 2 does, three degrees of freedom beyond the season
    (``h - k = s + 3``). With fewer than ``s + k + 4`` residuals lag ``s`` rests on a handful of
    pairs and steps 1-2 stand.

    Parameters
    ----------
    n : int
        Number of residuals (observations after differencing).
    model : Order
        The fitted order.
    period : int, optional
        The seasonal period of the data when they show a season (None for non-seasonal data);
        counts when the model has no seasonal terms.

    Returns
    -------
    int
        The number of lags; the test's degrees of freedom are ``h - k``.

    References
    ----------
    .. [1] Ljung, G.M. & Box, G.E.P. (1978). On a measure of lack of fit in time series models.
       *Biometrika* 65, 297-303.
    .. [2] Hyndman, R.J. & Athanasopoulos, G. (2021). *Forecasting: Principles and Practice*,
       3rd ed., OTexts, §5.4.
    """
    s, k = model.seasonal_order[3] or (period or 0), model.n_arma
    h = max(min(2 * s, n // 5) if s else min(10, n // 5), k + 3)
    return max(h, s + k + 3) if s and s + k + 3 < n else h


def difference(y: np.ndarray, model: Order) -> np.ndarray:
    """The series (or the columns of an array) after the model's seasonal and ordinary differences.

    A difference that reaches a missing point (NaN) is missing: nothing is invented across a
    gap. A missing ``y_t`` leaves ``w_t`` and ``w_{t+1}`` missing after one difference, and
    ``w_t``, ``w_{t+s}`` after a seasonal one; the likelihood then skips them.
    """
    _, d, _ = model.order
    _, sd, _, s = model.seasonal_order
    w = np.asarray(y, dtype=float)
    for _ in range(sd):
        w = w[s:] - w[:-s]
    return np.diff(w, n=d, axis=0) if d else w


def likelihood_points(y: np.ndarray, model: Order) -> np.ndarray:
    """The observations of ``y`` that a fit of ``model`` has a likelihood term for; NaN elsewhere.

    The likelihood of the differenced series is conditional on the first ``d + sD`` observations,
    and a difference that reaches a missing point is missing (:func:`difference`), so an
    observation whose difference is missing is conditioned on too. What is returned lines up
    with the differenced series: ``y`` after its first ``d + sD`` points.
    """
    points = np.array(np.asarray(y, dtype=float)[model.lost_to_differencing:], dtype=float)
    points[np.isnan(difference(y, model))] = np.nan
    return points


def trend_design(n: int, model: Order) -> tuple[list[str], np.ndarray | None]:
    """Names and columns of the deterministic terms on the differenced scale: a constant
    (``const``) and a time index ``1..n`` (``drift``) in levels, differenced like the series;
    a column that differencing removes is dropped."""
    levels = {"c": ["const"], "t": ["drift"], "ct": ["const", "drift"], "n": []}[model.trend]
    columns = {"const": np.ones(n), "drift": np.arange(1.0, n + 1)}
    if not levels:
        return [], None
    design = difference(np.column_stack([columns[name] for name in levels]), model)
    kept = [i for i in range(design.shape[1]) if np.any(np.abs(design[:, i]) > 1e-12)]
    return [levels[i] for i in kept], (design[:, kept] if kept else None)


def information_criteria(loglik: float, k: int, n: int) -> dict[str, float]:
    """AIC, AICc, BIC and HQIC of a fit with ``k`` estimated parameters (the innovation variance
    included) on ``n`` observations (Akaike 1974; Hurvich & Tsai 1989; Schwarz 1978; Hannan &
    Quinn 1979)."""
    aic = -2 * loglik + 2 * k
    return {
        "aic": aic,
        "aicc": aic + 2 * k * (k + 1) / (n - k - 1) if n > k + 1 else math.inf,
        "bic": -2 * loglik + k * math.log(n),
        "hqic": -2 * loglik + 2 * k * math.log(math.log(n)),
    }


@dataclass
class ScreenedCandidate:
    """An order looked at cheaply (:func:`app.core.likelihood.screen_arma`) before a full fit.

    The screen's log-likelihood is a lower bound on the maximum from its start, so criteria
    computed from it would be upper bounds on the full fit's; :meth:`optimistic_criteria` grants
    the full fit a rise instead.
    """

    screen: ArmaScreen
    n_params: int
    nobs: int

    def optimistic_criteria(self, slack: float) -> dict[str, float]:
        """The criteria if the full fit rose ``remaining + slack`` above the screen."""
        rise = self.screen.remaining + slack
        return information_criteria(self.screen.loglik + rise, self.n_params, self.nobs)


def _same_data(a: Order, b: Order) -> bool:
    """Same differencing and deterministic terms: both fits are of the same differenced series
    with the same regression columns, so one's optimum is a start for the other."""
    return a.differencing_key() == b.differencing_key() and a.trend == b.trend


def _nested_starts(model: Order, fitted: Iterable[CandidateFit]) -> list[np.ndarray]:
    """The optimum of the best fitted order that ``model`` contains, as a start (or none)."""
    spec = model.arma_spec()
    smaller = [f.estimate for f in fitted if f.estimate is not None and _same_data(f.model, model) and is_nested_in(f.estimate.spec, spec)]
    return [nested_start(max(smaller, key=lambda e: e.loglik), spec)] if smaller else []


def screen_candidate(y: np.ndarray, model: Order, fitted: Iterable[CandidateFit] = ()) -> ScreenedCandidate:
    """Look at ``model`` cheaply: a few optimiser steps from the best of its starts (the starts
    of :func:`fit_candidate`, nested ones from ``fitted`` included)."""
    w, names, design, spec = _model_data(y, model)
    screen = screen_arma(w, spec, design, _nested_starts(model, fitted))
    return ScreenedCandidate(screen, _parameter_count(names, spec), int(np.count_nonzero(~np.isnan(w))))


def _parameter_count(names: list[str], spec: ArmaSpec) -> int:
    """The estimated parameters of a model: its deterministic terms ``names``, the ARMA
    coefficients of ``spec`` and the innovation variance."""
    return len(names) + spec.n_coefficients + 1


def _model_data(y: np.ndarray, model: Order) -> tuple[np.ndarray, list[str], np.ndarray | None, ArmaSpec]:
    """The differenced series, the names and columns of the deterministic terms, and the ARMA
    orders of ``model`` on ``y``.

    Raises
    ------
    ValueError
        When too few differences are observed to estimate the model's parameters (gaps leave
        every difference that reaches them missing).
    """
    w = difference(y, model)
    names, design = trend_design(np.asarray(y).size, model)
    spec = model.arma_spec()
    observed, needed = int(np.count_nonzero(~np.isnan(w))), _parameter_count(names, spec) + 2
    if observed < needed:
        raise ValueError(f"only {observed} of the {w.size} values after differencing are observed (gaps); "
                         f"{model.label()} needs at least {needed}")
    return w, names, design, spec


def fit_candidate(
    y: np.ndarray, model: Order, fitted: Iterable[CandidateFit] = (), screened: ScreenedCandidate | None = None,
    warm: CandidateFit | None = None, period: int | None = None,
) -> CandidateFit:
    """Fit ``model`` to ``y`` by exact maximum likelihood and run its diagnostics.

    Parameters
    ----------
    y : ndarray
        The (transformed) series in levels; differencing is part of the model.
    model : Order
        The order to fit.
    fitted : iterable of CandidateFit
        Fits already made on the same series; the best of those whose order ``model`` contains
        (same differencing and deterministic terms) is one of the optimiser's starts.
    screened : ScreenedCandidate, optional
        The screen of this order (:func:`screen_candidate`); the fit continues from it.
    warm : CandidateFit, optional
        The same order fitted to a stretch of the same series; its optimum is one more start.
    period : int, optional
        The seasonal period of data that show a season, for the residual checks of a model
        without seasonal terms (:func:`ljung_box_lags`; the residual correlogram reaches lag
        ``2 * period`` as the series' own does).
    """
    w, names, design, spec = _model_data(y, model)
    starts = _nested_starts(model, fitted)
    if warm is not None and warm.estimate is not None and warm.model == model:
        starts.append(warm.estimate.unconstrained)
    estimate = fit_arma(w, spec, design, starts, screened.screen if screened else None)
    resid = estimate.residuals
    n = int(np.count_nonzero(~np.isnan(resid)))
    h = ljung_box_lags(n, model, period)
    flags: list[str] = [] if estimate.converged else [Flag.NO_CONVERGENCE]
    flags += root_flags(*factor_roots(spec, estimate.coefficients))
    nlags = min(lag_count(n, model.seasonal_order[3] or period), resid.size - 1)
    k, loglik = _parameter_count(names, spec), estimate.loglik
    criteria = information_criteria(loglik, k, n)
    return CandidateFit(
        model=model, loglik=loglik, aic=criteria["aic"], aicc=criteria["aicc"], bic=criteria["bic"], hqic=criteria["hqic"], nobs=n,
        n_params=k, converged=estimate.converged, term_names=names, ljung_box_p=_ljung_box_p(resid, h, model.n_arma),
        ljung_box_lags=h, residual_correlogram=residual_correlogram(resid, nlags), residuals=resid, flags=flags, estimate=estimate,
    )


def residual_correlogram(resid: np.ndarray, nlags: int, alpha: float = DEFAULT_ALPHA) -> Correlogram:
    """ACF and PACF of a fit's residuals at lags ``1..nlags``, both with the white-noise band.

    The residuals of an adequate model are white noise, so each autocorrelation is judged
    against ``+-z / sqrt(n)`` (``z = 1.96`` at 5%), the same at every lag, and not against
    Bartlett's band, which widens with the correlations at lower lags.

    Parameters
    ----------
    resid : ndarray
        The residuals (one-step prediction errors of the differenced series).
    nlags : int
        Highest lag.
    alpha : float
        Two-sided level of the band.

    Returns
    -------
    Correlogram
        With ``acf_band`` and ``pacf_band`` both ``z / sqrt(n)``; with missing residuals (NaN)
        ``n`` at lag k is :func:`app.core.correlogram.effective_sizes`, from the pairs present.

    References
    ----------
    .. [1] Box, G.E.P., Jenkins, G.M., Reinsel, G.C. & Ljung, G.M. (2015). *Time Series
       Analysis: Forecasting and Control*, 5th ed., Wiley, §8.2.1 (from memory).
    """
    cg = correlogram(np.asarray(resid, dtype=float), nlags, alpha)
    return replace(cg, acf_band=cg.pacf_band.copy())  # the PACF's band is the white-noise one, z / sqrt(n)


def factor_polynomials(spec: ArmaSpec, coefficients: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The four factors ``phi(z), theta(z), Phi(z), Theta(z)`` of a seasonal ARMA model.

    The model is ``phi(B) Phi(B^s) w_t = theta(B) Theta(B^s) e_t`` with
    ``phi(z) = 1 - sum phi_i z^i``, ``theta(z) = 1 + sum theta_j z^j`` (statsmodels' signs) and
    the seasonal factors written as polynomials in ``z = B^s``: ``Phi(z) = 1 - sum Phi_i z^i``,
    ``Theta(z) = 1 + sum Theta_j z^j``.

    Parameters
    ----------
    spec : ArmaSpec
        The orders; ``coefficients`` follow its layout (:meth:`ArmaSpec.names`).
    coefficients : ndarray
        ``ar.L1.., ma.L1.., ar.S.L{s}.., ma.S.L{s}..``.

    Returns
    -------
    tuple of ndarray
        Coefficients of each factor in increasing powers of its own ``z``, constant term first.
        The expanded AR polynomial in ``B`` is ``phi(B) Phi(B^s)``, the MA one
        ``theta(B) Theta(B^s)``.

    References
    ----------
    .. [1] Box, G.E.P., Jenkins, G.M., Reinsel, G.C. & Ljung, G.M. (2015). *Time Series
       Analysis: Forecasting and Control*, 5th ed., Wiley, §9.1 (from memory).
    """
    phi, theta, big_phi, big_theta = spec.blocks(np.asarray(coefficients, dtype=float))
    return np.r_[1.0, -phi], np.r_[1.0, theta], np.r_[1.0, -big_phi], np.r_[1.0, big_theta]


def factor_roots(spec: ArmaSpec, coefficients: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Roots of the four factors of :func:`factor_polynomials`: those of ``phi`` and ``theta``
    in ``z = B``, those of ``Phi`` and ``Theta`` in ``z = B^s`` (an empty array for a factor
    of degree 0).

    References
    ----------
    .. [1] Box, G.E.P., Jenkins, G.M., Reinsel, G.C. & Ljung, G.M. (2015). *Time Series
       Analysis: Forecasting and Control*, 5th ed., Wiley, §9.1 (from memory).
    """
    ar, ma, seasonal_ar, seasonal_ma = (_roots(f) for f in factor_polynomials(spec, coefficients))
    return ar, ma, seasonal_ar, seasonal_ma


def _roots(polynomial: np.ndarray) -> np.ndarray:
    coefficients = np.trim_zeros(np.asarray(polynomial, dtype=float), "b")
    return np.polynomial.polynomial.polyroots(coefficients) if coefficients.size > 1 else np.zeros(0, dtype=complex)


def _ljung_box_p(resid: np.ndarray, lags: int, model_df: int) -> float | None:
    """p-value of ``Q = n (n + 2) sum_{k<=h} r_k^2 / (n - k)`` against chi2(h - model_df)
    (Ljung & Box 1978), ``r_k`` the sample autocorrelations of the residuals.

    With missing residuals ``r_k`` is the pairwise ACF and ``n`` at lag k its ``n_k``
    (:func:`app.core.correlogram.effective_sizes`): ``Q = sum n_k (n_k + 2) r_k^2 / (n_k - k)``,
    the usual statistic on complete residuals."""
    if lags >= resid.size or lags <= model_df:
        return None
    n = effective_sizes(resid, lags)
    r = autocorrelations(resid, lags)[1:]
    statistic = float(np.sum(n * (n + 2) * r**2 / np.maximum(n - np.arange(1, lags + 1), 1.0)))
    return float(chdtrc(lags - model_df, statistic))


def root_flags(ar_roots: np.ndarray, ma_roots: np.ndarray, seasonal_ar_roots: np.ndarray, seasonal_ma_roots: np.ndarray) -> list[str]:
    """``near_unit_root`` and ``redundant_roots`` flags from the roots of a model's factors.

    Each factor is judged on its own scale (the roots of :func:`factor_roots`): a root of any
    factor with modulus below :data:`NEAR_UNIT_ROOT` gives ``near_unit_root``; an inverse root
    of the AR factor within :data:`CANCELLING_ROOT_DISTANCE` of one of the MA factor, or of the
    seasonal AR factor within that distance of one of the seasonal MA factor, gives
    ``redundant_roots``. An ordinary and a seasonal factor are not paired: a root ``r`` of
    ``Theta(z)`` stands for the factor ``1 - B^s / r`` of ``s`` roots in ``B``, which an
    ordinary factor cancels only by containing all ``s`` of them (so only when ``p >= s``, a
    case left unflagged).

    Parameters
    ----------
    ar_roots, ma_roots : ndarray
        Roots of ``phi(z)`` and ``theta(z)``, ``z = B``.
    seasonal_ar_roots, seasonal_ma_roots : ndarray
        Roots of ``Phi(z)`` and ``Theta(z)``, ``z = B^s``.

    Returns
    -------
    list of str
        The flags raised, in that order.

    References
    ----------
    .. [1] Box, G.E.P., Jenkins, G.M., Reinsel, G.C. & Ljung, G.M. (2015). *Time Series
       Analysis: Forecasting and Control*, 5th ed., Wiley, §7.3 (parameter redundancy) and §9.1
       (the multiplicative seasonal model); sections from memory.
    .. [2] Hyndman, R.J. & Athanasopoulos, G. (2021). *Forecasting: Principles and Practice*,
       3rd ed., OTexts, §9.7 (roots near the unit circle).
    """
    flags: list[str] = []
    factors = [np.asarray(r, dtype=complex) for r in (ar_roots, ma_roots, seasonal_ar_roots, seasonal_ma_roots)]
    if any(np.abs(r).min() < NEAR_UNIT_ROOT for r in factors if r.size):
        flags.append(Flag.NEAR_UNIT_ROOT)
    if any(_closest_inverse_roots(ar, ma) < CANCELLING_ROOT_DISTANCE for ar, ma in (factors[:2], factors[2:])):
        flags.append(Flag.REDUNDANT_ROOTS)
    return flags


def _closest_inverse_roots(ar: np.ndarray, ma: np.ndarray) -> float:
    """The smallest distance between an inverse AR root and an inverse MA root (inf if either
    factor has none)."""
    return float(np.abs((1 / ar)[:, None] - (1 / ma)[None, :]).min()) if ar.size and ma.size else math.inf
