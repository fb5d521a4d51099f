"""Tiny inline SVG sparklines for the queue, drawn on the server (no chart library per row)."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from markupsafe import Markup

WIDTH = 120
HEIGHT = 22
BUCKETS = 40
PAD = 1.5


def envelope(values: Sequence[float] | np.ndarray, buckets: int = BUCKETS) -> np.ndarray:
    """Indices of the points to draw: in each of ``buckets`` equal stretches of time, the lowest
    and the highest value (in time order), so spikes survive the thinning. NaNs are skipped."""
    y = np.asarray(values, dtype=float)
    finite = np.flatnonzero(np.isfinite(y))
    if finite.size <= 2 * buckets:
        return finite
    group = np.arange(finite.size) * buckets // finite.size
    order = np.lexsort((y[finite], group))  # by stretch, then by value within it
    starts = np.searchsorted(group[order], np.arange(buckets))
    ends = np.append(starts[1:], finite.size) - 1
    return np.unique(finite[np.concatenate([order[starts], order[ends]])])


def sparkline_svg(values: Sequence[float], width: int = WIDTH, height: int = HEIGHT) -> Markup:
    """An ``<svg>`` polyline of ``values`` scaled to the box (flat for a constant series)."""
    y = np.asarray(values, dtype=float)
    picked = envelope(y)
    if picked.size < 2:
        return Markup(f'<svg class="spark" width="{width}" height="{height}" aria-hidden="true"></svg>')
    span = max(int(np.flatnonzero(np.isfinite(y))[-1]), 1)
    low, high = float(y[picked].min()), float(y[picked].max())
    scale = (height - 2 * PAD) / (high - low) if high > low else 0.0
    xs = PAD + picked / span * (width - 2 * PAD)
    ys = height / 2 if scale == 0 else height - PAD - (y[picked] - low) * scale
    ys = np.broadcast_to(ys, xs.shape)
    points = " ".join(f"{a:.1f},{b:.1f}" for a, b in zip(xs, ys))
    return Markup(
        f'<svg class="spark" width="{width}" height="{height}" viewBox="0 0 {width} {height}" aria-hidden="true">'
        f'<polyline points="{points}" fill="none" stroke="currentColor" stroke-width="1.2"/></svg>'
    )
