"""Would a forecast check on the training data choose better orders than the criterion?

Run from the repository root (not collected by pytest; asserts nothing; about 20 minutes on
two cores):

    .venv/bin/python tests/benchmarks/candidate_choice.py [--jobs 2] [--only NAME ...]
        [--out test-artifacts/candidate_choice.json]

For each series of :mod:`real_series` but the hourly ones, with the same holdout as
``real_forecasts.py``, Lagdesk identifies the training part and this script takes its first
:data:`TOP` distinct candidates plus the leader's order with ``d`` one lower and one higher
(each deterministic term the differencing allows). Every one of them is scored twice:

* **holdout**: fitted by statsmodels on the training part and scored on the held-out season,
  exactly as ``real_forecasts.py`` scores a method (``run_lagdesk``'s fit and forecast);
* **check**: Lagdesk's own rolling-origin forecast check on the training part
  (``app.core.backtest.backtest_order``: :data:`ORIGINS` origins, a season ahead, refitted at
  every origin), the figure a reviewer sees, computed without looking at the holdout.

The rules compared, each as the geometric-mean MASE relative to the seasonal naive forecast:
the criterion's leader (what Lagdesk suggests); the leader replaced by the candidate with the
best check among the first ``K`` when that check is lower by more than a share ``gain``; the
same with the ``d`` variants admitted; and, for scale, the best achievable pick among the first
``K`` (an oracle that sees the holdout). This is the measurement behind the choice not to let
the forecast check pick the order (README, "On real series").

References
----------
.. [1] Tashman, L.J. (2000). Out-of-sample tests of forecasting accuracy: an analysis and review.
   *International Journal of Forecasting* 16, 437-450.
.. [2] Hyndman, R.J. & Koehler, A.B. (2006). Another look at measures of forecast accuracy.
   *International Journal of Forecasting* 22, 679-688.
"""

from __future__ import annotations

import argparse
import json
import math
import multiprocessing
import sys
import time
import warnings
from collections.abc import Iterator
from concurrent.futures import ProcessPoolExecutor, as_completed
from pathlib import Path

import numpy as np
from real_forecasts import REPO, fit_order, forecast_fit, inverse_box_cox, split
from real_series import GROUPS_WITHOUT_HOURLY, RealSeries, real_series
from scipy.special import boxcox
from threadpoolctl import threadpool_limits

TOP = 5
ORIGINS = 3
TOPS = (2, 3, 5)
GAINS = (0.0, 0.1, 0.2)


def _holdout_mase(z: np.ndarray, model, lam: float | None, actual: np.ndarray, scale: float) -> float | None:
    """MASE on the holdout of ``model`` fitted by statsmodels on the (transformed) training part."""
    try:
        fit = fit_order(z, tuple(model.order), tuple(model.seasonal_order) if model.period else (0, 0, 0, 0), model.trend)
        forecast = forecast_fit(fit, z, actual.size)
    except (np.linalg.LinAlgError, ValueError):
        return None
    mean = forecast.mean if lam is None else inverse_box_cox(forecast.mean, lam)
    return float(np.mean(np.abs(actual - mean)) / scale)


def _d_variants(lead) -> list:
    """The leader's order with d one lower and one higher, under each deterministic term allowed."""
    from app.core.order import Order

    out = []
    for d in (lead.d - 1, lead.d + 1):
        if not 0 <= d <= 2:
            continue
        terms = {0: ("n", "c"), 1: ("n", "t")}.get(d + lead.D, ("n",))
        out += [Order(lead.p, d, lead.q, lead.P, lead.D, lead.Q, lead.s, t) for t in terms]
    return out


def evaluate(entry: RealSeries) -> dict:
    """The candidates of one series with their holdout MASE and their forecast-check MASE."""
    from app.core.backtest import backtest_order
    from app.core.errors import LagdeskError
    from app.core.identify import identify_series
    from app.core.ranking import is_demoted

    part = split(entry)
    found = identify_series(part.train, entry.name)
    kind = found.transform.kind
    lam = None if kind == "none" else (0.0 if kind == "log" else found.transform.lam)
    z = part.y if lam is None else boxcox(part.y, lam)
    ranked: list = []
    for fit in found.candidates:
        if len(ranked) < TOP and not is_demoted(fit) and all(fit.model != m for m, _ in ranked):
            ranked.append((fit.model, True))
    shown = [m for m, _ in ranked]
    models = ranked + [(m, False) for m in _d_variants(found.suggested.model) if m not in shown]
    rows = []
    for model, is_candidate in models:
        try:
            check: float | None = backtest_order(found.prepared, model, found.transform, found.seasonal.examined, origins=ORIGINS).mase
        except (LagdeskError, np.linalg.LinAlgError, ValueError):
            check = None
        rows.append({"order": model.label(), "candidate": is_candidate,
                     "holdout": _holdout_mase(z, model, lam, part.actual, part.scale), "check": check})
    return {"name": entry.name, "freq": entry.frequency, "snaive": part.snaive.mase, "models": rows}


def _start() -> None:
    threadpool_limits(1)
    warnings.simplefilter("ignore")


def evaluate_all(entries: list[RealSeries], jobs: int) -> Iterator[dict]:
    with ProcessPoolExecutor(jobs, mp_context=multiprocessing.get_context("spawn"), initializer=_start) as pool:
        futures = [pool.submit(evaluate, e) for e in entries]
        yield from (f.result() for f in as_completed(futures))


def _relative(row: dict, model: dict) -> float:
    return model["holdout"] / row["snaive"]


def _geometric(values: list[float]) -> float:
    return math.exp(sum(math.log(v) for v in values) / len(values))


def _pick(row: dict, top: int, gain: float, with_d: bool) -> dict:
    """The leader, unless a model in the pool has a check lower by more than ``gain``."""
    models = [m for m in row["models"] if m["holdout"] is not None]
    lead = models[0]
    pool = [m for m in models if m["candidate"]][:top] + ([m for m in models if not m["candidate"]] if with_d else [])
    pool = [m for m in pool if m["check"] is not None]
    if lead["check"] is None or not pool:
        return lead
    best = min(pool, key=lambda m: m["check"])
    return best if best["check"] < lead["check"] * (1.0 - gain) else lead


def rules(rows: list[dict]) -> dict[str, float]:
    """Geometric-mean relative MASE of every rule over the series all rules can score."""
    usable = [r for r in rows if r["snaive"] > 0 and r["models"] and r["models"][0]["candidate"]
              and all(m["holdout"] for m in r["models"] if m["candidate"])]
    out = {"series": float(len(usable)), "leader": _geometric([_relative(r, r["models"][0]) for r in usable])}
    for top in TOPS:
        for gain in GAINS:
            for with_d in (False, True):
                name = f"check among top {top}{' + d variants' if with_d else ''}, gain > {gain:.0%}"
                out[name] = _geometric([_relative(r, _pick(r, top, gain, with_d)) for r in usable])
        out[f"oracle among top {top}"] = _geometric(
            [min(_relative(r, m) for m in [m for m in r["models"] if m["candidate"]][:top]) for r in usable])
    return out


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--only", nargs="+", metavar="NAME", help="only these series (names as in real_series.py)")
    parser.add_argument("--jobs", type=int, default=2)
    parser.add_argument("--out", type=Path, default=REPO / "test-artifacts" / "candidate_choice.json")
    args = parser.parse_args(argv)
    entries = [e for e in real_series(GROUPS_WITHOUT_HOURLY) if not args.only or e.name in args.only]
    started = time.perf_counter()
    rows = []
    for i, row in enumerate(evaluate_all(entries, args.jobs), 1):
        rows.append(row)
        print(f"[{i:2d}/{len(entries)}] {time.perf_counter() - started:6.0f}s {row['name']}", flush=True)
    result = rules(rows)
    args.out.parent.mkdir(parents=True, exist_ok=True)
    args.out.write_text(json.dumps({"rules": result, "series": rows}, indent=1))
    for name, value in result.items():
        print(f"{value:8.3f}  {name}")
    print(f"JSON in {args.out}", file=sys.stderr)


if __name__ == "__main__":
    main()
