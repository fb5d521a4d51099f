"""A seeded portfolio of simulated series of simple known orders, written as a long CSV.

Shared by the job tests and ``tests/benchmarks/analyze_bench.py``. The paths come from
statsmodels' ``ArmaProcess.generate_sample`` (integrated once for the random walk and the
ARIMA(0,1,1)); the timestamps are integer steps, so the engine treats them as non-seasonal.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
from statsmodels.tsa.arima_process import ArmaProcess

# name: (AR coefficients phi_1.., MA coefficients theta_1.., times integrated)
PROCESSES = {
    "white-noise": ((), (), 0),
    "ar1": ((0.7,), (), 0),
    "ar2": ((0.5, 0.3), (), 0),
    "ma1": ((), (0.6,), 0),
    "arma11": ((0.6,), (0.4,), 0),
    "random-walk": ((), (), 1),
    "ima11": ((), (-0.5,), 1),
}
SHORT_SERIES_ID = "short/five-points"  # rejected at import: fewer points than the engine needs
SHORT_POINTS = 5


def simulated_series(n_series: int, points: tuple[int, int], seed: int) -> dict[str, pd.Series]:
    """``n_series`` paths cycling through :data:`PROCESSES`, each of a length drawn from ``points``
    (inclusive bounds), keyed ``sim/<number>/<process>``."""
    rng = np.random.default_rng(seed)
    names = list(PROCESSES)
    out = {}
    for i in range(n_series):
        name = names[i % len(names)]
        ar, ma, integrated = PROCESSES[name]
        n = int(rng.integers(points[0], points[1] + 1))
        process = ArmaProcess(np.r_[1.0, -np.asarray(ar, dtype=float)], np.r_[1.0, np.asarray(ma, dtype=float)])
        values = process.generate_sample(n, distrvs=rng.standard_normal, burnin=100)
        for _ in range(integrated):
            values = np.cumsum(values)
        out[f"sim/{i:03d}/{name}"] = pd.Series(50.0 + values, index=pd.RangeIndex(1, n + 1))
    return out


def write_portfolio_csv(path: Path, n_series: int, points: tuple[int, int] = (80, 150), seed: int = 0, short_series: bool = True) -> Path:
    """Write :func:`simulated_series` (plus a 5-point series when ``short_series``) as a long CSV.

    Values are written with ``repr`` so they read back as the same floats.
    """
    series = simulated_series(n_series, points, seed)
    if short_series:
        series[SHORT_SERIES_ID] = pd.Series(np.arange(1.0, SHORT_POINTS + 1), index=pd.RangeIndex(1, SHORT_POINTS + 1))
    rows = [
        (series_id, step, repr(float(value)))
        for series_id, values in series.items()
        for step, value in values.items()
    ]
    pd.DataFrame(rows, columns=["series_id", "timestamp", "value"]).to_csv(path, index=False)
    return path
