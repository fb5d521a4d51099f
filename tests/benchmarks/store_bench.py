"""Store benchmark: import a 2,000 x 500 long CSV, then read one series and its analysis back.

Run by hand from the repository root (not collected by pytest; ``PYTHONPATH=.`` is not needed
once ``make setup`` has installed the package):

    PYTHONPATH=. .venv/bin/python tests/benchmarks/store_bench.py [--series 2000] [--points 500] [--keep DIR]

Prints the figures; asserts nothing about time.
"""

from __future__ import annotations

import argparse
import dataclasses
import json
import statistics
import tempfile
import time
from collections.abc import Callable
from pathlib import Path
from typing import TypeVar

import numpy as np
import pandas as pd
from threadpoolctl import threadpool_limits

from app.core.analysis import Analysis
from app.core.identify import identify_series
from app.store.analyses import load_analysis, save_analysis
from app.store.database import open_database, write_transaction
from app.store.imports import import_portfolio
from app.store.series import list_series, load_series, series_fingerprint

LOOKUPS = 500
PAGES = 50
T = TypeVar("T")


def write_portfolio(path: Path, n_series: int, n_points: int, seed: int = 0) -> None:
    """AR(1) paths (phi = 0.7) on a daily grid, one row per observation."""
    rng = np.random.default_rng(seed)
    noise = rng.normal(size=(n_series, n_points))
    values = np.empty_like(noise)
    values[:, 0] = noise[:, 0]
    for t in range(1, n_points):
        values[:, t] = 0.7 * values[:, t - 1] + noise[:, t]
    stamps = pd.date_range("2020-01-01", periods=n_points, freq="D").strftime("%Y-%m-%d")
    pd.DataFrame({
        "series_id": np.repeat([f"item-{i:05d}" for i in range(n_series)], n_points),
        "timestamp": np.tile(stamps, n_series),
        "value": np.round(100 + values.ravel(), 4),
    }).to_csv(path, index=False)


def timed(action: Callable[[], T]) -> tuple[float, T]:
    start = time.perf_counter()
    outcome = action()
    return time.perf_counter() - start, outcome


def median_ms(action: Callable[[], object], repeats: int) -> float:
    return 1000 * statistics.median(timed(action)[0] for _ in range(repeats))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--series", type=int, default=2000)
    parser.add_argument("--points", type=int, default=500)
    parser.add_argument("--keep", type=Path, help="folder to keep the CSV and database in")
    args = parser.parse_args()
    if args.keep:
        args.keep.mkdir(parents=True, exist_ok=True)
        run(args.keep, args.series, args.points)
    else:
        with tempfile.TemporaryDirectory(prefix="lagdesk-bench-") as folder:
            run(Path(folder), args.series, args.points)


def run(folder: Path, n_series: int, n_points: int) -> None:
    csv_path, db_path = folder / "portfolio.csv", folder / "bench.db"
    for leftover in folder.glob("bench.db*"):
        leftover.unlink()

    seconds, _ = timed(lambda: write_portfolio(csv_path, n_series, n_points))
    print(f"wrote {n_series} x {n_points} rows ({csv_path.stat().st_size / 1e6:.1f} MB) in {seconds:.1f} s")
    db = open_database(db_path)
    seconds, report = timed(lambda: import_portfolio(db, csv_path))
    print(f"import (new):       {seconds:6.2f} s   {report.summary()}")
    seconds, report = timed(lambda: import_portfolio(db, csv_path))
    print(f"import (unchanged): {seconds:6.2f} s   {report.summary()}")

    ids = [row[0] for row in db.execute("SELECT series_id FROM series ORDER BY series_id").fetchall()]
    with threadpool_limits(1):
        template = identify_series(load_series(db, ids[0]), ids[0]).to_analysis()
    seconds, _ = timed(lambda: save_all(db, ids, template))
    print(f"save {len(ids)} analyses: {seconds:6.2f} s   ({len(json.dumps(template.to_dict())) / 1e3:.0f} kB of JSON each)")

    picks = iter(np.random.default_rng(1).choice(ids, size=LOOKUPS * 2).tolist())

    def load_one_with_analysis() -> None:
        series_id = next(picks)
        load_series(db, series_id)
        load_analysis(db, series_id)

    print(f"load one series:                 {median_ms(lambda: load_series(db, next(picks)), LOOKUPS):7.2f} ms (median of {LOOKUPS})")
    print(f"load one series + its analysis:  {median_ms(load_one_with_analysis, LOOKUPS):7.2f} ms (median of {LOOKUPS})")
    print(f"list_series, first page:         {median_ms(lambda: list_series(db), PAGES):7.2f} ms (median of {PAGES})")
    print(f"list_series, flag filter:        {median_ms(lambda: list_series(db, flag='gaps'), PAGES):7.2f} ms")
    print(f"database size: {sum(p.stat().st_size for p in folder.glob('bench.db*')) / 1e6:.1f} MB in {folder}")
    db.close()


def save_all(db, ids: list[str], template: Analysis) -> None:
    with write_transaction(db):
        for sid in ids:
            save_analysis(db, sid, series_fingerprint(db, sid) or "", dataclasses.replace(template, series_id=sid), None)


if __name__ == "__main__":
    main()
