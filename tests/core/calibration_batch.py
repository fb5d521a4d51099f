"""A seeded batch for calibrating ``firm``: the accuracy batch's processes and the hard cases.

Used by tests/core/test_calibration.py. Besides every process of
tests/core/accuracy_batch.py it holds the series on which ``firm`` used to be wrong:

* weak signals, where the suggestion tends to be too small: AR(1) phi = 0.2, MA(1)
  theta = 0.3, AR(2) (0.5, 0.25), ARMA(1,1) (0.8, -0.5);
* a near unit root, which the differencing tests tend to read as a random walk: AR(1)
  phi = 0.95;
* differenced processes with and without a drift: ARIMA(0,1,1) theta = -0.7 with a drift of
  0.1 innovation standard deviations per step, ARIMA(1,1,0) phi = 0.7 without one;
* monthly seasonal processes (s = 12, simulated as tests/core/seasonal_batch.py does, with a
  constant spread): the airline model (the constant-variance seasonal series a transform
  rule must leave alone); ARIMA(1,0,0)(0,1,1)12 with phi = 0.85 and Theta = -0.6 and a
  constant (a drift of 0.1 innovation standard deviations per step, so the seasonal
  difference has a mean of 1.2); ARIMA(1,0,0)(0,1,1)12 with phi = 0.9 and Theta = -0.4 (an AR
  factor near the unit circle beside a seasonal MA factor, once judged on the expanded
  polynomial and demoted); and ARIMA(0,0,1)(1,0,0)12 with theta = 0.5 and Phi = 0.6 (an MA
  factor times a seasonal AR factor). Their truth is the full order (p,d,q)(P,D,Q)12.

Coefficients are in statsmodels' sign convention (X_t = sum phi_i X_{t-i} + Z_t + sum theta_j
Z_{t-j}), the innovations are standard normal. The seed differs from the accuracy batch's, so
that what is tuned here is checked on other series there.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from accuracy_batch import PROCESSES as ACCURACY_PROCESSES
from accuracy_batch import simulate
from seasonal_batch import PERIODS, START, SeasonalProcess
from seasonal_batch import simulate as simulate_seasonal

SEED = 20270315
LENGTHS = (120, 200, 400)
REPLICATIONS = 8


@dataclass(frozen=True)
class Process:
    """A simulated process: its true order, AR and MA coefficients and drift per step."""

    name: str
    order: tuple[int, int, int]
    ar: tuple[float, ...] = ()
    ma: tuple[float, ...] = ()
    drift: float = 0.0


PROCESSES: list[Process] = [Process(name, order, tuple(ar), tuple(ma)) for name, order, ar, ma in ACCURACY_PROCESSES] + [
    Process("AR(1) 0.2", (1, 0, 0), (0.2,)),
    Process("MA(1) 0.3", (0, 0, 1), (), (0.3,)),
    Process("AR(2) 0.5 0.25", (2, 0, 0), (0.5, 0.25)),
    Process("ARMA(1,1) 0.8 -0.5", (1, 0, 1), (0.8,), (-0.5,)),
    Process("AR(1) 0.95", (1, 0, 0), (0.95,)),
    Process("ARIMA(0,1,1) -0.7 drift 0.1", (0, 1, 1), (), (-0.7,), 0.1),
    Process("ARIMA(1,1,0) 0.7", (1, 1, 0), (0.7,)),
]


# The truth of a series: (p, d, q) and (P, D, Q); (0, 0, 0) for a non-seasonal process.
Truth = tuple[tuple[int, int, int], tuple[int, int, int]]
SEASONAL_PERIOD = 12
SEASONAL_PROCESSES: list[tuple[SeasonalProcess, float]] = [
    (SeasonalProcess("airline -0.4 -0.6", (0, 1, 1), (0, 1, 1), ma=(-0.4,), seasonal_ma=(-0.6,)), 0.0),
    (SeasonalProcess("(1,0,0)(0,1,1)12 0.85 -0.6 constant", (1, 0, 0), (0, 1, 1), ar=(0.85,), seasonal_ma=(-0.6,)), 0.1),
    (SeasonalProcess("(1,0,0)(0,1,1)12 0.9 -0.4", (1, 0, 0), (0, 1, 1), ar=(0.9,), seasonal_ma=(-0.4,)), 0.0),
    (SeasonalProcess("(0,0,1)(1,0,0)12 0.5 0.6", (0, 0, 1), (1, 0, 0), ma=(0.5,), seasonal_ar=(0.6,)), 0.0),
]


@dataclass(frozen=True)
class CalibrationSeries:
    """One simulated series: its process, its true order and its values, dated monthly when the
    process is seasonal (the engine takes the period from the dates) and undated otherwise."""

    name: str
    truth: Truth
    series: pd.Series


def calibration_batch(n: int, replications: int = REPLICATIONS, seed: int = SEED) -> list[CalibrationSeries]:
    """``replications`` paths of length ``n`` from every process in :data:`PROCESSES` and
    :data:`SEASONAL_PROCESSES`.

    A drift adds ``drift`` per step to the levels of a differenced process (a linear trend).
    """
    rng = np.random.default_rng([seed, n])
    batch = []
    for process in PROCESSES:
        for _ in range(replications):
            values = simulate(process.order, list(process.ar), list(process.ma), n, rng)
            batch.append(CalibrationSeries(process.name, (process.order, (0, 0, 0)),
                                           pd.Series(values + process.drift * np.arange(1, n + 1))))
    index = pd.date_range(START, periods=n, freq=PERIODS[SEASONAL_PERIOD])
    for seasonal, drift in SEASONAL_PROCESSES:
        for _ in range(replications):
            values = simulate_seasonal(seasonal, SEASONAL_PERIOD, n, rng) + drift * np.arange(1, n + 1)
            batch.append(CalibrationSeries(seasonal.name, (seasonal.order, seasonal.seasonal), pd.Series(values, index=index)))
    return batch
