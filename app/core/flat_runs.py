"""Runs of one repeated value: a stuck sensor, a frozen feed, values carried forward.

A sensor that stops updating, or a feed that fills a gap by carrying the last value forward,
leaves a run of identical values. The model is fitted to them as if they were observed, and
nothing else in the analysis names them: the run looks like a calm stretch. For a channel that
feeds safety monitoring it is the first thing a reviewer must be told.

How long a run must be depends on how often the series repeats a value anyway: readings of a
continuous quantity written to many digits almost never do, counts and coarsely rounded
readings often do. The longest run of consecutive observed points with one value ``v``, ``L``
points long, is judged against the rate ``p`` at which the series itself would continue a run
of ``v``, the larger of two estimates taken outside that run: the share of consecutive
observed pairs whose values are equal, and the share of observed points that equal ``v``, each
with Laplace's rule of succession, ``(k + 1) / (m + 2)`` for ``k`` of ``m`` (common practice: a
series with no other repeat still has a rate above zero). The first is the chance that two
neighbours agree, which takes in how much a rounded autocorrelated series lingers; the second
is the chance that a point is ``v`` at all, which is what a run of ``v`` continues with when
values come independently: for the commonest value it is the larger, since the first is
``sum P(u)^2`` there. With the first alone, runs of zeros in smooth demand (a demand in five
periods of six) were flagged in 15-20% of simulated series at n = 120-240, and runs of the
modal value of rounded white noise in 7-9% (a review; seeded, 1,000 series a cell). The share
of ``v`` among points, not among pairs that start at ``v``: a stuck stretch split by a gap
would make the second half evidence that the series stays at ``v``. If the run went on at rate
``p``, a run of at least ``L`` points would start at a given point with probability
``p^(L-1)``; over the ``n`` points where one could start, the run is flagged when
``n p^(L-1)`` is below :data:`FAMILY_LEVEL` (the Bonferroni bound, Dunn 1961), and when it is
at least :data:`MIN_RUN` points long. A run that passes the bound is far beyond what the
series' own rounding and its own frequency of that value explain. In sparse demand (intermittent or lumpy,
:func:`app.core.demand.classify_demand`) a run of zeros is a stretch without demand, not a
repeated reading, and is not counted; the rate of repeats is then that of a demand followed by
the same demand, among the pairs that start with a demand (counted among all pairs, the
stretches without demand diluted it, and chance runs of 6-8 equal unit demands were flagged
in a third of simulated intermittent series). A smooth or erratic demand, or a sensor whose
values happen to be at or above zero, keeps its runs of zeros: a reading stuck at 0 is the
commonest sign of a dead sensor.

References
----------
.. [1] Dunn, O.J. (1961). Multiple comparisons among means. *JASA* 56, 52-64.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from app.core.prepare import moment_in

FAMILY_LEVEL = 0.05
MIN_RUN = 3


@dataclass(frozen=True)
class FlatRun:
    """The longest run of one value in a series: where it starts and ends, its value and length,
    and the series' rate of repeats outside it."""

    start: int
    end: int
    value: float
    length: int
    repeat_rate: float
    first: str
    last: str

    def words(self) -> str:
        return (f"The value {self.value:g} repeats over {self.length} consecutive points, from {self.first} to "
                f"{self.last}; elsewhere the series repeats a value between neighbouring points {self.repeat_rate:.1%} "
                "of the time. A stuck sensor, a frozen feed, values carried forward over a gap, or a quantity that "
                "truly did not change? The model treats them as observed: check the source before deciding, for a "
                "channel that feeds safety monitoring under the site's procedures.")

    def doubt(self) -> str:
        return f"{self.length} equal values ({self.value:g}) from {self.first} to {self.last}"


def longest_flat_run(values: np.ndarray, index: pd.Index, demand: bool = False) -> FlatRun | None:
    """The longest run of consecutive observed points with one value, when it is too long for
    the series' own rate of repeats (module notes); None otherwise.

    Parameters
    ----------
    values : ndarray
        The series on its regular grid, NaN where a point is missing (a gap ends a run).
    index : pandas.Index
        Its time index, to say where the run lies.
    demand : bool
        Whether the series is sparse demand: its runs of zeros are left out, and its rate of
        repeats is counted among the pairs that start with a demand (module notes).
    """
    y = np.asarray(values, dtype=float)
    if y.size < MIN_RUN:
        return None
    pairs = ~np.isnan(y[1:]) & ~np.isnan(y[:-1])
    equal = pairs & (y[1:] == y[:-1])
    if demand:
        equal &= y[1:] != 0.0
        pairs &= y[:-1] != 0.0
    if not equal.any():
        return None
    start, stop = _longest_true_stretch(equal)  # pairs start..stop-1 are equal: points start..stop
    length = stop - start + 1
    if length < MIN_RUN:
        return None
    outside = np.ones_like(pairs)
    outside[start:stop] = False
    m, k = int(np.count_nonzero(pairs & outside)), int(np.count_nonzero(equal & outside))
    points = ~np.isnan(y)
    points[start:stop + 1] = False
    n_v = int(np.count_nonzero(points & (y == y[start])))
    rate = max((k + 1) / (m + 2), (n_v + 1) / (int(np.count_nonzero(points)) + 2))
    if y.size * math.pow(rate, length - 1) >= FAMILY_LEVEL:
        return None
    return FlatRun(start, stop, float(y[start]), length, k / m if m else 0.0, moment_in(index, start), moment_in(index, stop))


def _longest_true_stretch(flags: np.ndarray) -> tuple[int, int]:
    """``(start, stop)`` of the longest stretch of True in ``flags`` (``flags[start:stop]``), the
    first of equal ones."""
    padded = np.concatenate([[False], flags, [False]]).astype(np.int8)
    edges = np.flatnonzero(np.diff(padded))
    starts, stops = edges[::2], edges[1::2]
    longest = int(np.argmax(stops - starts))
    return int(starts[longest]), int(stops[longest])
