"""A seeded batch of daily series with isolated missing days, and how often the engine finds the order.

Used by tests/core/test_missing_data.py. Issue 16 measured the engine on daily white noise with
about a fifth of the days missing: filled by linear interpolation, the series was suggested
MA(1) in 12 of 20 runs. Each series here is ``N_DAYS`` days of white noise or of an AR(1) with
phi = 0.6 (statsmodels' sign convention), started in its stationary distribution, with
``GAP_SHARE`` of the days removed at random, no two removed days adjacent (isolated gaps), and
handed to the engine's public entry as observations with dates, as a file would give them.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from statsmodels.tsa.arima_process import ArmaProcess

N_DAYS = 250
GAP_SHARE = 0.2
BURN_IN = 200
PROCESSES: dict[str, tuple[tuple[int, int, int], list[float]]] = {
    "white noise": ((0, 0, 0), []),
    "AR(1) 0.6": ((1, 0, 0), [0.6]),
}


def isolated_gaps(n: int, share: float, rng: np.random.Generator) -> np.ndarray:
    """A mask of ``round(share * n)`` missing points, none at the ends and no two adjacent."""
    missing = np.zeros(n, dtype=bool)
    wanted = round(share * n)
    for i in rng.permutation(np.arange(1, n - 1)):
        if missing.sum() == wanted:
            break
        if not missing[i - 1] and not missing[i + 1]:
            missing[i] = True
    return missing


def gapped_series(process: str, seed: int) -> pd.Series:
    """One daily series of ``process`` with its missing days left out of the index."""
    rng = np.random.default_rng(seed)
    _, ar = PROCESSES[process]
    values = 10.0 + ArmaProcess(np.r_[1.0, -np.asarray(ar)], [1.0]).generate_sample(N_DAYS + BURN_IN, distrvs=rng.standard_normal)[BURN_IN:]
    missing = isolated_gaps(N_DAYS, GAP_SHARE, rng)
    days = pd.date_range("2024-01-01", periods=N_DAYS, freq="D")
    return pd.Series(values[~missing], index=days[~missing], name=f"{process} {seed}")


def suggested_order(series: pd.Series) -> tuple[int, int, int]:
    """The non-seasonal order the engine suggests (its public entry, as test_accuracy uses it)."""
    from app.core.identify import identify_series

    return identify_series(series, str(series.name)).suggested.model.order


def recovery_rate(process: str, seeds: range, pool_map=map) -> float:
    """Share of the seeded series of ``process`` whose suggested order is the true one."""
    truth = PROCESSES[process][0]
    found = list(pool_map(suggested_order, [gapped_series(process, seed) for seed in seeds]))
    return sum(order == truth for order in found) / len(found)
