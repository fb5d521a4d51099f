"""A cycle longer than the seasonal period, left in the suggestion's residuals.

Hourly readings of plant and people often follow the week as well as the day (a line idle at
weekends, a building empty on Sundays). A seasonal ARIMA takes one period, which the engine
reads from the sampling frequency (24 for hourly data); its correlograms and its Ljung-Box test
reach two periods, not the week. (The year of daily data is left out: a seasonal ARIMA at 365
is no practical model, and the advice to try one would be bad advice.) Whether
the longer cycle is left over shows in the suggestion's residuals at its lag ``L``: for white
noise residuals, their autocorrelation ``r_L`` is close to normal with variance ``1/m`` for
``m`` pairs (Box & Pierce 1970, the distribution of residual autocorrelations, from memory).
One lag named in advance is tested, at 1% (``|r_L| > 2.576 / sqrt(m)``), so a series without
the cycle is named by chance once in a hundred; the residuals must span at least
:data:`MIN_CYCLES` cycles.

References
----------
.. [1] Box, G.E.P. & Pierce, D.A. (1970). Distribution of residual autocorrelations in
   autoregressive-integrated moving average time series models. *JASA* 65, 1509-1526.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
from pandas.tseries.frequencies import to_offset

LEVEL_Z = 2.5758  # two-sided 1% point of the standard normal
MIN_CYCLES = 3
_ONE_HOUR = pd.Timedelta(hours=1)
WEEK_OF_HOURS = (168, "a week")


@dataclass(frozen=True)
class LongerCycle:
    """The residual autocorrelation at a longer cycle's lag, beyond the 1% band."""

    lag: int
    name: str
    r: float
    band: float
    pairs: int

    def words(self) -> str:
        return (f"The residuals of the suggestion correlate at lag {self.lag} ({self.name}): r = {self.r:+.2f}, beyond "
                f"±{self.band:.2f} (1%, {self.pairs} pairs). A cycle of {self.name} that the model does not take: identify "
                f"the series with the seasonal period {self.lag} (lagdesk identify --period {self.lag}), or try a seasonal "
                f"order at {self.lag} as a custom model.")

    def doubt(self) -> str:
        return f"residual autocorrelation {self.r:+.2f} at lag {self.lag} ({self.name})"


def cycle_of(freq: str) -> tuple[int, str] | None:
    """The longer cycle of a sampling frequency (hourly: 168 steps, a week), or None."""
    try:
        offset = to_offset(freq)
    except ValueError:
        return None
    if isinstance(offset, pd.offsets.Tick) and pd.Timedelta(offset) == _ONE_HOUR:
        return WEEK_OF_HOURS
    return None


def longer_cycle(residuals: np.ndarray, freq: str, period: int) -> LongerCycle | None:
    """The longer cycle of ``freq`` when the ``residuals`` correlate at its lag beyond the 1%
    band (module notes); None when they do not, when the frequency has none, when the model's
    seasonal ``period`` is that lag already, or when the residuals span fewer than
    :data:`MIN_CYCLES` cycles."""
    cycle = cycle_of(freq)
    if cycle is None or cycle[0] == period:
        return None
    lag, name = cycle
    e = np.asarray(residuals, dtype=float)
    if e.size < MIN_CYCLES * lag:
        return None
    e = e - np.nanmean(e)
    products = e[lag:] * e[:-lag]
    present = ~np.isnan(products)
    pairs = int(np.count_nonzero(present))
    energy = float(np.nansum(e * e))
    if pairs == 0 or energy <= 0.0:
        return None
    r = float(np.sum(products[present]) / energy)
    band = LEVEL_Z / math.sqrt(pairs)
    return LongerCycle(lag, name, r, band, pairs) if abs(r) > band else None
