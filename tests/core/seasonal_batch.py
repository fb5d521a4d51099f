"""A seeded batch of simulated SARIMA series of known order, and the plain seasonal yardstick.

Used by tests/core/test_seasonal_identification.py. Each process is a multiplicative seasonal
ARIMA (p,d,q)(P,D,Q)s (Box, Jenkins, Reinsel & Ljung 2015, §9.1),

    phi(B) Phi(B^s) (1 - B)^d (1 - B^s)^D X_t = theta(B) Theta(B^s) Z_t,

with coefficients in statsmodels' sign convention (phi(B) = 1 - phi_1 B - ..., theta(B) =
1 + theta_1 B + ...). The stationary ARMA part is simulated by statsmodels ``ArmaProcess`` with
the products of the non-seasonal and seasonal polynomials, after a burn-in of
:data:`BURN_IN` points; the differencing is then undone by summing, from zero starting values.
Every process is simulated on a monthly index (s = 12) and on a daily index (s = 7), so the
engine takes the period from the sampling frequency.

The *plain approach* is the seasonal version of tests/core/accuracy_batch.py's yardstick: D by
the engine's own rule (seasonal strength F_S > 0.64 from a robust STL, with at least three full
seasons: :func:`app.core.seasonality.choose_seasonal_differencing`, Wang, Smith & Hyndman
2006), then d by repeated KPSS tests at 5% on the seasonally differenced series (Hyndman &
Khandakar 2008), then every (p,d,q)(P,D,Q)s with p, q <= 2 and P, Q <= 1 fitted by statsmodels
``SARIMAX`` maximum likelihood (its defaults), the lowest BIC (Schwarz 1978) wins; an order
whose fit fails or gives no finite BIC ranks last. It uses no transform: the simulated series
have a constant spread.
"""

from __future__ import annotations

import itertools
import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd
from accuracy_batch import plain_kpss_d
from statsmodels.tsa.arima_process import ArmaProcess
from statsmodels.tsa.statespace.sarimax import SARIMAX

from app.core.seasonality import choose_seasonal_differencing

BURN_IN = 300
LEVEL = 10.0
PERIODS = {12: "MS", 7: "D"}
START = "2015-01-01"
PLAIN_MAX_ORDER = 2
PLAIN_MAX_SEASONAL_ORDER = 1

Order = tuple[int, int, int]
SeasonalOrder = tuple[int, int, int, int]


@dataclass(frozen=True)
class SeasonalProcess:
    """A SARIMA process: orders without the period, and its coefficients."""

    name: str
    order: Order
    seasonal: Order  # (P, D, Q)
    ar: tuple[float, ...] = ()
    ma: tuple[float, ...] = ()
    seasonal_ar: tuple[float, ...] = ()
    seasonal_ma: tuple[float, ...] = ()

    def full_order(self, period: int) -> tuple[Order, SeasonalOrder]:
        return self.order, (*self.seasonal, period)


PROCESSES: list[SeasonalProcess] = [
    SeasonalProcess("airline -0.4 -0.6", (0, 1, 1), (0, 1, 1), ma=(-0.4,), seasonal_ma=(-0.6,)),
    SeasonalProcess("(1,0,0)(1,0,0) 0.5 0.6", (1, 0, 0), (1, 0, 0), ar=(0.5,), seasonal_ar=(0.6,)),
    SeasonalProcess("(0,0,1)(0,1,1) 0.5 -0.5", (0, 0, 1), (0, 1, 1), ma=(0.5,), seasonal_ma=(-0.5,)),
    SeasonalProcess("(1,0,0)(0,1,1) 0.6 -0.5", (1, 0, 0), (0, 1, 1), ar=(0.6,), seasonal_ma=(-0.5,)),
    SeasonalProcess("(0,1,1)(1,1,0) -0.5 -0.4", (0, 1, 1), (1, 1, 0), ma=(-0.5,), seasonal_ar=(-0.4,)),
    SeasonalProcess("(2,0,0)(1,0,0) 0.5 0.3 0.5", (2, 0, 0), (1, 0, 0), ar=(0.5, 0.3), seasonal_ar=(0.5,)),
    SeasonalProcess("(0,0,1)(0,0,1) 0.6 0.5", (0, 0, 1), (0, 0, 1), ma=(0.6,), seasonal_ma=(0.5,)),
]


@dataclass
class SimulatedSeasonal:
    name: str
    order: Order
    seasonal_order: SeasonalOrder
    series: pd.Series

    @property
    def truth(self) -> tuple[Order, SeasonalOrder]:
        return self.order, self.seasonal_order


def _lag_polynomial(coefficients: tuple[float, ...], sign: float, spacing: int) -> np.ndarray:
    """``1 + sign * (c_1 B^spacing + c_2 B^(2 spacing) + ...)`` as coefficients in B."""
    poly = np.zeros(spacing * len(coefficients) + 1)
    poly[0] = 1.0
    for i, c in enumerate(coefficients, start=1):
        poly[i * spacing] = sign * c
    return poly


def simulate(process: SeasonalProcess, period: int, n: int, rng: np.random.Generator) -> np.ndarray:
    """One path of length ``n`` of ``process`` with seasonal period ``period``."""
    ar = np.polymul(_lag_polynomial(process.ar, -1.0, 1), _lag_polynomial(process.seasonal_ar, -1.0, period))
    ma = np.polymul(_lag_polynomial(process.ma, 1.0, 1), _lag_polynomial(process.seasonal_ma, 1.0, period))
    w = ArmaProcess(ar, ma).generate_sample(n + BURN_IN, distrvs=rng.standard_normal)[BURN_IN:]
    for _ in range(process.seasonal[1]):
        w = _seasonal_sum(w, period)
    for _ in range(process.order[1]):
        w = np.cumsum(w)
    return LEVEL + w


def _seasonal_sum(w: np.ndarray, period: int) -> np.ndarray:
    """Undo a lag-``period`` difference: ``y_t = y_{t-s} + w_t`` with ``y_t = w_t`` for t < s."""
    y = w.copy()
    for t in range(period, y.size):
        y[t] += y[t - period]
    return y


def seasonal_batch(period: int, n: int, replications: int, seed: int = 20261202) -> list[SimulatedSeasonal]:
    """``replications`` paths of length ``n`` of every process in :data:`PROCESSES` with period
    ``period`` (12 on a monthly index, 7 on a daily one)."""
    rng = np.random.default_rng([seed, period, n])
    index = pd.date_range(START, periods=n, freq=PERIODS[period])
    return [
        SimulatedSeasonal(
            p.name, *p.full_order(period), pd.Series(simulate(p, period, n, rng), index=index, name=p.name)
        )
        for p in PROCESSES
        for _ in range(replications)
    ]


def plain_seasonal_grid(y: np.ndarray, period: int) -> list[tuple[Order, SeasonalOrder]]:
    """The plain approach (module notes): D by seasonal strength, d by KPSS, lowest BIC over
    p, q <= 2 and P, Q <= 1 (best first)."""
    D = choose_seasonal_differencing(y, period).D
    d = plain_kpss_d(y[period:] - y[:-period] if D else y)
    scored = []
    for p, q, P, Q in itertools.product(range(PLAIN_MAX_ORDER + 1), range(PLAIN_MAX_ORDER + 1),
                                        range(PLAIN_MAX_SEASONAL_ORDER + 1), range(PLAIN_MAX_SEASONAL_ORDER + 1)):
        order, seasonal_order = (p, d, q), (P, D, Q, period)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            try:
                model = SARIMAX(y, order=order, seasonal_order=seasonal_order, trend="c" if d + D == 0 else "n")
                res = model.fit(disp=False)
            except np.linalg.LinAlgError:  # the Kalman filter's start-up solve can fail: that order loses
                scored.append((np.inf, order, seasonal_order))
                continue
        scored.append((res.bic if np.isfinite(res.bic) else np.inf, order, seasonal_order))
    return [(order, seasonal_order) for _, order, seasonal_order in sorted(scored)]


@dataclass
class SeasonalScores:
    exact: float
    top3: float
    D_right: float
    d_right: float
    count: int

    def line(self, label: str) -> str:
        return (f"{label}: exact {self.exact:.3f}  top-3 {self.top3:.3f}  D {self.D_right:.3f}  "
                f"d {self.d_right:.3f}  ({self.count} series)")


def score(truth: list[tuple[Order, SeasonalOrder]], ranked: list[list[tuple[Order, SeasonalOrder]]]) -> SeasonalScores:
    """Exact and top-3 hit rates of full (p,d,q)(P,D,Q)s orders, and the share of right D and d."""
    return SeasonalScores(
        exact=float(np.mean([r[0] == t for t, r in zip(truth, ranked)])),
        top3=float(np.mean([t in r[:3] for t, r in zip(truth, ranked)])),
        D_right=float(np.mean([r[0][1][1] == t[1][1] for t, r in zip(truth, ranked)])),
        d_right=float(np.mean([r[0][0][1] == t[0][1] for t, r in zip(truth, ranked)])),
        count=len(truth),
    )
