"""The forecast check of one order as the review page shows it: the figures in words, the
error by step ahead, and a chart of the end of the series with the forecasts and intervals.

The check itself (rolling origins, refits, MASE against the seasonal naive forecast, interval
coverage) is :func:`app.review.forecast_check.backtest_series`.
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlite_utils

from app.review.forecast_check import backtest_series
from app.web.charts import forecast_figure
from app.web.templating import number

SHOWN_SEASONS = 4
SHOWN_MINIMUM = 48


def forecast_check_view(
    db: sqlite_utils.Database, series_id: str, order: Sequence[int], seasonal_order: Sequence[int]
) -> dict:
    """The forecast check of ``order`` x ``seasonal_order`` on the stored series, for the page.

    The chart shows the last ``max(48, (origins + 4) * horizon)`` observations: the evaluated
    stretch and a few horizons of the past before it, to judge the forecasts by eye, then the
    forecast beyond the data.
    """
    check = backtest_series(db, series_id, order, seasonal_order)
    horizon = check["horizon"]
    shown = max(SHOWN_MINIMUM, (check["origins"] + SHOWN_SEASONS) * horizon)
    plot = check["plot"]
    ahead = plot["ahead"]
    return {
        **check,
        "beats_naive": check["mase"] is not None and check["naive_mase"] is not None and check["mase"] < check["naive_mase"],
        "chart": {
            "id": "forecast-check",
            "figure": forecast_figure(plot, shown),
            "columns": ["time ahead", "forecast", "80% interval", "95% interval"],
            "rows": [
                (t, number(f, 4), f"{number(lo80, 4)} – {number(hi80, 4)}", f"{number(lo95, 4)} – {number(hi95, 4)}")
                for t, f, lo80, hi80, lo95, hi95 in zip(
                    ahead["timestamps"], ahead["forecast"], ahead["lower_80"], ahead["upper_80"],
                    ahead["lower_95"], ahead["upper_95"],
                )
            ],
        },
    }
