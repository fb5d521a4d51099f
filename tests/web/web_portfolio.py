"""Building small portfolio databases for the web tests through the real store and engine.

The analysis loop here is the one the job runner performs in bulk (fingerprint read before the
values, engine result saved as it comes); the tests need it for a handful of series only.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
from threadpoolctl import threadpool_limits

from app.core.identify import identify_series
from app.store.analyses import save_analysis
from app.store.database import open_database
from app.store.imports import import_portfolio
from app.store.series import load_series, series_fingerprint, series_ids_to_analyse

DEMO_CSV = Path(__file__).resolve().parents[2] / "demo_data" / "portfolio.csv"
ODD_ID = "odd/verdict"  # ends like the verdict route: the routes must still tell them apart
AWKWARD_ID = "shop 7/bread & rolls <b>"  # a space, an ampersand and markup: escaping and URL quoting
CONSTANT_ID = "broken/constant"  # rejected by the import (nothing to model)


def _arma(rng: np.random.Generator, n: int, ar=(), ma=(), burn: int = 100) -> np.ndarray:
    e = rng.normal(size=n + burn)
    y = np.zeros(n + burn)
    for t in range(n + burn):
        y[t] = e[t] + sum(a * y[t - i - 1] for i, a in enumerate(ar) if t > i) + sum(
            b * e[t - i - 1] for i, b in enumerate(ma) if t > i
        )
    return y[burn:]


def synthetic_series(seed: int = 20240601) -> dict[str, np.ndarray]:
    """Invented series, each from a known simple process (daily, so the time axis is dates)."""
    rng = np.random.default_rng(seed)
    return {
        "plant-a/line-1/ar1": 5 + _arma(rng, 150, ar=(0.7,)),
        "plant-a/line-2/ma1": 2 + _arma(rng, 150, ma=(0.6,)),
        "plant-b/walk": 50 + np.cumsum(rng.normal(size=150)),
        "plant-b/ar2": _arma(rng, 60, ar=(0.5, 0.3)),
        ODD_ID: rng.normal(size=80),
        AWKWARD_ID: 10 + _arma(rng, 25, ar=(0.4,)),
        CONSTANT_ID: np.full(40, 3.0),
    }


def write_long_csv(path: Path, series: dict[str, np.ndarray], start: str = "2023-01-01") -> Path:
    frames = [
        pd.DataFrame({"series_id": sid, "timestamp": pd.date_range(start, periods=len(v), freq="D").strftime("%Y-%m-%d"), "value": v})
        for sid, v in series.items()
    ]
    pd.concat(frames).to_csv(path, index=False)
    return path


def demo_subset_csv(path: Path, series_ids: list[str]) -> Path:
    """The rows of the demo portfolio for ``series_ids`` (the invented demo data, unchanged)."""
    demo = pd.read_csv(DEMO_CSV, dtype={"series_id": str, "timestamp": str})
    demo[demo["series_id"].isin(series_ids)].to_csv(path, index=False)
    return path


def analyse_all(db) -> dict[str, dict]:
    """Identify every series whose analysis is missing or stale and store the results."""
    results = {}
    with threadpool_limits(limits=1):
        for series_id in series_ids_to_analyse(db):
            fingerprint = series_fingerprint(db, series_id)
            result = identify_series(load_series(db, series_id), series_id).to_dict()
            save_analysis(db, series_id, fingerprint, result, None)
            results[series_id] = result
    return results


def build_database(db_path: Path, csv_path: Path) -> dict[str, dict]:
    """Import ``csv_path`` into a new database at ``db_path`` and analyse it; the engine results."""
    db = open_database(db_path)
    try:
        import_portfolio(db, csv_path)
        return analyse_all(db)
    finally:
        db.close()
