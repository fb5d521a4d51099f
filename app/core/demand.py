"""Is a non-negative series intermittent demand? The ADI / CV² classification.

Sales of slow-moving items are mostly zeros with occasional, irregular sizes. A Gaussian ARIMA
describes such a series poorly (it forecasts a smooth mean and gives negative lower bounds), and
practitioners forecast it with Croston's method or its bias-corrected variant instead. The
classification of Syntetos, Boylan & Croston (2005) places a series by two figures:

* **ADI**, the average inter-demand interval: the mean number of periods from one demand to
  the next, ``(t_last - t_first) / (k - 1)`` over the ``k`` periods with a demand. The zeros
  before the first demand and after the last are no intervals between demands: a product
  launched after five years of zeros and sold every period since has ADI 1, where ``n / k``
  (common practice) made it intermittent, and its launch was never sought as a level shift.
* **CV²**, the squared coefficient of variation of the non-zero demand sizes
  (population variance over squared mean).

with the cut-offs ADI = 1.32 and CV² = 0.49: *smooth* (both below), *erratic* (sizes vary),
*intermittent* (demand is infrequent), *lumpy* (both). Only series that are non-negative and
hold at least one zero between their first demand and their last are classified; anything
else is not demand-like in this sense.

References
----------
.. [1] Syntetos, A.A., Boylan, J.E. & Croston, J.D. (2005). On the categorization of demand
   patterns. *Journal of the Operational Research Society* 56, 495-503.
.. [2] Croston, J.D. (1972). Forecasting and stock control for intermittent demands.
   *Operational Research Quarterly* 23, 289-303.
.. [3] Syntetos, A.A. & Boylan, J.E. (2005). The accuracy of intermittent demand estimates.
   *International Journal of Forecasting* 21, 303-314.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

ADI_CUTOFF = 1.32
CV2_CUTOFF = 0.49
SPARSE_CLASSES = ("intermittent", "lumpy")


@dataclass(frozen=True)
class DemandPattern:
    """Where a non-negative series with zeros falls in the ADI / CV² plane."""

    adi: float
    cv2: float
    label: str

    @property
    def sparse(self) -> bool:
        """Intermittent or lumpy: demand too infrequent for a Gaussian ARIMA."""
        return self.label in SPARSE_CLASSES

    def words(self) -> str:
        text = (f"Demand pattern {self.label}: from one demand to the next {self.adi:.2f} periods on average "
                f"(ADI; cut-off {ADI_CUTOFF}), and the non-zero sizes have CV² = {self.cv2:.2f} (cut-off {CV2_CUTOFF}).")
        if self.sparse:
            text += (" A Gaussian ARIMA suits such a series poorly: it forecasts a smooth level and its lower "
                     "bounds go below zero. Practitioners use Croston's method or its bias-corrected variant "
                     "(Syntetos & Boylan 2005); the reviewer can record this series as not an ARIMA series. "
                     "Outliers and level shifts are not sought: against that smooth level every period with a "
                     "demand would read as one.")
        return text


def classify_demand(values: np.ndarray) -> DemandPattern | None:
    """The ADI / CV² class of ``values``, or None when the series is not demand-like.

    Parameters
    ----------
    values : ndarray
        The series on its regular grid; missing points (NaN) are left out, so ADI counts the
        observed periods between demands.

    Returns
    -------
    DemandPattern or None
        None when a value is negative, when no value between the first demand and the last is
        zero, or when fewer than two values are non-zero (no interval, no size variation).

    References
    ----------
    .. [1] Syntetos, Boylan & Croston (2005), *JORS* 56, 495-503 (cut-offs 1.32 and 0.49).
    """
    y = np.asarray(values, dtype=float)
    y = y[~np.isnan(y)]
    if y.size == 0 or np.any(y < 0):
        return None
    demands = np.flatnonzero(y > 0)
    if demands.size < 2 or not np.any(y[demands[0]:demands[-1]] == 0):
        return None
    sizes = y[demands]
    adi = (demands[-1] - demands[0]) / (demands.size - 1)
    cv2 = float(np.var(sizes) / np.mean(sizes) ** 2)
    rare, varied = adi >= ADI_CUTOFF, cv2 >= CV2_CUTOFF
    label = {(False, False): "smooth", (False, True): "erratic", (True, False): "intermittent", (True, True): "lumpy"}[(rare, varied)]
    return DemandPattern(adi=float(adi), cv2=cv2, label=label)
