"""Server-rendered sparklines: thinned without losing spikes, scaled to the box."""

from __future__ import annotations

import re

import numpy as np

from app.web.sparkline import BUCKETS, HEIGHT, PAD, WIDTH, envelope, sparkline_svg


def points(svg: str) -> list[tuple[float, float]]:
    (text,) = re.findall(r'points="([^"]*)"', svg)
    return [tuple(map(float, p.split(","))) for p in text.split()]


def test_short_series_keeps_every_point():
    assert envelope(np.arange(10.0)).tolist() == list(range(10))


def test_long_series_is_thinned_but_keeps_its_extremes():
    rng = np.random.default_rng(3)
    y = rng.normal(size=5000)
    y[1234], y[4321] = 40.0, -40.0
    kept = envelope(y)
    assert len(kept) <= 2 * BUCKETS
    assert 1234 in kept and 4321 in kept
    assert list(kept) == sorted(kept)


def test_svg_spans_the_box_and_puts_high_values_at_the_top():
    svg = str(sparkline_svg([0.0, 1.0, 2.0, 3.0]))
    xy = points(svg)
    assert xy[0][0] == PAD and xy[-1][0] == WIDTH - PAD
    assert xy[0][1] == HEIGHT - PAD and xy[-1][1] == PAD  # SVG y grows downwards


def test_constant_and_missing_values():
    flat = points(str(sparkline_svg([5.0, 5.0, 5.0])))
    assert {y for _, y in flat} == {HEIGHT / 2}
    gappy = points(str(sparkline_svg([1.0, np.nan, 3.0])))
    assert len(gappy) == 2
    assert "polyline" not in str(sparkline_svg([np.nan]))
