"""A seeded batch of simulated series of known ARIMA order, and the plain yardstick.

Used by tests/core/test_accuracy.py and by tests/benchmarks/portfolio.py. The processes cover
white noise, AR(1..3), MA(1..2), ARMA(1,1), ARMA(2,1) and ARIMA(p,1,q) with d = 1, with
coefficients in statsmodels' sign convention (X_t = sum phi_i X_{t-i} + Z_t + sum theta_j Z_{t-j}).

The *plain approach* is the yardstick the issue names: d by repeated KPSS tests at 5%
(Hyndman & Khandakar 2008), every ARIMA(p, d, q) with p, q <= 3 fitted by statsmodels' default
maximum likelihood, the lowest BIC wins.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
from statsmodels.tsa.arima.model import ARIMA
from statsmodels.tsa.arima_process import ArmaProcess

BURN_IN = 200
PROCESSES: list[tuple[str, tuple[int, int, int], list[float], list[float]]] = [
    ("white noise", (0, 0, 0), [], []),
    ("AR(1) 0.5", (1, 0, 0), [0.5], []),
    ("AR(1) 0.7", (1, 0, 0), [0.7], []),
    ("AR(1) -0.6", (1, 0, 0), [-0.6], []),
    ("AR(2) 0.5 0.3", (2, 0, 0), [0.5, 0.3], []),
    ("AR(2) 1.0 -0.5", (2, 0, 0), [1.0, -0.5], []),
    ("AR(2) 0.4 -0.3", (2, 0, 0), [0.4, -0.3], []),
    ("AR(3) 0.6 -0.4 0.3", (3, 0, 0), [0.6, -0.4, 0.3], []),
    ("MA(1) 0.6", (0, 0, 1), [], [0.6]),
    ("MA(1) -0.5", (0, 0, 1), [], [-0.5]),
    ("MA(2) 0.5 0.4", (0, 0, 2), [], [0.5, 0.4]),
    ("MA(2) -0.6 0.3", (0, 0, 2), [], [-0.6, 0.3]),
    ("ARMA(1,1) 0.7 0.4", (1, 0, 1), [0.7], [0.4]),
    ("ARMA(1,1) -0.5 0.8", (1, 0, 1), [-0.5], [0.8]),
    ("ARMA(2,1) 0.8 -0.4 0.5", (2, 0, 1), [0.8, -0.4], [0.5]),
    ("random walk", (0, 1, 0), [], []),
    ("ARIMA(0,1,1) 0.5", (0, 1, 1), [], [0.5]),
    ("ARIMA(0,1,1) -0.4", (0, 1, 1), [], [-0.4]),
    ("ARIMA(1,1,0) 0.5", (1, 1, 0), [0.5], []),
    ("ARIMA(1,1,1) 0.5 0.3", (1, 1, 1), [0.5], [0.3]),
    ("ARIMA(2,1,0) 0.5 0.3", (2, 1, 0), [0.5, 0.3], []),
]


@dataclass
class SimulatedSeries:
    name: str
    order: tuple[int, int, int]
    values: np.ndarray


def simulate(order: tuple[int, int, int], ar: list[float], ma: list[float], n: int, rng: np.random.Generator) -> np.ndarray:
    """One path of length ``n`` from the process, started in its stationary distribution."""
    process = ArmaProcess(np.r_[1, -np.asarray(ar)], np.r_[1, np.asarray(ma)])
    w = process.generate_sample(n + BURN_IN, distrvs=rng.standard_normal)[BURN_IN:]
    for _ in range(order[1]):
        w = np.cumsum(w)
    return 10.0 + w


def accuracy_batch(n: int, replications: int, seed: int = 20261201) -> list[SimulatedSeries]:
    """``replications`` paths of length ``n`` from every process in :data:`PROCESSES`."""
    rng = np.random.default_rng([seed, n])
    return [
        SimulatedSeries(name, order, simulate(order, ar, ma, n, rng))
        for name, order, ar, ma in PROCESSES
        for _ in range(replications)
    ]


def plain_kpss_d(y: np.ndarray, max_d: int = 2) -> int:
    from statsmodels.tools.sm_exceptions import InterpolationWarning
    from statsmodels.tsa.stattools import kpss

    d = 0
    while d < max_d:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", InterpolationWarning)
            res = kpss(np.diff(y, n=d) if d else y, regression="c", nlags="auto", result_object=True)
        if res.statistic <= res.critical_values["5%"]:
            break
        d += 1
    return d


def plain_bic_grid(y: np.ndarray, max_order: int = 3) -> list[tuple[int, int, int]]:
    """The plain approach: KPSS d, all p, q <= 3, ranked by BIC (best first)."""
    d = plain_kpss_d(y)
    scored = []
    for p in range(max_order + 1):
        for q in range(max_order + 1):
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                res = ARIMA(y, order=(p, d, q), trend="c" if d == 0 else "n").fit()
            scored.append((res.bic if np.isfinite(res.bic) else np.inf, (p, d, q)))
    return [order for _, order in sorted(scored)]


@dataclass
class Scores:
    exact: float
    top3: float
    d_right: float
    firm_share: float
    firm_right: float
    fits_per_series: float

    def line(self, label: str) -> str:
        return (f"{label}: exact {self.exact:.3f}  top-3 {self.top3:.3f}  d {self.d_right:.3f}  "
                f"firm share {self.firm_share:.3f}  firm right {self.firm_right:.3f}  fits/series {self.fits_per_series:.1f}")


def score(truth: list[tuple[int, int, int]], ranked: list[list[tuple[int, int, int]]], confidence: list[str] | None = None, fits: list[int] | None = None) -> Scores:
    exact = [r[0] == t for t, r in zip(truth, ranked)]
    top3 = [t in r[:3] for t, r in zip(truth, ranked)]
    d_right = [r[0][1] == t[1] for t, r in zip(truth, ranked)]
    firm = [c == "firm" for c in confidence] if confidence else [False] * len(truth)
    firm_hits = [e for e, f in zip(exact, firm) if f]
    return Scores(
        exact=float(np.mean(exact)), top3=float(np.mean(top3)), d_right=float(np.mean(d_right)),
        firm_share=float(np.mean(firm)), firm_right=float(np.mean(firm_hits)) if firm_hits else float("nan"),
        fits_per_series=float(np.mean(fits)) if fits else float("nan"),
    )
