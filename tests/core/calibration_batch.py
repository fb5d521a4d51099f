"""A seeded batch for calibrating ``firm``: the accuracy batch's processes and the hard cases.

Used by tests/core/test_calibration.py. Besides every process of
tests/core/accuracy_batch.py it holds the series on which ``firm`` used to be wrong:

* weak signals, where the suggestion tends to be too small: AR(1) phi = 0.2, MA(1)
  theta = 0.3, AR(2) (0.5, 0.25), ARMA(1,1) (0.8, -0.5);
* a near unit root, which the differencing tests tend to read as a random walk: AR(1)
  phi = 0.95;
* differenced processes with and without a drift: ARIMA(0,1,1) theta = -0.7 with a drift of
  0.1 innovation standard deviations per step, ARIMA(1,1,0) phi = 0.7 without one.

Seasonal processes are left out: the accuracy batch has none, and a seasonal search fits
several times more candidates, which would make the batch too slow on two cores.

Coefficients are in statsmodels' sign convention (X_t = sum phi_i X_{t-i} + Z_t + sum theta_j
Z_{t-j}), the innovations are standard normal. The seed differs from the accuracy batch's, so
that what is tuned here is checked on other series there.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from accuracy_batch import PROCESSES as ACCURACY_PROCESSES
from accuracy_batch import SimulatedSeries, simulate

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


def calibration_batch(n: int, replications: int = REPLICATIONS, seed: int = SEED) -> list[SimulatedSeries]:
    """``replications`` paths of length ``n`` from every process in :data:`PROCESSES`.

    A drift adds ``drift`` per step to the levels of a differenced process (a linear trend).
    """
    rng = np.random.default_rng([seed, n])
    batch = []
    for process in PROCESSES:
        for _ in range(replications):
            values = simulate(process.order, list(process.ar), list(process.ma), n, rng)
            batch.append(SimulatedSeries(process.name, process.order, values + process.drift * np.arange(1, n + 1)))
    return batch
