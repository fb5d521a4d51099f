"""Forecast checks as the review page shows them: one order's check (the figures in words, the
error by step ahead, and a chart of the end of the series with the forecasts and intervals),
and the checks of two or three candidates side by side.

The check itself (rolling origins, refits, MASE against the seasonal naive forecast, interval
coverage) is :func:`app.review.forecast_check.backtest_series`.
"""

from __future__ import annotations

from collections.abc import Sequence

import pandas as pd
import sqlite_utils

from app.core.analysis import Analysis
from app.review.decisions import ChosenInterventions
from app.review.forecast_check import backtest_series, compare_orders
from app.web.charts import COMPARED_COLOURS, comparison_figure, forecast_figure
from app.web.review import time_labels
from app.web.templating import number, percent

SHOWN_SEASONS = 4
SHOWN_MINIMUM = 48


def shown_points(check: dict) -> int:
    """How many of the last observations a check's chart shows: ``max(48, (origins + 4) * horizon)``,
    the evaluated stretch and a few horizons of the past before it, to judge the forecasts by eye."""
    return max(SHOWN_MINIMUM, (check["origins"] + SHOWN_SEASONS) * check["horizon"])


def beats_naive(check: dict) -> bool:
    return check["mase"] is not None and check["naive_mase"] is not None and check["mase"] < check["naive_mase"]


def forecast_check_view(
    db: sqlite_utils.Database, series_id: str, order: Sequence[int], seasonal_order: Sequence[int],
    transform: str | dict | None = None, include_constant: bool | None = None,
    interventions: ChosenInterventions | None = None,
) -> dict:
    """The forecast check of ``order`` x ``seasonal_order`` on the stored series (with a custom
    model's transform, constant and interventions when given), for the page: the chart shows the
    last :func:`shown_points` observations, then the forecast beyond the data."""
    check = backtest_series(db, series_id, order, seasonal_order, transform,
                            include_constant=include_constant, interventions=interventions)
    return {
        **check,
        "beats_naive": beats_naive(check),
        "chart": {
            "id": "forecast-check",
            "figure": forecast_figure(check["plot"], shown_points(check)),
            "columns": list(AHEAD_COLUMNS),
            "rows": ahead_rows(check),
        },
    }


AHEAD_COLUMNS = ("time ahead", "forecast", "80% interval", "95% interval")


def readable_stamps(stamps: Sequence[str | int]) -> list:
    """A check's time stamps (:func:`app.core.backtest` writes dates as text, steps as whole
    numbers) as the review page's tables show them (:func:`app.web.review.time_labels`)."""
    if not stamps or not isinstance(stamps[0], str):
        return [str(t) for t in stamps]
    return time_labels(pd.DatetimeIndex(stamps))


def ahead_rows(check: dict) -> list[tuple]:
    """The forecast beyond the data as the chart's table shows it, a row per step."""
    ahead = check["plot"]["ahead"]
    return [
        (t, number(f, 4), f"{number(lo80, 4)} – {number(hi80, 4)}", f"{number(lo95, 4)} – {number(hi95, 4)}")
        for t, f, lo80, hi80, lo95, hi95 in zip(
            readable_stamps(ahead["timestamps"]), ahead["forecast"], ahead["lower_80"], ahead["upper_80"], ahead["lower_95"], ahead["upper_95"],
        )
    ]


def legend_entry(check: dict) -> str:
    """A model's entry in the comparison's legend: its label, MASE and interval coverage."""
    coverage = " · ".join(f"{level}% holds {percent(share)}" for level, share in check["coverage"].items())
    return f"{check['label']} · MASE {number(check['mase'], 3)} · {coverage}"


def comparison_view(
    db: sqlite_utils.Database, series_id: str, analysis: Analysis | None,
    orders: Sequence[tuple[Sequence[int], Sequence[int] | None]],
) -> dict:
    """The forecast checks of two or three orders side by side: one chart with a panel per
    model on shared axes, and a table of their criteria, residual check and forecast scores
    (criteria and Ljung-Box only for orders among the analysis' candidates)."""
    checks = compare_orders(db, series_id, orders)
    names = [legend_entry(check) for check in checks]
    shown = max(shown_points(check) for check in checks)
    rows = []
    for check, colours in zip(checks, COMPARED_COLOURS):
        candidate = analysis.candidate_of(check["order"], check["seasonal_order"]) if analysis else None
        rank = analysis.candidates.index(candidate) + 1 if analysis and candidate else None
        rows.append({
            "label": check["label"], "rank": rank, "colour": colours.line,
            "order": check["order"], "seasonal_order": check["seasonal_order"],
            "aicc": candidate.aicc if candidate else None, "bic": candidate.bic if candidate else None,
            "delta_aicc": candidate.delta_aicc if candidate else None,
            "ljung_box_p": candidate.ljung_box_p if candidate else None,
            "mase": check["mase"], "naive_mase": check["naive_mase"], "coverage": check["coverage"],
            "beats_naive": beats_naive(check),
        })
    settings = {(check["origins"], check["horizon"]) for check in checks}
    notes = [note for check in checks for note in check["notes"]]
    if len(settings) == 1:
        origins, horizon = settings.pop()
        setting = f"{origins} origin{'' if origins == 1 else 's'}, {horizon} step{'' if horizon == 1 else 's'} ahead, each model refitted at every origin."
    else:
        setting = ("The models were checked on different origins or horizons ("
                   + "; ".join(f"{c['label']}: {c['origins']} × {c['horizon']} steps" for c in checks)
                   + "): their scores are not measured on the same forecasts.")
    best = min((r["mase"] for r in rows if r["mase"] is not None), default=None)
    return {
        "series_id": series_id,
        "checks": checks,
        "rows": [{**r, "best": r["mase"] is not None and r["mase"] == best} for r in rows],
        "levels": list(checks[0]["coverage"]),
        "setting": setting,
        "notes": list(dict.fromkeys(notes)),
        "naive_m": checks[0]["m"],
        "chart": {
            "id": "forecast-comparison",
            "figure": comparison_figure(checks, names, shown),
            "columns": ["model", *AHEAD_COLUMNS],
            "rows": [(check["label"], *row) for check in checks for row in ahead_rows(check)],
        },
    }
