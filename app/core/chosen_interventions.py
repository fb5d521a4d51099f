"""Interventions a reviewer chose: placed by time stamp, and kept at their time stamps.

The engine finds outliers and level shifts itself (:mod:`app.core.interventions`); a reviewer
may know better: a spike that was a real sale, a promotion the statistics missed, a
recalibration logged on a known day. The reviewer names each intervention by its time stamp and
kind; this module checks them against the series, and
:func:`app.core.interventions.sized_interventions` estimates their sizes the way the engine
estimates its own in stage II of Chen & Liu (1993): one regression column per intervention,
passed through the Kalman filter of the exact likelihood together with the chosen order, so that
the sizes are generalised least squares within the maximum-likelihood fit. Nothing is dropped
for being insignificant: the reviewer asked for it, and its ``t`` says how well the data support
it.

References
----------
.. [1] Chen, C. & Liu, L.-M. (1993). Joint estimation of model parameters and outlier effects
   in time series. *Journal of the American Statistical Association* 88, 284-297, §3.
.. [2] Box, G.E.P. & Tiao, G.C. (1975). Intervention analysis with applications to economic
   and environmental problems. *JASA* 70, 70-79.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd

from app.core.analysis import Intervention
from app.core.errors import OrderError
from app.core.interventions import MAX_SHARE
from app.core.prepare import moment, moment_in
from app.core.vocabulary import InterventionKind

KINDS = ", ".join(str(k) for k in InterventionKind)


def place_interventions(
    series_id: str, index: pd.Index, values: np.ndarray, chosen: Sequence[Mapping[str, object]]
) -> list[tuple[int, InterventionKind]]:
    """Where each chosen intervention falls: ``(position, kind)`` in time order.

    Each item of ``chosen`` has a ``timestamp`` (as the series writes its times, e.g.
    ``2024-03-01`` or ``2024-03-01 14:00``) and a ``kind`` (``additive``, ``level_shift``,
    ``temporary_change``).

    Raises
    ------
    OrderError
        Naming the series and the item: an unknown kind, a time the series does not have, a
        missing value there, the same time and kind twice, or more than :data:`MAX_SHARE` of
        the points.
    """
    placed: dict[tuple[int, InterventionKind], None] = {}
    for item in chosen:
        stamp, kind_text = str(item.get("timestamp", "")).strip(), str(item.get("kind", "")).strip()
        try:
            kind = InterventionKind(kind_text)
        except ValueError:
            raise OrderError(f"series {series_id!r}: intervention kind must be one of {KINDS}, not {kind_text!r}") from None
        position = _position(series_id, index, stamp)
        if np.isnan(values[position]):
            raise OrderError(f"series {series_id!r}: {stamp} is a missing value; an intervention needs an observed point")
        if (position, kind) in placed:
            raise OrderError(f"series {series_id!r}: the {kind.words()} at {stamp} is given twice")
        placed[(position, kind)] = None
    room = max(1, int(MAX_SHARE * len(index)))
    if len(placed) > room:
        raise OrderError(f"series {series_id!r}: {len(placed)} interventions is more than {room} "
                         f"({MAX_SHARE:.0%} of the {len(index)} points); a series that needs so many is not an ARIMA series")
    return sorted(placed, key=lambda pk: pk[0])


def _position(series_id: str, index: pd.Index, stamp: str) -> int:
    """The position of the time ``stamp`` in ``index``."""
    if not stamp:
        raise OrderError(f"series {series_id!r}: an intervention needs a time stamp")
    try:
        key: object = pd.Timestamp(stamp) if isinstance(index, pd.DatetimeIndex) else int(stamp)
        found = index.get_loc(key)
    except (KeyError, ValueError, TypeError):
        raise OrderError(
            f"series {series_id!r}: {stamp!r} is not a time of this series ({moment_in(index, 0)} to {moment_in(index, -1)})"
        ) from None
    if not isinstance(found, (int, np.integer)):
        raise OrderError(f"series {series_id!r}: {stamp!r} names more than one point; give the full time")
    return int(found)


def _written(stamp: object, text: str) -> bool:
    """Whether ``text`` is how :func:`app.core.prepare.moment_in` writes ``stamp``, with or
    without a midnight time (results stored before an hourly series' midnights kept theirs)."""
    return text in (moment(stamp), moment(stamp, time_of_day=True))


def relocated(series_id: str, index: pd.Index, interventions: Sequence[Intervention]) -> list[Intervention]:
    """Stored interventions on the series' present time index: each kept at its time stamp,
    which a change of the data before it (an earlier start) moves to another position.

    Raises
    ------
    OrderError
        When the series no longer has one of the times.
    """
    out = []
    for found in interventions:
        if found.position < len(index) and _written(index[found.position], found.timestamp):
            out.append(found)
            continue
        matches = [k for k, stamp in enumerate(index) if _written(stamp, found.timestamp)]
        if not matches:
            raise OrderError(f"series {series_id!r}: the {found.kind.words()} decided at {found.timestamp} "
                             "is no longer a time of this series")
        out.append(Intervention(matches[0], found.timestamp, found.kind, found.size, found.t_stat))
    return out
