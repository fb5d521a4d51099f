"""Chart figures: one bar per lag, the band drawn as a shaded area, seasonal lags marked; tick
labels without SI prefixes; forecast checks side by side on shared axes. And the display
helpers of app.web.templating that write the numbers beside them."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import plotly.graph_objects as go
import pytest
from statsmodels.tsa.stattools import acf
from threadpoolctl import threadpool_limits

from app.core.analysis import Correlation
from app.core.backtest import backtest_order
from app.core.correlogram import correlogram
from app.core.order import validate_order
from app.core.prepare import prepare_series
from app.core.transform import TransformChoice
from app.web.charts import (
    BAND_FILL,
    BLUE,
    COMPARED_COLOURS,
    VERMILLION,
    comparison_figure,
    forecast_figure,
    lag_bar_figure,
    line_figure,
)
from app.web.templating import p_value, percent


@pytest.fixture
def ar1_series() -> np.ndarray:
    rng = np.random.default_rng(11)
    e = rng.normal(size=300)
    x = np.zeros(300)
    for t in range(1, 300):
        x[t] = 0.6 * x[t - 1] + e[t]
    return x


@pytest.fixture
def ar1_correlogram(ar1_series) -> Correlation:
    """The ACF panel as an analysis stores it."""
    return Correlation.from_dict(correlogram(ar1_series, 24).to_dict()["acf"])


def test_lag_bars_one_per_lag_with_values(ar1_correlogram):
    fig = lag_bar_figure(ar1_correlogram)
    bars = [t for t in fig["data"] if t["type"] == "bar"]
    assert len(bars) == 1
    assert bars[0]["x"] == list(ar1_correlogram.lags)
    assert bars[0]["y"] == pytest.approx(ar1_correlogram.values)


def test_band_is_a_shaded_step_at_plus_minus_the_half_width(ar1_correlogram):
    fig = lag_bar_figure(ar1_correlogram)
    (band,) = [t for t in fig["data"] if t.get("fill") == "toself"]
    assert band["fillcolor"] == BAND_FILL
    lags, half = ar1_correlogram.lags, ar1_correlogram.band
    m = 2 * len(lags)
    upper_x, upper_y, lower_y = band["x"][:m], band["y"][:m], band["y"][m:][::-1]
    for i, (k, b) in enumerate(zip(lags, half)):
        assert upper_x[2 * i: 2 * i + 2] == [k - 0.5, k + 0.5]
        assert upper_y[2 * i: 2 * i + 2] == pytest.approx([b, b])
        assert lower_y[2 * i: 2 * i + 2] == pytest.approx([-b, -b])


def test_acf_band_is_bartletts_and_widens_with_lag(ar1_series, ar1_correlogram):
    """The drawn half-width is statsmodels' Bartlett interval half-width (reference library;
    var(r_k) = (1 + 2 sum_{j<k} r_j^2) / n, Box, Jenkins, Reinsel & Ljung 2015, sec. 2.1.6)."""
    result = acf(ar1_series, nlags=24, alpha=0.05, fft=True, result_object=True)
    reference = (result.confint[:, 1] - result.acf)[1:]
    fig = lag_bar_figure(ar1_correlogram)
    (band,) = [t for t in fig["data"] if t.get("fill") == "toself"]
    assert band["y"][0: 2 * 24: 2] == pytest.approx(reference, rel=1e-6)
    assert reference[-1] > reference[0]


def test_seasonal_lags_are_marked_by_colour_pattern_and_guide(ar1_correlogram):
    fig = lag_bar_figure(ar1_correlogram, seasonal_lags=[12, 24])
    bar = next(t for t in fig["data"] if t["type"] == "bar")
    colours = dict(zip(bar["x"], bar["marker"]["color"]))
    patterns = dict(zip(bar["x"], bar["marker"]["pattern"]["shape"]))
    assert colours[12] == colours[24] == VERMILLION and colours[1] == BLUE
    assert patterns[12] == "/" and patterns[1] == ""
    guides = [s for s in fig["layout"]["shapes"] if s.get("line", {}).get("dash") == "dot"]
    assert sorted(s["x0"] for s in guides) == [12, 24]


def test_y_range_shows_the_tallest_bar_and_the_band(ar1_correlogram):
    fig = lag_bar_figure(ar1_correlogram)
    low, high = fig["layout"]["yaxis"]["range"]
    reach = max(max(abs(v) for v in ar1_correlogram.values), max(ar1_correlogram.band))
    assert high >= reach and low == -high and high <= 1


def test_line_figure_draws_gaps_as_breaks():
    fig = line_figure(["2024-01-01", "2024-01-02", "2024-01-03"], [1.0, math.nan, 3.0], "value")
    trace = fig["data"][0]
    assert trace["y"] == [1.0, None, 3.0]
    assert trace["connectgaps"] is False


@pytest.fixture(scope="module")
def ar1_checks() -> list[dict]:
    """Forecast checks of AR(1) and MA(1) on one simulated daily AR(1) series (the real check of
    app.core.backtest, whose MASE and coverage tests/core/test_backtest.py checks)."""
    rng = np.random.default_rng(5)
    x = np.zeros(160)
    for t in range(1, 160):
        x[t] = 0.6 * x[t - 1] + rng.normal()
    prepared = prepare_series(pd.Series(10 + x, index=pd.date_range("2024-01-01", periods=160, freq="D")), "sim/ar1")
    with threadpool_limits(limits=1):
        return [backtest_order(prepared, validate_order(order, None, trend="c"), TransformChoice("none"), None).to_dict()
                for order in ((1, 0, 0), (0, 0, 1))]


def _figures(correlation: Correlation, checks: list[dict]) -> list[dict]:
    return [
        lag_bar_figure(correlation, [12]),
        line_figure(["2024-01-01", "2024-01-02"], [0.0, 1.0], "value"),
        forecast_figure(checks[0]["plot"], 48),
        comparison_figure(checks, [c["label"] for c in checks], 48),
    ]


def _axes(fig: dict) -> list[dict]:
    return [v for k, v in fig["layout"].items() if k.startswith(("xaxis", "yaxis"))]


def test_figures_are_valid_plotly_without_a_template(ar1_correlogram, ar1_checks):
    # Built as plain dicts for speed: plotly.py's own validation must still accept them.
    for fig in _figures(ar1_correlogram, ar1_checks):
        go.Figure(fig)
        # plotly.py's default template would bring its own colours and bar patterns
        assert "template" not in fig["layout"]


def test_ticks_are_plain_decimals_without_si_prefixes(ar1_correlogram, ar1_checks):
    """plotly.js writes 0.0005 as "500µ" by default (exponentformat "B", SI prefixes); every
    axis asks for plain numbers with thousands separators instead, and no tickformat brings
    the SI type ("s") back."""
    for fig in _figures(ar1_correlogram, ar1_checks):
        for axis in _axes(fig):
            assert axis["exponentformat"] == "none" and axis["separatethousands"] is True
            assert "s" not in axis.get("tickformat", "")


def test_backgrounds_are_transparent_so_the_page_scheme_shows(ar1_correlogram, ar1_checks):
    for fig in _figures(ar1_correlogram, ar1_checks):
        assert fig["layout"]["paper_bgcolor"] == fig["layout"]["plot_bgcolor"] == "rgba(0, 0, 0, 0)"


def test_comparison_draws_each_check_in_its_own_panel_on_shared_axes(ar1_checks):
    names = [f"{c['label']} · MASE {c['mase']:.3f}" for c in ar1_checks]
    fig = comparison_figure(ar1_checks, names, 48)
    layout = fig["layout"]
    assert layout["xaxis2"]["matches"] == "x" and layout["yaxis2"]["matches"] == "y"
    top, bottom = layout["yaxis"]["domain"], layout["yaxis2"]["domain"]
    assert bottom[1] < top[0]  # stacked, not overlapping
    for i, (check, name, colours) in enumerate(zip(ar1_checks, names, COMPARED_COLOURS)):
        axis = "y" if i == 0 else f"y{i + 1}"
        lines = [t for t in fig["data"] if t.get("name") == name and t["yaxis"] == axis]
        holdout, ahead = lines
        assert holdout["y"] == pytest.approx(check["plot"]["holdout"]["forecast"])
        assert ahead["y"] == pytest.approx(check["plot"]["ahead"]["forecast"])
        assert holdout["line"]["color"] == ahead["line"]["color"] == colours.line
        # one legend entry per model (its holdout line), every trace of the model in its group
        assert [t["showlegend"] for t in fig["data"] if t.get("legendgroup") == name].count(True) == 1
        assert any(a["text"] == check["label"] and a["yref"] == f"{axis} domain" for a in layout["annotations"])
    observed = [t for t in fig["data"] if t["name"] == "observed"]
    assert len(observed) == 2 and observed[0]["y"] == observed[1]["y"] == ar1_checks[0]["plot"]["history"]["values"][-48:]


@pytest.mark.parametrize(("value", "shown"), [
    (0.0, "< 0.001"), (0.00049, "< 0.001"), (0.000999, "< 0.001"), (0.001, "0.001"), (0.0123, "0.012"),
    (0.5, "0.500"), (1.0, "> 0.999"), (None, "—"), (math.nan, "—"),
])
def test_p_values_below_a_thousandth_read_as_less_than_never_zero(value, shown):
    assert p_value(value) == shown


@pytest.mark.parametrize(("share", "shown"), [(0.8857142857, "89%"), (1.0, "100%"), (0.0, "0%"), (None, "—")])
def test_shares_read_as_whole_percentages(share, shown):
    assert percent(share) == shown
