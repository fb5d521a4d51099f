"""The plain approach over a portfolio file, as a process of its own (for portfolio.py, section 5).

    .venv/bin/python tests/benchmarks/plain_grid_probe.py FILE.csv

Reads a long CSV file (``series_id``, ``timestamp``, ``value``) with pandas and prints, as one
JSON object, the plain approach's pick for every series (``plain_bic_grid`` of
tests/core/accuracy_batch.py: KPSS d, every p, q <= 3 by statsmodels ``ARIMA.fit``, lowest BIC),
BLAS on one thread as in Lagdesk's workers. It imports nothing of Lagdesk, so the CPU time of
this process is what the plain approach costs from a cold start, interpreter included.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import pandas as pd
from threadpoolctl import threadpool_limits

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "core"))

from accuracy_batch import plain_bic_grid  # noqa: E402


def plain_picks(path: Path) -> dict[str, list[int]]:
    """The plain approach's best order of every series of the file, by series id."""
    frame = pd.read_csv(path)
    with threadpool_limits(limits=1):
        return {str(series_id): list(plain_bic_grid(rows["value"].to_numpy(dtype=float))[0])
                for series_id, rows in frame.groupby("series_id", sort=False)}


if __name__ == "__main__":
    print(json.dumps(plain_picks(Path(sys.argv[1]))))
