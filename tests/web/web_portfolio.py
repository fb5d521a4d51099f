"""Building small portfolio databases for the web tests through the real store and engine.

The analysis loop here is the one the job runner performs in bulk (fingerprint read before the
values, engine result saved as it comes); the tests need it for a handful of series only.
"""

from __future__ import annotations

import importlib.util
import json
import math
from collections.abc import Sequence
from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd
from threadpoolctl import threadpool_limits

from app.core.analysis import Analysis, Candidate, Intervention
from app.core.identify import identify_series
from app.core.order import Order
from app.core.transform_choice import TransformChoice
from app.core.vocabulary import InterventionKind
from app.store.analyses import save_analysis
from app.store.database import open_database
from app.store.imports import import_portfolio
from app.store.series import load_series, series_fingerprint, series_ids_to_analyse

DEMO_CSV = Path(__file__).resolve().parents[2] / "demo_data" / "portfolio.csv"
V1_RESULTS = Path(__file__).resolve().parents[1] / "core" / "results"
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
    """Invented series, each from a known simple process (daily, so the time axis is dates). The
    last two are long enough to be firm (app/core/confidence.py, rule 5), one inside plant-b/ and
    one outside; they are drawn last, so the others keep their draws."""
    rng = np.random.default_rng(seed)
    series = {
        "plant-a/line-1/ar1": 5 + _arma(rng, 150, ar=(0.7,)),
        "plant-a/line-2/ma1": 2 + _arma(rng, 150, ma=(0.6,)),
        "plant-b/walk": 50 + np.cumsum(rng.normal(size=150)),
        "plant-b/ar2": _arma(rng, 60, ar=(0.5, 0.3)),
        ODD_ID: rng.normal(size=80),
        AWKWARD_ID: 10 + _arma(rng, 25, ar=(0.4,)),
        CONSTANT_ID: np.full(40, 3.0),
    }
    series["plant-c/ar1-long"] = 5 + _arma(rng, 200, ar=(0.7,))
    series["plant-b/ma1-long"] = 2 + _arma(rng, 200, ma=(0.6,))
    return series


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


def analyse_all(db) -> dict[str, Analysis]:
    """Identify every series whose analysis is missing or stale and store the results."""
    results = {}
    with threadpool_limits(limits=1):
        for series_id in series_ids_to_analyse(db):
            fingerprint = series_fingerprint(db, series_id)
            result = identify_series(load_series(db, series_id), series_id).to_analysis()
            save_analysis(db, series_id, fingerprint, result, None)
            results[series_id] = result
    return results


def build_database(db_path: Path, csv_path: Path) -> dict[str, Analysis]:
    """Import ``csv_path`` into a new database at ``db_path`` and analyse it; the engine's analyses."""
    db = open_database(db_path)
    try:
        import_portfolio(db, csv_path)
        return analyse_all(db)
    finally:
        db.close()


def add_stored_seasonal_analysis(db_path: Path, folder: Path) -> tuple[str, Analysis]:
    """A monthly series stored with the analysis an earlier engine wrote for it
    (tests/core/results/analysis_v1.json): seasonal candidates with D = 1 that differ only in Q,
    whatever today's engine would suggest."""
    spec = importlib.util.spec_from_file_location("make_analysis_v1", V1_RESULTS / "make_analysis_v1.py")
    assert spec is not None and spec.loader is not None
    maker = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(maker)
    series = maker.invented_airline_series()
    path = folder / "seasonal.csv"
    pd.DataFrame({"series_id": maker.SERIES_ID, "timestamp": series.index.strftime("%Y-%m-%d"), "value": series.to_numpy()}
                 ).to_csv(path, index=False)
    analysis = Analysis.from_dict(json.loads((V1_RESULTS / "analysis_v1.json").read_text()))
    db = open_database(db_path)
    try:
        import_portfolio(db, path)
        save_analysis(db, maker.SERIES_ID, series_fingerprint(db, maker.SERIES_ID), analysis, None)
    finally:
        db.close()
    return maker.SERIES_ID, analysis


def store_log_drift_suggestion(db, analysis: Analysis, **fields) -> Analysis:
    """Store ``analysis`` again as if the engine had suggested ARIMA(0,1,1) with a drift on the
    log scale, with one level shift taken out (and other ``fields``, e.g. ``confidence``): a
    suggestion whose model is more than its orders. Returns what was stored."""
    leader = analysis.suggested
    shift = Intervention(30, "2023-01-31", InterventionKind.LEVEL_SHIFT, 0.2, 6.1)
    stored = replace(analysis, transform=TransformChoice("log"), interventions=(shift,),
                     candidates=(replace(leader, order=Order(0, 1, 1, trend="t")), *analysis.candidates[1:]), **fields)
    save_analysis(db, analysis.series_id, series_fingerprint(db, analysis.series_id), stored, None)
    return stored


def q_only_pairs(analysis: Analysis) -> list[tuple[Candidate, Candidate]]:
    """Pairs of seasonal candidates of ``analysis`` that differ only in Q (lower Q first)."""
    seasonal = [c for c in analysis.candidates if c.order.s]
    return [
        (low, high) for low in seasonal for high in seasonal
        if low.order.Q < high.order.Q and replace(low.order, Q=high.order.Q) == high.order
    ]


def deltas_by_hand(candidates: list[tuple[float | None, Sequence[int], Sequence[int]]]) -> list[float | None]:
    """``(aicc, order, seasonal_order)`` rows -> each AICc less the smallest AICc among the rows
    with the same d, D and s, written out here rather than taken from the app: ``s`` counts only
    with seasonal differencing (D = 1), as seasonal AR or MA terms leave the differenced data as
    it is. None where the AICc is missing (infinite)."""
    def key(order: Sequence[int], seasonal_order: Sequence[int]) -> tuple[int, int, int]:
        d, (D, s) = order[1], (seasonal_order[1], seasonal_order[3])
        return (d, D, s if D else 0)

    best: dict[tuple[int, int, int], float] = {}
    for aicc, order, seasonal_order in candidates:
        if aicc is not None and math.isfinite(aicc):
            k = key(order, seasonal_order)
            best[k] = min(best.get(k, math.inf), aicc)
    return [
        aicc - best[key(order, seasonal_order)] if aicc is not None and math.isfinite(aicc) else None
        for aicc, order, seasonal_order in candidates
    ]
