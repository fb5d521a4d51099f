"""Analysis-run benchmark: the same seeded portfolio analysed with 1 and with 2 workers.

Run by hand from the repository root (not collected by pytest):

    .venv/bin/python tests/benchmarks/analyze_bench.py [--series 60] [--points 200] [--workers 1 2]

Imports the portfolio of ``tests/jobs/simulated_portfolio.py`` into a temporary database, then
runs :func:`app.jobs.analyze.run_analysis` over every series once per worker count and prints
the wall time, the series per second and the speed-up over the first count. The machine's load
average is printed beside them: on a shared machine it says how far the figures can be trusted.
Asserts nothing about time.
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "jobs"))

from simulated_portfolio import write_portfolio_csv  # noqa: E402

from app.jobs.analyze import run_analysis  # noqa: E402
from app.store.database import open_database  # noqa: E402
from app.store.imports import import_portfolio  # noqa: E402


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--series", type=int, default=60)
    parser.add_argument("--points", type=int, default=200)
    parser.add_argument("--workers", type=int, nargs="+", default=[1, 2])
    parser.add_argument("--seed", type=int, default=0)
    args = parser.parse_args()

    with tempfile.TemporaryDirectory(prefix="lagdesk-bench-") as folder:
        csv = write_portfolio_csv(Path(folder) / "portfolio.csv", args.series, (args.points, args.points), args.seed, short_series=False)
        db_path = Path(folder) / "bench.db"
        with open_database(db_path) as db:
            report = import_portfolio(db, csv)
        print(f"portfolio: {len(report.added)} series x {args.points} points (seed {args.seed}); cpus: {os.cpu_count()}")
        baseline = None
        for workers in args.workers:
            load = os.getloadavg()[0]
            started = time.perf_counter()
            run = run_analysis(db_path, workers=workers, everything=True)
            wall = time.perf_counter() - started
            baseline = baseline or wall
            print(
                f"workers={workers}: {wall:7.1f} s wall  {run['done'] / wall:5.2f} series/s  "
                f"speed-up x{baseline / wall:.2f}  ({run['failed']} failed; load average before {load:.1f})"
            )


if __name__ == "__main__":
    main()
