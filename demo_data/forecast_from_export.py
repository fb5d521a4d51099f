"""An example forecasting job that takes its orders from a Lagdesk export.

Usage::

    python demo_data/forecast_from_export.py ORDERS.json PORTFOLIO.csv FORECASTS.csv [--horizon H] [--refit]

reads the JSON export (``lagdesk export --format json``) and the portfolio file in the long
layout (``series_id,timestamp,value``), and writes, for every exported order, ``H`` forecasts
(default 12) with 80% and 95% prediction intervals to ``FORECASTS.csv``::

    series_id,step,timestamp,forecast,lower_80,upper_80,lower_95,upper_95

It is not part of Lagdesk: it uses only the export's documented fields, pandas, scipy and
statsmodels, to show that the hand-off works without a person in between.

Series the reviewers marked "not an ARIMA series" (the export's ``not_arima`` list, schema
version 2) get no forecast here: they are named on stderr as routed to another method (for
intermittent demand, Croston's method, say), which a real job would call.

For each order it

1. takes the series' rows up to the export's ``last_timestamp`` (the data the parameters were
   fitted on) and puts them on their regular time grid; inner gaps stay missing, as in
   Lagdesk's fits (the state-space model skips them exactly, nothing is invented); timestamps
   with UTC offsets, and months, quarters and ISO weeks without a day, are read as Lagdesk
   reads them (:func:`read_timestamps`);
2. applies the export's ``transform`` (``none``, ``log`` or ``{"box_cox": lambda}``) and takes
   the effects of the export's ``interventions`` out of the transformed series (version 3);
3. builds the statsmodels ``ARIMA`` model of ``(p, d, q)(seasonal_p, seasonal_d, seasonal_q)
   period`` (a regression with ARMA errors, the differencing inside the state, so forecasts
   come out in levels); the deterministic terms are read from the parameter names: ``const``
   is a constant in levels (``trend="c"``), ``drift`` the slope of a linear time trend in
   levels (``trend="t"``; at d = 1 it is the mean step), both together ``trend="ct"``; they
   must agree with ``include_constant``;
4. filters the data with the exported ``parameters`` (or, with ``--refit``, estimates them
   again by maximum likelihood) and forecasts;
5. adds the interventions' effects over the horizon back (a level shift stays, a temporary
   change keeps decaying, an additive outlier is gone) and back-transforms the forecasts and
   the interval bounds (the point forecast becomes the median on the original scale).
"""

from __future__ import annotations

import argparse
import csv
import json
import re
import sys
import warnings
from datetime import date
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.special import boxcox, inv_boxcox
from statsmodels.tsa.arima.model import ARIMA

EXPORT_SCHEMA = "lagdesk-orders"
# version 2 added the not_arima list, version 3 interventions, version 4 their timestamps in ISO 8601
EXPORT_VERSIONS = (1, 2, 3, 4)
TEMPORARY_DECAY = 0.7  # the decay of a temporary_change, as the export's schema states
LEVELS = (0.80, 0.95)
OUTPUT_FIELDS = ("series_id", "step", "timestamp", "forecast", "lower_80", "upper_80", "lower_95", "upper_95")
DEFAULT_HORIZON = 12


def read_export(path: Path) -> list[dict]:
    """The orders of a Lagdesk JSON export, after checking its schema name and version; the
    series marked not_arima are named as routed elsewhere."""
    document = json.loads(path.read_text(encoding="utf-8"))
    if document.get("schema") != EXPORT_SCHEMA or document.get("version") not in EXPORT_VERSIONS:
        raise SystemExit(f"{path}: not a Lagdesk orders export of version {' or '.join(map(str, EXPORT_VERSIONS))}")
    left_out = ", ".join(f"{n} {status}" for status, n in document["left_out"].items())
    print(f"{path}: {len(document['orders'])} orders; left out by the reviewers: {left_out}", file=sys.stderr)
    for routed in document.get("not_arima", []):
        print(f"series {routed['series_id']!r}: not an ARIMA series ({routed['reviewer']}: {routed['note'] or 'no note'}); "
              "no forecast here, routed to another method", file=sys.stderr)
    return document["orders"]


def series_up_to(frame: pd.DataFrame, order: dict) -> pd.Series:
    """One series' values up to the export's last timestamp, on a regular grid, gaps filled."""
    rows = frame[frame["series_id"] == order["series_id"]]
    if rows.empty:
        raise SystemExit(f"series {order['series_id']!r} is in the export but not in the portfolio file")
    last = order["last_timestamp"]
    integer_steps = last.lstrip("-").isdigit()
    stamps = rows["timestamp"].astype(int) if integer_steps else read_timestamps(rows["timestamp"])
    values = pd.Series(rows["value"].to_numpy(dtype=float), index=stamps.to_numpy()).sort_index()
    values = values[values.index <= (int(last) if integer_steps else pd.Timestamp(last))].dropna()
    if integer_steps:
        step = int(np.diff(values.index).min())
        grid = pd.Index(np.arange(values.index[0], values.index[-1] + 1, step))
    else:
        grid = pd.date_range(values.index[0], values.index[-1], freq=_frequency(pd.DatetimeIndex(values.index)))
    return values.reindex(grid)


UTC_OFFSET = r"\s?(?:[Zz]|[+-]\d\d:?\d\d)$"


# Months, quarters and ISO weeks written without a day (Lagdesk's README, "Dates").
QUARTER = re.compile(r"^(?:(\d{4})\s?-?Q([1-4])|Q([1-4])\s(\d{4}))$")
ISO_WEEK = re.compile(r"^(\d{4})[- ]W(\d{2})$")
MONTH_FORMATS = ("%b %Y", "%B %Y", "%Y %b", "%Y %B", "%b-%Y", "%B-%Y", "%Y/%m", "%m/%Y", "%YM%m")


def read_timestamps(texts: pd.Series) -> pd.Series:
    """The timestamps as Lagdesk stores them (its README, "Dates"): a month, quarter or ISO week
    written without a day as the first day of its period (a week as its Monday); with UTC
    offsets on clock times that vary (hourly readings), the instants in UTC; otherwise the clock
    time as written, any offset dropped (dates at midnight keep their local date)."""
    starts = _period_starts(texts.str.strip())
    if starts is not None:
        return starts
    local = pd.to_datetime(texts.str.replace(UTC_OFFSET, "", regex=True))
    if (local - local.dt.normalize()).nunique() > 1:
        return pd.to_datetime(texts, utc=True).dt.tz_localize(None)
    return local


def _period_starts(texts: pd.Series) -> pd.Series | None:
    """The first days of the periods ``texts`` name when every one is a quarter, an ISO week or
    a month without a day in one of Lagdesk's layouts; None otherwise."""
    quarters = texts.str.extract(QUARTER)
    if quarters.notna().any(axis=1).all():
        year = quarters[0].fillna(quarters[3]).astype(int)
        quarter = quarters[1].fillna(quarters[2]).astype(int)
        return pd.to_datetime(pd.DataFrame({"year": year, "month": 3 * quarter - 2, "day": 1}))
    weeks = texts.str.extract(ISO_WEEK)
    if weeks.notna().all(axis=1).all():
        return pd.Series([pd.Timestamp(date.fromisocalendar(int(y), int(w), 1)) for y, w in weeks.itertuples(index=False)],
                         index=texts.index)
    for layout in MONTH_FORMATS:
        months = pd.to_datetime(texts, format=layout, errors="coerce")
        if months.notna().all():
            return months
    return None


def _frequency(index: pd.DatetimeIndex) -> str:
    """The sampling frequency; with gaps, the one most runs of three timestamps agree on."""
    whole = _infer(index)
    if whole is not None:
        return whole
    local = [_infer(index[i:i + 3]) for i in range(len(index) - 2)]
    return pd.Series([f for f in local if f is not None]).mode().iloc[0]


def _infer(index: pd.DatetimeIndex) -> str | None:
    """pandas' inferred frequency as a string (pandas is moving from strings to offsets)."""
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message=".*infer_freq")
        freq = pd.infer_freq(index)
    return freq if freq is None or isinstance(freq, str) else freq.freqstr


def transform_values(x: np.ndarray, transform) -> np.ndarray:
    if transform == "none":
        return x
    if transform == "log":
        return np.log(x)
    return boxcox(x, transform["box_cox"])


def back_transform(z: np.ndarray, transform) -> np.ndarray:
    if transform == "none":
        return z
    if transform == "log":
        return np.exp(z)
    return inv_boxcox(z, transform["box_cox"])


ARIMA_NAMES = {"drift": "x1"}  # statsmodels ARIMA names the time-trend coefficient x1


def arima_for(order: dict, z: np.ndarray) -> tuple[ARIMA, dict]:
    """The ARIMA model of an exported order, and its parameters under statsmodels' names."""
    parameters = dict(order["parameters"])
    trend = "".join(t for name, t in (("const", "c"), ("drift", "t")) if name in parameters) or "n"
    if (trend != "n") != order["include_constant"]:
        raise SystemExit(f"series {order['series_id']!r}: include_constant is {order['include_constant']} "
                         f"but the parameters are {sorted(parameters)}")
    named = {ARIMA_NAMES.get(name, name): value for name, value in parameters.items()}
    model = ARIMA(
        z,
        order=(order["p"], order["d"], order["q"]),
        seasonal_order=(order["seasonal_p"], order["seasonal_d"], order["seasonal_q"], order["period"] or 0),
        trend=trend, enforce_stationarity=False, enforce_invertibility=False,
    )
    return model, named


def intervention_effects(order: dict, index: pd.Index, horizon: int) -> np.ndarray:
    """The summed effects of the order's interventions over the data and the ``horizon`` after it."""
    effects = np.zeros(len(index) + horizon)
    steps = np.arange(effects.size)
    for item in order.get("interventions", []):
        stamp = item["timestamp"]
        matches = np.flatnonzero(index == (pd.Timestamp(stamp) if isinstance(index, pd.DatetimeIndex) else int(stamp)))
        if not matches.size:
            raise SystemExit(f"series {order['series_id']!r}: intervention at {stamp} is not in the data")
        at = int(matches[0])
        shape = {"additive": steps == at, "level_shift": steps >= at,
                 "temporary_change": np.where(steps >= at, TEMPORARY_DECAY ** np.clip(steps - at, 0, None), 0.0)}
        effects += item["size"] * np.asarray(shape[item["kind"]], dtype=float)
    return effects


def forecast_order(order: dict, values: pd.Series, horizon: int, refit: bool) -> list[dict]:
    """Forecast rows of one exported order."""
    effects = intervention_effects(order, values.index, horizon)
    n = len(values)
    z = transform_values(values.to_numpy(dtype=float), order["transform"]) - effects[:n]
    model, named = arima_for(order, z)
    if refit:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            result = model.fit()
    else:
        missing = [name for name in model.param_names if name not in named]
        if missing:
            raise SystemExit(f"series {order['series_id']!r}: the export lacks parameters {missing}")
        result = model.filter(np.array([named[name] for name in model.param_names]))
    prediction = result.get_forecast(horizon)
    ahead = effects[n:]
    mean = back_transform(np.asarray(prediction.predicted_mean) + ahead, order["transform"])
    bounds = {level: np.asarray(prediction.conf_int(alpha=1 - level)) + ahead[:, None] for level in LEVELS}
    stamps = _future(values.index, horizon)
    rows = []
    for step in range(horizon):
        row = {"series_id": order["series_id"], "step": step + 1, "timestamp": stamps[step], "forecast": mean[step]}
        for level in LEVELS:
            lower, upper = back_transform(bounds[level][step], order["transform"])
            row[f"lower_{round(level * 100)}"], row[f"upper_{round(level * 100)}"] = lower, upper
        rows.append(row)
    return rows


def _future(index: pd.Index, horizon: int) -> list[str]:
    if isinstance(index, pd.DatetimeIndex):
        return [t.isoformat() for t in pd.date_range(index[-1], periods=horizon + 1, freq=index.freq)[1:]]
    step = int(index[1] - index[0])
    return [str(int(index[-1]) + step * k) for k in range(1, horizon + 1)]


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description="Forecast every order of a Lagdesk JSON export with statsmodels.")
    parser.add_argument("export", type=Path, help="the JSON export (lagdesk export --format json)")
    parser.add_argument("portfolio", type=Path, help="the portfolio CSV, long layout: series_id,timestamp,value")
    parser.add_argument("output", type=Path, help="where to write the forecasts (CSV)")
    parser.add_argument("--horizon", type=int, default=DEFAULT_HORIZON, help=f"steps ahead (default {DEFAULT_HORIZON})")
    parser.add_argument("--refit", action="store_true", help="estimate the parameters again instead of using the exported ones")
    args = parser.parse_args(argv)
    if args.horizon < 1:
        parser.error(f"--horizon must be at least 1, not {args.horizon}")
    orders = read_export(args.export)
    frame = pd.read_csv(args.portfolio, dtype={"series_id": str, "timestamp": str})
    rows = [row for order in orders for row in forecast_order(order, series_up_to(frame, order), args.horizon, args.refit)]
    with args.output.open("w", newline="", encoding="utf-8") as handle:
        writer = csv.DictWriter(handle, fieldnames=OUTPUT_FIELDS)
        writer.writeheader()
        writer.writerows(rows)
    print(f"{args.output}: {len(rows)} forecasts for {len(orders)} series", file=sys.stderr)


if __name__ == "__main__":
    main()
