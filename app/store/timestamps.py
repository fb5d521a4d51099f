"""How timestamps are stored: ISO-8601 text for dates and times, integers for plain steps.

Text keys use one spelling per instant (``2024-03-01T00:00:00``, with a fraction only when
the instant has one), so the same timestamp read from two files matches the same stored row,
and text order is time order.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

DATETIME = "datetime"
INTEGER = "integer"


def time_kind(index: pd.Index) -> str:
    """``datetime`` for a DatetimeIndex, ``integer`` for integer steps."""
    return DATETIME if isinstance(index, pd.DatetimeIndex) else INTEGER


def timestamp_keys(index: pd.Index) -> list:
    """The stored form of each timestamp: ISO text or a Python int."""
    if not isinstance(index, pd.DatetimeIndex):
        return [int(step) for step in index]
    instants = index.to_numpy(dtype="datetime64[ns]")
    keys = np.datetime_as_string(instants, unit="s").astype(object)
    fractional = instants != instants.astype("datetime64[s]")
    for i in np.flatnonzero(fractional):
        keys[i] = pd.Timestamp(instants[i]).isoformat()
    return keys.tolist()


def stored_form(text: str) -> str:
    """The stored spelling of a time stamp as a reader writes it (``2013-12-31``,
    ``2013-12-31 23:00``; :func:`app.core.prepare.moment`): ISO text for a date or time, the whole
    number as it is for a plain step. The export writes every time stamp so, beside
    ``last_timestamp``."""
    if text.lstrip("-").isdigit():
        return text
    return str(timestamp_keys(pd.DatetimeIndex([pd.Timestamp(text)]))[0])


def index_from_keys(keys: list, kind: str) -> pd.Index:
    """The pandas index for stored timestamps of the given kind."""
    if kind == DATETIME:
        return pd.DatetimeIndex(pd.to_datetime(keys, format="ISO8601"), name="timestamp")
    return pd.Index(np.asarray(keys, dtype=np.int64), name="timestamp")
