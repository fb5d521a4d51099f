"""Fitting one candidate ARIMA / SARIMA order by exact maximum likelihood and checking it.

A fit keeps what a reviewer needs to judge it: log-likelihood, AIC, AICc, BIC, parameter
estimates with standard errors, whether the optimiser converged, a Ljung-Box test on the
residuals, the residual ACF, and root checks.

* Fitting: statsmodels ``SARIMAX`` on the differenced series (``simple_differencing=True``)
  with the innovation variance concentrated out of the likelihood (``concentrate_scale=True``):
  exact Gaussian likelihood by the Kalman filter. Measured here on monthly CO2 it reaches the
  same log-likelihood and AIC as statsmodels ``ARIMA`` (which keeps the differencing inside the
  state and excludes the diffuse start-up from the likelihood) at 4-5x the speed. A drift
  (trend ``"t"`` at d = 1) is a constant of the differenced model.
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
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np
from statsmodels.stats.diagnostic import acorr_ljungbox
from statsmodels.tools.sm_exceptions import ConvergenceWarning
from statsmodels.tsa.statespace.sarimax import SARIMAX

from app.core.correlogram import Correlogram, correlogram, lag_count
from app.core.errors import OrderError

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


def fit_candidate(y: np.ndarray, model: ModelOrder) -> CandidateFit:
    """Fit ``model`` to ``y`` by exact maximum likelihood and run its diagnostics.

    Parameters
    ----------
    y : ndarray
        The (transformed) series in levels; differencing is part of the model.
    model : ModelOrder
        The order to fit.
    """
    # A model with nothing but the variance to estimate (a random walk) has no parameter left
    # once the variance is concentrated out, and the optimiser refuses an empty problem.
    concentrate = model.n_arma > 0 or model.trend != "n"
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = SARIMAX(
            y, order=model.order, seasonal_order=model.seasonal_order, trend=differenced_trend(model.trend),
            simple_differencing=True, concentrate_scale=concentrate,
            enforce_stationarity=True, enforce_invertibility=True,
        ).fit(disp=False)
    warned = any(issubclass(w.category, ConvergenceWarning) for w in caught)
    converged = bool(result.mle_retvals.get("converged", True)) and not warned
    resid = np.asarray(result.resid, dtype=float)
    h = ljung_box_lags(resid.size, model)
    lb_p = _ljung_box_p(resid, h, model.n_arma)
    flags = [] if converged else ["no_convergence"]
    flags += root_flags(result.arroots, result.maroots)
    nlags = lag_count(resid.size, model.seasonal_order[3] or None)
    bse = np.asarray(result.bse, dtype=float) if np.ndim(result.bse) else np.full(len(result.params), np.nan)
    params = [
        {"name": _param_name(str(name), model.trend), "value": float(value), "se": _finite_or_none(float(se))}
        for name, value, se in zip(result.param_names, np.asarray(result.params), bse)
    ]
    if concentrate:
        params.append({"name": "sigma2", "value": float(result.scale), "se": None})
    return CandidateFit(
        model=model, loglik=float(result.llf), aic=float(result.aic), aicc=float(result.aicc),
        bic=float(result.bic), hqic=float(result.hqic), nobs=int(result.nobs_effective),
        n_params=len(params), converged=converged, params=params, ljung_box_p=lb_p, ljung_box_lags=h,
        residual_correlogram=correlogram(resid, nlags), residuals=resid, flags=flags,
    )


def differenced_trend(trend: str) -> str:
    """The model's deterministic term as a term of the differenced series: a drift is a constant."""
    return "c" if trend == "t" else trend


def _param_name(name: str, trend: str) -> str:
    """statsmodels calls the drift of a differenced model ``intercept``: name it for what it is."""
    if name == "intercept":
        return "drift" if trend == "t" else "const"
    return name


def _ljung_box_p(resid: np.ndarray, lags: int, model_df: int) -> float | None:
    if lags >= resid.size or lags <= model_df:
        return None
    table = acorr_ljungbox(resid, lags=[lags], model_df=model_df, return_df=True)
    return float(table["lb_pvalue"].iloc[0])


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
