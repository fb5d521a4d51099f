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

from app.core.correlogram import Correlogram, autocorrelations, correlogram, lag_count
from app.core.errors import OrderError
from app.core.likelihood import ArmaFit, ArmaScreen, ArmaSpec, fit_arma, nested_start, nests, screen_arma

NEAR_UNIT_ROOT = 1.02
CANCELLING_ROOT_DISTANCE = 0.15
LJUNG_BOX_LEVEL = 0.05
MAX_ORDER = 5
MAX_SEASONAL_ORDER = 2


@dataclass(frozen=True)
class ModelOrder:
    """A validated (p,d,q)(P,D,Q)s order with the deterministic term of the model."""

    order: tuple[int, int, int]
    seasonal_order: tuple[int, int, int, int] = (0, 0, 0, 0)
    trend: str = "n"

    @property
    def n_arma(self) -> int:
        p, _, q = self.order
        sp, _, sq, _ = self.seasonal_order
        return p + q + sp + sq

    @property
    def lost_to_differencing(self) -> int:
        _, d, _ = self.order
        _, sd, _, s = self.seasonal_order
        return d + s * sd

    def arma_spec(self) -> ArmaSpec:
        """The ARMA part, for the differenced series."""
        p, _, q = self.order
        sp, _, sq, s = self.seasonal_order
        return ArmaSpec(p, q, sp, sq, s if sp or sq else 0)

    def label(self) -> str:
        p, d, q = self.order
        text = f"ARIMA({p},{d},{q})"
        if self.seasonal_order[3]:
            sp, sd, sq, s = self.seasonal_order
            text += f"({sp},{sd},{sq}){s}"
        return text


def validate_order(order, seasonal_order=(0, 0, 0, 0), n: int | None = None, trend: str | None = None) -> ModelOrder:
    """Check an order a person typed or a program sent, and pick the model's deterministic term.

    Raises
    ------
    OrderError
        With a message naming the bad value.
    """
    try:
        p, d, q = (_whole(v) for v in order)
        sp, sd, sq, s = (_whole(v) for v in seasonal_order)
    except (TypeError, ValueError):
        raise OrderError(f"order must be three whole numbers (p,d,q) and seasonal order four (P,D,Q,s); got {order!r}, {seasonal_order!r}") from None
    for name, value, high in (("p", p, 10), ("d", d, 2), ("q", q, 10), ("P", sp, 3), ("D", sd, 1), ("Q", sq, 3)):
        if not 0 <= value <= high:
            raise OrderError(f"{name} = {value} is outside 0..{high}")
    if s < 0 or s == 1:
        raise OrderError(f"seasonal period s = {s} must be 0 (no season) or at least 2")
    if s == 0 and (sp or sd or sq):
        raise OrderError("a seasonal order (P,D,Q) needs a seasonal period s >= 2")
    model = ModelOrder((p, d, q), (sp, sd, sq, s), trend if trend is not None else default_trend(d, sd))
    if n is not None:
        needed = model.lost_to_differencing + max(p + s * sp, q + s * sq) + model.n_arma + 3
        if n < needed:
            raise OrderError(f"{model.label()} needs at least {needed} observations; the series has {n}")
    return model


def _whole(value) -> int:
    if isinstance(value, bool) or float(value) != int(float(value)):
        raise ValueError(value)
    return int(float(value))


def default_trend(d: int, seasonal_d: int = 0) -> str:
    """A constant for an undifferenced model, none once the series is differenced."""
    return "c" if d + seasonal_d == 0 else "n"


@dataclass
class CandidateFit:
    """One fitted candidate with its statistics and diagnostics."""

    model: ModelOrder
    loglik: float
    aic: float
    aicc: float
    bic: float
    hqic: float
    nobs: int
    n_params: int
    converged: bool
    params: list[dict]
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

    def to_dict(self) -> dict:
        return {
            "order": list(self.model.order),
            "seasonal_order": list(self.model.seasonal_order),
            "trend": self.model.trend,
            "label": self.model.label(),
            "source": list(self.source),
            "loglik": self.loglik, "aic": self.aic, "aicc": self.aicc, "bic": self.bic, "hqic": self.hqic,
            "nobs": self.nobs, "n_params": self.n_params, "converged": self.converged,
            "ljung_box_p": _finite_or_none(self.ljung_box_p), "ljung_box_lags": self.ljung_box_lags,
            "params": self.params,
            "residual_acf": self.residual_correlogram.to_dict()["acf"],
            "residuals": [float(v) for v in self.residuals],
            "flags": list(self.flags),
        }


def _finite_or_none(value: float | None) -> float | None:
    return None if value is None or not math.isfinite(value) else float(value)


def ljung_box_lags(n: int, model: ModelOrder) -> int:
    """Lags for the residual Ljung-Box test (see the module notes)."""
    s = model.seasonal_order[3]
    h = min(2 * s, n // 5) if s else min(10, n // 5)
    return max(h, model.n_arma + 3)


def difference(y: np.ndarray, model: ModelOrder) -> np.ndarray:
    """The series (or the columns of an array) after the model's seasonal and ordinary differences."""
    _, d, _ = model.order
    _, sd, _, s = model.seasonal_order
    w = np.asarray(y, dtype=float)
    for _ in range(sd):
        w = w[s:] - w[:-s]
    return np.diff(w, n=d, axis=0) if d else w


def trend_design(n: int, model: ModelOrder) -> tuple[list[str], np.ndarray | None]:
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


def _nested_starts(model: ModelOrder, fitted: Iterable[CandidateFit]) -> list[np.ndarray]:
    """The optimum of the best fitted order that ``model`` contains, as a start (or none)."""
    spec = model.arma_spec()
    smaller = [f for f in fitted if f.estimate is not None and _same_base(f.model, model) and nests(f.estimate.spec, spec)]
    return [nested_start(max(smaller, key=lambda f: f.loglik).estimate, spec)] if smaller else []


def screen_candidate(y: np.ndarray, model: ModelOrder, fitted: Iterable[CandidateFit] = ()) -> ScreenedCandidate:
    """Look at ``model`` cheaply: a few optimiser steps from the best of its starts (the starts
    of :func:`fit_candidate`, nested ones from ``fitted`` included)."""
    w = difference(y, model)
    names, design = trend_design(np.asarray(y).size, model)
    spec = model.arma_spec()
    screen = screen_arma(w, spec, design, _nested_starts(model, fitted))
    return ScreenedCandidate(screen, len(names) + spec.n_coefficients + 1, w.size)


def fit_candidate(
    y: np.ndarray, model: ModelOrder, fitted: Iterable[CandidateFit] = (), screened: ScreenedCandidate | None = None
) -> CandidateFit:
    """Fit ``model`` to ``y`` by exact maximum likelihood and run its diagnostics.

    Parameters
    ----------
    y : ndarray
        The (transformed) series in levels; differencing is part of the model.
    model : ModelOrder
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
    flags = [] if estimate.converged else ["no_convergence"]
    flags += root_flags(_roots(estimate.ar_polynomial), _roots(estimate.ma_polynomial))
    nlags = lag_count(resid.size, model.seasonal_order[3] or None)
    se = estimate.standard_errors
    values = np.r_[estimate.beta, estimate.coefficients]
    errors = np.r_[se[spec.n_coefficients:], se[:spec.n_coefficients]]
    params = [
        {"name": name, "value": float(value), "se": _finite_or_none(float(error))}
        for name, value, error in zip(names + spec.names(), values, errors)
    ]
    params.append({"name": "sigma2", "value": estimate.sigma2, "se": None})
    k, n, loglik = len(params), resid.size, estimate.loglik
    return CandidateFit(
        model=model, loglik=loglik, **information_criteria(loglik, k, n), nobs=n,
        n_params=k, converged=estimate.converged, params=params, ljung_box_p=_ljung_box_p(resid, h, model.n_arma),
        ljung_box_lags=h, residual_correlogram=correlogram(resid, nlags), residuals=resid, flags=flags, estimate=estimate,
    )


def _same_base(a: ModelOrder, b: ModelOrder) -> bool:
    """Same differencing and deterministic terms: both fits are of the same differenced series."""
    def base(m: ModelOrder) -> tuple:
        return m.order[1], m.seasonal_order[1], m.seasonal_order[3] if m.seasonal_order[1] else 0, m.trend
    return base(a) == base(b)


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
    flags = []
    ar, ma = np.asarray(ar_roots, dtype=complex), np.asarray(ma_roots, dtype=complex)
    if any(np.abs(r).min() < NEAR_UNIT_ROOT for r in (ar, ma) if r.size):
        flags.append("near_unit_root")
    if ar.size and ma.size:
        distance = np.abs((1 / ar)[:, None] - (1 / ma)[None, :]).min()
        if distance < CANCELLING_ROOT_DISTANCE:
            flags.append("redundant_roots")
    return flags
