"""Chart figures for the review page, as plotly JSON that the page hands to plotly.js.

This is the only module that imports plotly. It also names the plotly.js file the server
hands out, taken from the plotly package itself, so the pages never fetch it from elsewhere.

Colours are from the Okabe-Ito palette (Okabe & Ito 2008, "Color Universal Design"), which
stays distinguishable under the common forms of colour blindness; seasonal lags are told apart
by a hatch pattern and a dotted guide line as well, not by colour alone.
"""

from __future__ import annotations

import json
import math
from collections.abc import Sequence
from pathlib import Path

import plotly
import plotly.io as pio

from app.core.analysis import Correlation

PLOTLY_JS = Path(plotly.__file__).parent / "package_data" / "plotly.min.js"

BLUE = "#0072B2"
VERMILLION = "#D55E00"
SKY_BLUE = "#56B4E9"
GREY = "#6b6b6b"
BAND_FILL = "rgba(86, 180, 233, 0.30)"
GRID = "#e6e6e6"

LAG_CHART_HEIGHT = 210
LINE_CHART_HEIGHT = 190
BAR_WIDTH = 0.35
HEADROOM = 1.15
FONT = "system-ui, -apple-system, 'Segoe UI', Roboto, sans-serif"


def _layout(height: int, y_title: str, x_title: str) -> dict:
    return {
        "height": height,
        "margin": {"l": 52, "r": 12, "t": 8, "b": 38},
        "showlegend": False,
        "plot_bgcolor": "white",
        "paper_bgcolor": "white",
        "font": {"family": FONT, "size": 12, "color": "#222"},
        "xaxis": {"title": {"text": x_title, "standoff": 4}, "gridcolor": GRID, "zeroline": False},
        "yaxis": {"title": {"text": y_title, "standoff": 4}, "gridcolor": GRID, "zeroline": False},
        "hovermode": "closest",
    }


def _as_json(data: list[dict], layout: dict) -> dict:
    """The figure as plain JSON data. plotly's encoder turns NaN (a gap in a series) into null,
    which plotly.js draws as a break. The figures are built as plain dicts and not validated by
    plotly.py's figure classes, which took most of a review page's time (tests check the
    structure, and plotly.js draws it)."""
    return json.loads(pio.to_json({"data": data, "layout": layout}, validate=False))


def lag_bar_figure(correlation: Correlation, seasonal_lags: Sequence[int] = (), y_title: str = "ACF") -> dict:
    """Bars of a correlogram with its band drawn as a shaded area around zero.

    Parameters
    ----------
    correlation : Correlation
        One panel of the analysis (lags 1..K, a value per lag and ``band``, the half-width at
        each lag: Bartlett's, widening with lag, for an ACF; constant ``z / sqrt(n)`` for a
        PACF).
    seasonal_lags : sequence of int
        Lags to mark (multiples of the seasonal period).
    """
    lags = [int(k) for k in correlation.lags]
    values = [float(v) for v in correlation.values]
    band = [float(b) for b in correlation.band]
    seasonal = set(int(k) for k in seasonal_lags)
    # The band is a step: constant across each lag's slot, as each lag has its own width.
    upper_x = [x for k in lags for x in (k - 0.5, k + 0.5)]
    upper_y = [b for b in band for _ in (0, 1)]
    band_trace = {
        "type": "scatter", "x": upper_x + upper_x[::-1], "y": upper_y + [-b for b in upper_y[::-1]],
        "fill": "toself", "fillcolor": BAND_FILL, "line": {"width": 0}, "hoverinfo": "skip", "mode": "lines",
        "name": "band",
    }
    bars = {
        "type": "bar", "x": lags, "y": values, "width": BAR_WIDTH, "customdata": band, "name": y_title,
        "marker": {
            "color": [VERMILLION if k in seasonal else BLUE for k in lags],
            "pattern": {"shape": ["/" if k in seasonal else "" for k in lags], "fgcolor": "white", "size": 5, "solidity": 0.25},
            "line": {"width": 0},
        },
        "hovertemplate": "lag %{x}: %{y:.3f}<br>band ±%{customdata:.3f}<extra></extra>",
    }
    layout = _layout(LAG_CHART_HEIGHT, y_title, "lag")
    reach = max([abs(v) for v in values if math.isfinite(v)] + band + [0.1])
    top = min(1.0, reach * HEADROOM)
    layout["yaxis"]["range"] = [-top, top]
    layout["xaxis"]["range"] = [0.4, (lags[-1] if lags else 1) + 0.6]
    layout["shapes"] = [
        {"type": "line", "xref": "x", "yref": "paper", "x0": k, "x1": k, "y0": 0, "y1": 1,
         "line": {"color": VERMILLION, "width": 1, "dash": "dot"}, "layer": "below"}
        for k in sorted(seasonal) if k in lags
    ] + [_zero_line()]
    return _as_json([band_trace, bars], layout)


def line_figure(x: Sequence, y: Sequence[float], y_title: str, x_title: str = "", zero_line: bool = False) -> dict:
    """A series over time (NaN values are drawn as breaks in the line)."""
    trace = {
        "type": "scatter", "x": list(x), "y": [float(v) for v in y], "mode": "lines",
        "line": {"color": BLUE, "width": 1.4}, "connectgaps": False,
        "hovertemplate": "%{x}: %{y:.4g}<extra></extra>",
    }
    layout = _layout(LINE_CHART_HEIGHT, y_title, x_title)
    if zero_line:
        layout["shapes"] = [_zero_line()]
    return _as_json([trace], layout)


def _zero_line() -> dict:
    return {"type": "line", "xref": "paper", "yref": "y", "x0": 0, "x1": 1, "y0": 0, "y1": 0,
            "line": {"color": GREY, "width": 1}}


FORECAST_CHART_HEIGHT = 260
BAND_80_FILL = "rgba(213, 94, 0, 0.28)"
BAND_95_FILL = "rgba(213, 94, 0, 0.13)"


def forecast_figure(plot: dict, shown: int) -> dict:
    """The last ``shown`` observations with the forecast from the last origin of a forecast
    check (over the held-out end of the series) and the forecast beyond the data, each with its
    80% and 95% intervals as nested shaded bands.

    Parameters
    ----------
    plot : dict
        The ``plot`` part of a forecast check: ``history`` (``timestamps``, ``values``),
        ``holdout`` and ``ahead`` (``timestamps``, ``forecast``, ``lower_80``/``upper_80``,
        ``lower_95``/``upper_95``; ``holdout`` also ``actual``).
    """
    history = plot["history"]
    data = [{
        "type": "scatter", "x": history["timestamps"][-shown:], "y": history["values"][-shown:], "mode": "lines",
        "line": {"color": BLUE, "width": 1.4}, "name": "observed", "connectgaps": False,
        "hovertemplate": "%{x}: %{y:.4g}<extra>observed</extra>",
    }]
    for part, dash in (("holdout", "dash"), ("ahead", "solid")):
        stretch = plot[part]
        x = stretch["timestamps"]
        for level, fill in (("95", BAND_95_FILL), ("80", BAND_80_FILL)):
            data.append({
                "type": "scatter", "x": x + x[::-1], "y": stretch[f"upper_{level}"] + stretch[f"lower_{level}"][::-1],
                "fill": "toself", "fillcolor": fill, "line": {"width": 0}, "mode": "lines", "hoverinfo": "skip",
                "name": f"{level}% interval",
            })
        data.append({
            "type": "scatter", "x": x, "y": stretch["forecast"], "mode": "lines+markers",
            "line": {"color": VERMILLION, "width": 1.6, "dash": dash}, "marker": {"size": 4},
            "name": "forecast", "hovertemplate": "%{x}: %{y:.4g}<extra>forecast</extra>",
        })
    layout = _layout(FORECAST_CHART_HEIGHT, "value", "")
    layout["shapes"] = [{
        "type": "line", "xref": "x", "yref": "paper", "x0": plot["holdout"]["timestamps"][0],
        "x1": plot["holdout"]["timestamps"][0], "y0": 0, "y1": 1, "line": {"color": GREY, "width": 1, "dash": "dot"},
    }]
    return _as_json(data, layout)
