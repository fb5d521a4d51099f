"""Dashboard benchmark: median response times of the queue and review pages on a large portfolio.

Run by hand (not collected by pytest; asserts nothing about time):

    .venv/bin/python tests/web/bench_pages.py [--series 10000] [--points 200] [--keep DIR]

The portfolio is invented AR(1) paths. Three of them are analysed by the real engine; every
other series gets a copy of one of those three results (relabelled), which is what the page
reads, so the pages do the same work as on a fully analysed portfolio.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
from dataclasses import replace
from pathlib import Path
from urllib.parse import quote

import numpy as np
import pandas as pd
from fastapi.testclient import TestClient
from threadpoolctl import threadpool_limits
from web_client import TEST_HOSTS

from app.config import Settings
from app.core.identify import identify_series
from app.core.vocabulary import Confidence
from app.store.analyses import save_analysis
from app.store.database import open_database, write_transaction
from app.store.imports import import_portfolio
from app.store.series import load_series, series_fingerprint
from app.web.main import create_app

REPEATS = 30


def write_portfolio(path: Path, n_series: int, n_points: int, seed: int = 0) -> list[str]:
    rng = np.random.default_rng(seed)
    noise = rng.normal(size=(n_series, n_points))
    values = np.empty_like(noise)
    values[:, 0] = noise[:, 0]
    phi = rng.uniform(0.2, 0.9, size=n_series)
    for t in range(1, n_points):
        values[:, t] = phi * values[:, t - 1] + noise[:, t]
    ids = [f"site-{i // 100:03d}/unit-{i % 100:02d}/reading" for i in range(n_series)]
    stamps = pd.date_range("2022-01-01", periods=n_points, freq="D").strftime("%Y-%m-%d")
    pd.DataFrame({
        "series_id": np.repeat(ids, n_points), "timestamp": np.tile(stamps, n_series),
        "value": np.round(20 + values.ravel(), 4),
    }).to_csv(path, index=False)
    return ids


def analyse(db, ids: list[str]) -> None:
    with threadpool_limits(1):
        templates = [identify_series(load_series(db, sid), sid).to_analysis() for sid in ids[:3]]
    levels = list(Confidence)
    with write_transaction(db):
        for i, sid in enumerate(ids):
            # a spread of confidences for the filters
            result = replace(templates[i % 3], series_id=sid, confidence=levels[i % 3])
            save_analysis(db, sid, series_fingerprint(db, sid), result, None)


def median_ms(client: TestClient, url: str) -> float:
    times = []
    for _ in range(REPEATS):
        start = time.perf_counter()
        response = client.get(url)
        times.append(time.perf_counter() - start)
        if response.status_code != 200:
            sys.exit(f"{url}: HTTP {response.status_code}")
    return 1000 * statistics.median(times)


def run(folder: Path, n_series: int, n_points: int) -> None:
    csv_path, db_path = folder / "portfolio.csv", folder / "bench.db"
    if not db_path.exists():
        start = time.perf_counter()
        ids = write_portfolio(csv_path, n_series, n_points)
        db = open_database(db_path)
        import_portfolio(db, csv_path)
        analyse(db, ids)
        db.close()
        print(f"built {n_series} x {n_points} database in {time.perf_counter() - start:.0f} s")
    db = open_database(db_path)
    some = db.execute("SELECT series_id FROM series ORDER BY series_id LIMIT 1 OFFSET ?", [n_series // 2]).fetchone()[0]
    db.close()
    client = TestClient(create_app(Settings(db_path=db_path, allowed_hosts=TEST_HOSTS)))
    urls = {
        "queue, first page": "/",
        "queue, weak only": "/?confidence=weak",
        "queue, page 100": "/?offset=5000",
        "queue, 200 rows": "/?limit=200",
        "queue, 1,000 rows": "/?limit=1000",
        "queue, jump to page 9": "/?limit=1000&page=9",
        "queue, sorted by length": "/?sort=n&descending=1",
        "queue, id search": "/?q=unit-42",
        "review page": f"/series/{quote(some, safe='/')}",
        "review page, in a filter": f"/series/{quote(some, safe='/')}?confidence=weak",
        "queue, one group": "/?prefix=site-042/",
        "GET /api/series": "/api/series",
        "GET /api/groups?depth=2": "/api/groups?depth=2",
        "GET /api/series/{id}": f"/api/series/{quote(some, safe='/')}",
    }
    print(f"{n_series} series x {n_points} points; median of {REPEATS} requests (in-process client)")
    for label, url in urls.items():
        print(f"  {label:28s} {median_ms(client, url):8.1f} ms")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--series", type=int, default=10_000)
    parser.add_argument("--points", type=int, default=200)
    parser.add_argument("--keep", type=Path, help="folder to keep (and reuse) the database in")
    args = parser.parse_args()
    if args.keep:
        args.keep.mkdir(parents=True, exist_ok=True)
        run(args.keep, args.series, args.points)
    else:
        with tempfile.TemporaryDirectory(prefix="lagdesk-web-bench-") as folder:
            run(Path(folder), args.series, args.points)


if __name__ == "__main__":
    main()
