"""Fitting one candidate ARIMA / SARIMA order by exact maximum likelihood and checking it.

A fit keeps what a reviewer needs to judge it: log-likelihood, AIC, AICc, BIC, parameter
estimates with standard errors, whether the optimiser converged, a Ljung-Box test on the
residuals, the residual ACF, and root checks.

* Fitting: exact Gaussian maximum likelihood of the differenced series by the compiled Kalman
  filter of :mod:`app.core.likelihood`, with the innovation variance and the deterministic
  terms profiled out. The model is a regression with ARMA errors, as in statsmodels ``ARIMA``:
  ``const`` is the mean of an undifferenced series, ``drift`` the slope of a linear trend in
  levels, which at d = 1 is the mean of the differenced series. The likelihood is the one
  statsmodels ``ARIMA`` computes at the same parameters (the tests check it to 1e-9); the
  optimum is sought from several starts, the optimum of any smaller order already fitted among
  them, so a larger order never ends below an order it contains.
* Ljung-Box: ``h = min(2s, n/5)`` lags for a seasonal model and ``min(10, n/5)`` otherwise
  (Hyndman & Athanasopoulos' rule of thumb, common practice), degrees of freedom reduced by
  ``p + q + P + Q``, and ``h`` raised to at least ``p + q + P + Q + 3`` so the test keeps three
  degrees of freedom. Residuals are those of the differenced series, so the ``d + sD`` start-up
  values that a levels filter would produce never enter the test.
* Roots: an AR or MA root with modulus below :data:`NEAR_UNIT_ROOT` is flagged
  ``near_unit_root`` (the model sits on the edge of stationarity/invertibility); an AR root and
  an MA root closer than :data:`CANCELLING_ROOT_DISTANCE` (inverse roots, complex plane) are
  flagged ``redundant_roots`` (they nearly cancel: the order is over-specified).

References
----------
.. [1] Ljung, G.M. & Box, G.E.P. (1978). On a measure of lack of fit in time series models.
   *Biometrika* 65, 297-303.
.. [2] Hurvich, C.M. & Tsai, C.-L. (1989). Regression and time series model selection in small
   samples. *Biometrika* 76, 297-307 (AICc).
.. [3] Hyndman, R.J. & Athanasopoulos, G. (2021). *Forecasting: Principles and Practice*, 3rd ed.,
   §5.4 (Ljung-Box lags) and §9.7 (roots near the unit circle).
.. [4] Akaike, H. (1974). A new look at the statistical model identification. *IEEE Trans.
   Automatic Control* 19, 716-723; Schwarz, G. (1978). Estimating the dimension of a model.
   *Annals of Statistics* 6, 461-464; Hannan, E.J. & Quinn, B.G. (1979). The determination of
   the order of an autoregression. *JRSS B* 41, 190-195.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass, field

import numpy as np
from scipy.special import chdtrc

from app.core.analysis import Candidate, Correlation, Parameter
from app.core.correlogram import Correlogram, autocorrelations, correlogram, lag_count
from app.core.likelihood import ArmaFit, ArmaScreen, fit_arma, is_nested_in, nested_start, screen_arma
from app.core.order import Order
from app.core.vocabulary import Flag

NEAR_UNIT_ROOT = 1.02
CANCELLING_ROOT_DISTANCE = 0.15
LJUNG_BOX_LEVEL = 0.05


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
    params: list[Parameter]
    ljung_box_p: float | None
    ljung_box_lags: int
    residual_correlogram: Correlogram
    residuals: np.ndarray
    flags: list[str] = field(default_factory=list)
    source: list[str] = field(default_factory=list)
    estimate: ArmaFit | None = field(default=None, repr=False)

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


def ljung_box_lags(n: int, model: Order) -> int:
    """Lags for the residual Ljung-Box test (see the module notes)."""
    s = model.seasonal_order[3]
    h = min(2 * s, n // 5) if s else min(10, n // 5)
    return max(h, model.n_arma + 3)


def difference(y: np.ndarray, model: Order) -> np.ndarray:
    """The series (or the columns of an array) after the model's seasonal and ordinary differences."""
    _, d, _ = model.order
    _, sd, _, s = model.seasonal_order
    w = np.asarray(y, dtype=float)
    for _ in range(sd):
        w = w[s:] - w[:-s]
    return np.diff(w, n=d, axis=0) if d else w


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
    w = difference(y, model)
    names, design = trend_design(np.asarray(y).size, model)
    spec = model.arma_spec()
    screen = screen_arma(w, spec, design, _nested_starts(model, fitted))
    return ScreenedCandidate(screen, len(names) + spec.n_coefficients + 1, w.size)


def fit_candidate(
    y: np.ndarray, model: Order, fitted: Iterable[CandidateFit] = (), screened: ScreenedCandidate | None = None
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
    """
    w = difference(y, model)
    names, design = trend_design(np.asarray(y).size, model)
    spec = model.arma_spec()
    estimate = fit_arma(w, spec, design, _nested_starts(model, fitted), screened.screen if screened else None)
    resid = estimate.residuals
    h = ljung_box_lags(resid.size, model)
    flags: list[str] = [] if estimate.converged else [Flag.NO_CONVERGENCE]
    flags += root_flags(_roots(estimate.ar_polynomial), _roots(estimate.ma_polynomial))
    nlags = lag_count(resid.size, model.seasonal_order[3] or None)
    se = estimate.standard_errors
    values = np.r_[estimate.beta, estimate.coefficients]
    errors = np.r_[se[spec.n_coefficients:], se[:spec.n_coefficients]]
    params = [
        Parameter(name, float(value), _finite_or_none(float(error)))
        for name, value, error in zip(names + spec.names(), values, errors)
    ]
    params.append(Parameter("sigma2", estimate.sigma2, None))
    k, n, loglik = len(params), resid.size, estimate.loglik
    criteria = information_criteria(loglik, k, n)
    return CandidateFit(
        model=model, loglik=loglik, aic=criteria["aic"], aicc=criteria["aicc"], bic=criteria["bic"], hqic=criteria["hqic"], nobs=n,
        n_params=k, converged=estimate.converged, params=params, ljung_box_p=_ljung_box_p(resid, h, model.n_arma),
        ljung_box_lags=h, residual_correlogram=correlogram(resid, nlags), residuals=resid, flags=flags, estimate=estimate,
    )


def _roots(polynomial: np.ndarray) -> np.ndarray:
    coefficients = np.trim_zeros(np.asarray(polynomial, dtype=float), "b")
    return np.polynomial.polynomial.polyroots(coefficients) if coefficients.size > 1 else np.zeros(0, dtype=complex)


def _ljung_box_p(resid: np.ndarray, lags: int, model_df: int) -> float | None:
    """p-value of ``Q = n (n + 2) sum_{k<=h} r_k^2 / (n - k)`` against chi2(h - model_df)
    (Ljung & Box 1978), ``r_k`` the sample autocorrelations of the residuals."""
    if lags >= resid.size or lags <= model_df:
        return None
    n = resid.size
    r = autocorrelations(resid, lags)[1:]
    statistic = n * (n + 2) * float(np.sum(r**2 / (n - np.arange(1, lags + 1))))
    return float(chdtrc(lags - model_df, statistic))


def root_flags(ar_roots: np.ndarray, ma_roots: np.ndarray) -> list[str]:
    """``near_unit_root`` and ``redundant_roots`` flags from the AR and MA polynomial roots."""
    flags: list[str] = []
    ar, ma = np.asarray(ar_roots, dtype=complex), np.asarray(ma_roots, dtype=complex)
    if any(np.abs(r).min() < NEAR_UNIT_ROOT for r in (ar, ma) if r.size):
        flags.append(Flag.NEAR_UNIT_ROOT)
    if ar.size and ma.size:
        distance = np.abs((1 / ar)[:, None] - (1 / ma)[None, :]).min()
        if distance < CANCELLING_ROOT_DISTANCE:
            flags.append(Flag.REDUNDANT_ROOTS)
    return flags
