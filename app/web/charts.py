"""Chart figures for the review page, as plotly JSON that the page hands to plotly.js.

This is the only module that imports plotly. It also names the plotly.js file the server
hands out, taken from the plotly package itself, so the pages never fetch it from elsewhere.

Colours are from the Okabe-Ito palette (Okabe & Ito 2008, "Color Universal Design"), which
stays distinguishable under the common forms of colour blindness; seasonal lags are told apart
by a hatch pattern and a dotted guide line as well, not by colour alone.

The figures have transparent backgrounds; the page's script gives them the text and grid
colours of the page's colour scheme (``static/js/lagdesk.js``), so one figure serves the light
and the dark scheme. Tick labels are plain decimals with thousands separators: plotly's
default SI prefixes would write 0.0005 as "500µ", which reads as a unit on a log scale.
"""

from __future__ import annotations

import json
import math
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import plotly
import plotly.io as pio

from app.core.analysis import Correlation, Intervention

PLOTLY_JS = Path(plotly.__file__).parent / "package_data" / "plotly.min.js"

BLUE = "#0072B2"
VERMILLION = "#D55E00"
SKY_BLUE = "#56B4E9"
GREY = "#6b6b6b"
BAND_FILL = "rgba(86, 180, 233, 0.30)"
GRID = "#e6e6e6"
INK = "#222"
TRANSPARENT = "rgba(0, 0, 0, 0)"
# Plain decimals, thousands separated (d3's "," with plotly's own precision choice).
TICKS = {"exponentformat": "none", "separatethousands": True}

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
        "plot_bgcolor": TRANSPARENT,
        "paper_bgcolor": TRANSPARENT,
        "font": {"family": FONT, "size": 12, "color": INK},
        "xaxis": _axis(x_title),
        "yaxis": _axis(y_title),
        "hovermode": "closest",
    }


def _axis(title: str) -> dict:
    return {"title": {"text": title, "standoff": 4}, "automargin": True, "gridcolor": GRID, "zeroline": False, **TICKS}


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


# A marker shape per intervention kind, so the kinds differ by shape and not by colour alone.
INTERVENTION_SYMBOLS = {"additive": "x", "temporary_change": "triangle-down", "level_shift": "diamond"}


def series_figure(x: Sequence, y: Sequence[float], y_title: str, interventions: Sequence[Intervention] = (),
                  scale: str = "") -> dict:
    """The series over time with the interventions the engine estimated: a marker at each, a
    dotted vertical line where a level shift starts; kind, time, size and t on hover. ``scale``
    names the scale the sizes are on (the transform's) when it is not the series' own."""
    figure = line_figure(x, y, y_title)
    if not interventions:
        return figure
    on = f" on the {scale} scale" if scale else ""
    figure["data"].append({
        "type": "scatter", "mode": "markers", "name": "interventions",
        "x": [x[i.position] for i in interventions], "y": [float(y[i.position]) for i in interventions],
        "marker": {"color": VERMILLION, "size": 11, "line": {"width": 2, "color": VERMILLION},
                   "symbol": [INTERVENTION_SYMBOLS[str(i.kind)] for i in interventions]},
        "text": [f"{i.kind.words()}<br>size {i.size:+.4g}{on}, t = {i.t_stat:+.1f}" for i in interventions],
        "hovertemplate": "%{x}<br>%{text}<extra></extra>",
    })
    figure["layout"]["shapes"] = [
        {"type": "line", "xref": "x", "yref": "paper", "x0": x[i.position], "x1": x[i.position], "y0": 0, "y1": 1,
         "line": {"color": VERMILLION, "width": 1, "dash": "dot"}}
        for i in interventions if str(i.kind) == "level_shift"
    ]
    return figure


def _zero_line() -> dict:
    return {"type": "line", "xref": "paper", "yref": "y", "x0": 0, "x1": 1, "y0": 0, "y1": 0,
            "line": {"color": GREY, "width": 1}}


FORECAST_CHART_HEIGHT = 260
BAND_80_FILL = "rgba(213, 94, 0, 0.28)"
BAND_95_FILL = "rgba(213, 94, 0, 0.13)"


@dataclass(frozen=True)
class ForecastColours:
    """The line and the 80% and 95% band fills of one model's forecasts."""

    line: str
    band_80: str
    band_95: str


FORECAST_COLOURS = ForecastColours(VERMILLION, BAND_80_FILL, BAND_95_FILL)
# One colour per compared model, Okabe-Ito vermillion, bluish green and reddish purple: apart
# from the observed series' blue and from each other under the common colour-vision deficiencies.
COMPARED_COLOURS = (
    FORECAST_COLOURS,
    ForecastColours("#009E73", "rgba(0, 158, 115, 0.28)", "rgba(0, 158, 115, 0.13)"),
    ForecastColours("#CC79A7", "rgba(204, 121, 167, 0.30)", "rgba(204, 121, 167, 0.14)"),
)
# Pixels: each panel's plotting area, the room above it for its label, under the last for the
# time axis' labels (two lines for dates), and a legend line per model.
COMPARED_PANEL_HEIGHT = 190
PANEL_LABEL_ROOM = 22
TIME_LABELS_ROOM = 42
LEGEND_LINE = 24


def _observed_trace(history: dict, shown: int) -> dict:
    """The last ``shown`` observations, drawn over the forecast bands so they stay visible."""
    return {
        "type": "scatter", "x": history["timestamps"][-shown:], "y": history["values"][-shown:], "mode": "lines",
        "line": {"color": BLUE, "width": 1.4}, "name": "observed", "connectgaps": False,
        "hovertemplate": "%{x}: %{y:.4g}<extra>observed</extra>",
    }


def _forecast_traces(plot: dict, colours: ForecastColours, name: str, group: str | None = None) -> list[dict]:
    """The forecast from the last origin (dashed, over the held-out end) and beyond the data
    (solid), each over its 95% and 80% bands; ``group`` ties them to one legend entry."""
    traces = []
    for part, dash in (("holdout", "dash"), ("ahead", "solid")):
        stretch = plot[part]
        x = stretch["timestamps"]
        for level, fill in (("95", colours.band_95), ("80", colours.band_80)):
            traces.append({
                "type": "scatter", "x": x + x[::-1], "y": stretch[f"upper_{level}"] + stretch[f"lower_{level}"][::-1],
                "fill": "toself", "fillcolor": fill, "line": {"width": 0}, "mode": "lines", "hoverinfo": "skip",
                "name": f"{level}% interval",
            })
        traces.append({
            "type": "scatter", "x": x, "y": stretch["forecast"], "mode": "lines+markers",
            "line": {"color": colours.line, "width": 1.6, "dash": dash}, "marker": {"size": 4},
            "name": name, "hovertemplate": f"%{{x}}: %{{y:.4g}}<extra>{name}</extra>",
        })
    if group is not None:
        for i, trace in enumerate(traces):
            trace.update(legendgroup=group, showlegend=i == 2)
    return traces


def _holdout_line(plot: dict, yref: str = "paper") -> dict:
    start = plot["holdout"]["timestamps"][0]
    return {"type": "line", "xref": "x", "yref": yref, "x0": start, "x1": start, "y0": 0, "y1": 1,
            "line": {"color": GREY, "width": 1, "dash": "dot"}}


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
    data = [*_forecast_traces(plot, FORECAST_COLOURS, "forecast"), _observed_trace(plot["history"], shown)]
    layout = _layout(FORECAST_CHART_HEIGHT, "value", "")
    layout["shapes"] = [_holdout_line(plot)]
    return _as_json(data, layout)


def comparison_figure(checks: Sequence[dict], names: Sequence[str], shown: int) -> dict:
    """The forecast checks of two or three models in one figure: a panel each, stacked, all on
    the same time and value axes, each with the observed series and that model's forecasts and
    intervals as in :func:`forecast_figure`, in the model's colour (:data:`COMPARED_COLOURS`).

    Parameters
    ----------
    checks : sequence of dict
        Forecast checks of the same series: each model's ``label`` is written in its panel,
        and its ``plot`` is drawn (the ``plot`` of :func:`forecast_figure`).
    names : sequence of str
        Each model's legend entry (its label and scores).
    shown : int
        How many of the last observations to draw.
    """
    count = len(checks)
    plot_height = count * COMPARED_PANEL_HEIGHT + (count - 1) * PANEL_LABEL_ROOM
    legend_height = LEGEND_LINE * count
    layout = _layout(plot_height + PANEL_LABEL_ROOM + TIME_LABELS_ROOM + legend_height, "", "")
    # The legend under the time axis' labels; each panel's label above the panel.
    layout.update(showlegend=True, shapes=[], annotations=[],
                  legend={"orientation": "h", "x": 0, "y": -TIME_LABELS_ROOM / plot_height, "yanchor": "top",
                          "traceorder": "grouped"},
                  margin={"l": 52, "r": 12, "t": PANEL_LABEL_ROOM, "b": TIME_LABELS_ROOM + legend_height})
    data: list[dict] = []
    for i, (check, name, colours) in enumerate(zip(checks, names, COMPARED_COLOURS)):
        plot = check["plot"]
        suffix = "" if i == 0 else str(i + 1)
        top = 1 - i * (COMPARED_PANEL_HEIGHT + PANEL_LABEL_ROOM) / plot_height
        observed = _observed_trace(checks[0]["plot"]["history"], shown)
        observed.update(legendgroup="observed", showlegend=i == 0, legendrank=1)
        panel = [*_forecast_traces(plot, colours, name, group=name), observed]
        for trace in panel:
            trace.update(xaxis=f"x{suffix}", yaxis=f"y{suffix}")
        data += panel
        y_axis = _axis("value")
        y_axis["domain"] = [max(0.0, top - COMPARED_PANEL_HEIGHT / plot_height), top]
        x_axis = _axis("")
        x_axis.update(anchor=f"y{suffix}", showticklabels=i == count - 1)
        if i:
            y_axis["matches"], x_axis["matches"] = "y", "x"
        layout[f"yaxis{suffix}"], layout[f"xaxis{suffix}"] = y_axis, x_axis
        layout["shapes"].append({**_holdout_line(plot, f"y{suffix} domain"), "xref": f"x{suffix}"})
        layout["annotations"].append({
            "text": check["label"], "xref": f"x{suffix} domain", "yref": f"y{suffix} domain", "x": 0, "y": 1,
            "xanchor": "left", "yanchor": "bottom", "showarrow": False, "font": {"color": colours.line, "weight": "bold"},
        })
    return _as_json(data, layout)

