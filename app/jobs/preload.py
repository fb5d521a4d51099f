"""Imported by the worker pool's forkserver before it forks any worker: the engine's modules are
loaded and the engine is run once on a small invented series there, so every worker starts
ready. Without it each fresh worker spent about 0.25 s on its first series (numba loading the
compiled functions' cached machine code, statsmodels' lazily built tables), a tenth of a short
2-worker run; measured with a pool of one on the accuracy batch at n = 500."""

import numpy as np
import pandas as pd

from app.core.identify import identify_series
from app.jobs import work  # noqa: F401  (loaded for the workers, not used here)

WARM_UP_SEED = 20261203
WARM_UP_POINTS = 120


def warm_engine() -> None:
    """Identify a seeded ARMA(1,1) path of :data:`WARM_UP_POINTS` points and throw the result away."""
    noise = np.random.default_rng(WARM_UP_SEED).standard_normal(WARM_UP_POINTS + 1)
    values = np.empty(WARM_UP_POINTS)
    level = 0.0
    for t in range(WARM_UP_POINTS):
        level = 0.6 * level + noise[t + 1] + 0.3 * noise[t]
        values[t] = 10.0 + level
    identify_series(pd.Series(values), "warm-up")


warm_engine()
