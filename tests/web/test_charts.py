"""Chart figures: one bar per lag, the band drawn as a shaded area, seasonal lags marked."""

from __future__ import annotations

import math

import numpy as np
import plotly.graph_objects as go
import pytest
from statsmodels.tsa.stattools import acf

from app.core.analysis import Correlation
from app.core.correlogram import correlogram
from app.web.charts import BAND_FILL, BLUE, VERMILLION, lag_bar_figure, line_figure


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


def test_figures_are_valid_plotly_without_a_template(ar1_correlogram):
    # Built as plain dicts for speed: plotly.py's own validation must still accept them.
    for fig in (lag_bar_figure(ar1_correlogram, [12]), line_figure(["2024-01-01", "2024-01-02"], [0.0, 1.0], "value")):
        go.Figure(fig)
        # plotly.py's default template would bring its own colours and bar patterns
        assert "template" not in fig["layout"]
