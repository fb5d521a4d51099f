"""Residuals the model does not explain: the largest robustly standardised residual of a fit.

An outlier, a level shift or a temporary change leaves a residual far beyond what the
innovation variance allows. Before any outlier is modelled, the engine only needs to know
whether the leading model leaves such a residual, and where: that blocks ``firm`` and tells
the reviewer what to look at.

* **Rescaled residuals**: a one-step prediction error ``e_t`` of an exact-likelihood fit has
  variance ``r_t σ²``, where ``r_t`` (:func:`prediction_variance_ratios`, the innovations
  algorithm) falls to 1 as the filter forgets its start: the first error of a persistent
  stationary model is predicted from the mean alone. Each error is divided by ``√r_t`` first,
  as Brockwell & Davis (1991, §9.4, from memory) rescale ARMA residuals for diagnostic checking.
* **Scale**: the residuals are divided by a robust estimate of the innovation standard
  deviation, ``1.483 × median |e_t − median(e)|`` (the median absolute deviation, consistent
  for the normal), so that the outliers themselves do not inflate it. Chen & Liu (1993) use a
  robust scale for the same reason (from memory).
* **Threshold** ``C(n)``: the Bonferroni bound for the largest of ``n`` Gaussian residuals at a
  family level of 5%, ``C = Φ⁻¹(1 − 0.05 / (2n))``: 3.48 at n = 100, 3.84 at n = 400, 4.06 at
  n = 1,000. By chance it is passed in about 5% of clean series whatever their length
  (1 − (1 − 2Φ(−C))^n ≤ 0.05). The per-point critical values Chen & Liu (1993) recommend for
  their detection procedure, about 3.0 for short and 3.5 for long series (from memory), were
  passed by chance in about a quarter of clean series of 100 points and a sixth of 400: too
  many for a check whose only effect is to withhold ``firm``. A 5σ spike still passes the bound
  in series of up to about 80,000 points.

References
----------
.. [1] Chen, C. & Liu, L.-M. (1993). Joint estimation of model parameters and outlier effects
   in time series. *JASA* 88, 284-297.
.. [2] Dunn, O.J. (1961). Multiple comparisons among means. *JASA* 56, 52-64 (the Bonferroni
   bound for a family of tests).
.. [3] Hampel, F.R. (1974). The influence curve and its role in robust estimation. *JASA* 69,
   383-393 (the median absolute deviation and its constant 1.4826).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.stats import norm
from statsmodels.tsa.innovations.arma_innovations import arma_innovations

from app.core.prepare import moment

MAD_TO_SD = 1.4826
FAMILY_LEVEL = 0.05


@dataclass(frozen=True)
class LargeResidual:
    """The largest standardised residual of a fit, where it falls, and the threshold it passed."""

    position: int
    when: str
    z: float
    threshold: float

    def words(self) -> str:
        return (f"A residual of {self.z:+.1f} robust standard deviations at {self.when} is beyond the outlier "
                f"threshold {self.threshold:.1f}: an outlier, a level shift or a change the model does not explain.")


def outlier_threshold(n: int) -> float:
    """The critical value ``C(n) = Φ⁻¹(1 − FAMILY_LEVEL / (2n))`` (see the module notes)."""
    return float(norm.isf(FAMILY_LEVEL / (2.0 * max(n, 1))))


def robust_scale(residuals: np.ndarray) -> float:
    """``1.4826 × median |e − median(e)|`` (Hampel 1974)."""
    e = np.asarray(residuals, dtype=float)
    return float(MAD_TO_SD * np.median(np.abs(e - np.median(e))))


def prediction_variance_ratios(ar_polynomial: np.ndarray, ma_polynomial: np.ndarray, n: int) -> np.ndarray:
    """``r_t``, the one-step prediction error variance over the innovation variance, for the first
    ``n`` steps of the stationary ARMA with these polynomials (innovations algorithm, Brockwell &
    Davis 1991, §5.2, from memory; statsmodels' ``arma_innovations``); ones when it refuses them."""
    try:
        _, ratios = arma_innovations(np.zeros(n), ar_params=-np.asarray(ar_polynomial)[1:], ma_params=np.asarray(ma_polynomial)[1:])
    except (ValueError, np.linalg.LinAlgError):
        return np.ones(n)
    return np.asarray(ratios, dtype=float)


def largest_residual(residuals: np.ndarray, index: pd.Index, variance_ratios: np.ndarray | None = None) -> LargeResidual | None:
    """The largest robustly standardised residual when it passes :func:`outlier_threshold`.

    Parameters
    ----------
    residuals : ndarray
        One-step prediction errors of a fit; they belong to the last ``len(residuals)`` points
        of the series (the first ones are lost to differencing). Missing residuals (NaN, at
        missing points) are skipped.
    index : pandas.Index
        The series' time index, to say when the residual fell.
    variance_ratios : ndarray, optional
        ``r_t`` of :func:`prediction_variance_ratios`, one per residual; each residual is
        divided by ``sqrt(r_t)`` first (module notes). None takes the residuals as they are.

    Returns
    -------
    LargeResidual or None
        None when every residual is within the threshold, or the robust scale is zero.
    """
    e = np.asarray(residuals, dtype=float)
    if variance_ratios is not None:
        e = e / np.sqrt(variance_ratios)
    present = e[~np.isnan(e)]
    scale = robust_scale(present) if present.size else 0.0
    if scale <= 0.0:
        return None
    z = (e - np.median(present)) / scale
    i = int(np.nanargmax(np.abs(z)))
    threshold = outlier_threshold(len(index))
    if abs(z[i]) <= threshold:
        return None
    position = len(index) - e.size + i
    return LargeResidual(position=position, when=moment(index[position]), z=float(z[i]), threshold=threshold)

