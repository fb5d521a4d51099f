"""How ``analysis_v1.json`` was written: an analysis as the engine stored it before the result had
a schema version (Lagdesk at commit 192adbb, ``Identification.to_dict()``).

Run against a checkout of that commit (``git worktree add /tmp/v1 192adbb``;
``PYTHONPATH=/tmp/v1 python tests/core/results/make_analysis_v1.py``). The series is invented: an
airline-type process (Box, Jenkins, Reinsel & Ljung 2015, §9.2) on a level of 100, seeded, so the
candidates include seasonal orders that differ only in Q and a list of screened-out labels.
"""

import json
from pathlib import Path

import numpy as np
import pandas as pd

SERIES_ID = "shop-1/flour"


def invented_airline_series() -> pd.Series:
    """The series the stored analysis is of (tests that store it beside its data use this)."""
    rng = np.random.default_rng(20261203)
    n, burn = 96, 40
    e = rng.normal(size=n + burn)
    y = np.zeros(n + burn)
    for t in range(13, n + burn):
        y[t] = y[t - 1] + y[t - 12] - y[t - 13] + e[t] - 0.5 * e[t - 1] - 0.6 * e[t - 12] + 0.3 * e[t - 13]
    return pd.Series(100 + y[burn:], index=pd.date_range("2015-01-01", periods=n, freq="MS"), name=SERIES_ID)


if __name__ == "__main__":
    from app.core.identify import identify_series

    result = identify_series(invented_airline_series(), SERIES_ID).to_dict()
    Path(__file__).with_name("analysis_v1.json").write_text(json.dumps(result))
