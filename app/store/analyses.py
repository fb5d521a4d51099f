"""Stored analyses: the engine's result per series, kept until the next one replaces it.

The result dict is stored as JSON text, exactly as the engine returned it, in
``analysis_results``; ``analyses`` holds the state and the few summary columns (confidence,
flags, suggested orders, d) that the dashboard filters and sorts on without reading results.
An analysis records the fingerprint of the data it was run on: it is *current* while that
equals the series' fingerprint and *stale* once new data changed it. A failure is stored too,
with its message, so a run does not retry it forever.
"""

from __future__ import annotations

import json

import sqlite_utils

from app.core.errors import LagdeskError
from app.store.database import require_series, utc_now, write_transaction

CONFIDENCE_LEVELS = ("weak", "tentative", "firm")
ANALYSIS_STATES = ("current", "stale", "failed", "missing")

# The state of a series' analysis, for a query over ``series s LEFT JOIN analyses a``.
ANALYSIS_STATE_SQL = (
    "CASE WHEN a.series_id IS NULL THEN 'missing' "
    "WHEN a.fingerprint <> s.fingerprint THEN 'stale' "
    "WHEN a.state = 'failed' THEN 'failed' ELSE 'current' END"
)


def save_analysis(db: sqlite_utils.Database, series_id: str, fingerprint: str, result: dict, run_id: int | None) -> None:
    """Store the engine's result for a series, replacing any earlier analysis of it.

    Parameters
    ----------
    fingerprint : str
        The fingerprint of the data that was analysed (read before the series was loaded).
    result : dict
        ``Identification.to_dict()``; read back unchanged by :func:`load_analysis`.

    Raises
    ------
    LagdeskError
        When the result lacks a summary field or names another series.
    UnknownSeries
        When the database holds no such series.
    """
    summary = _summary(series_id, result)
    text = json.dumps(result)
    with write_transaction(db):
        _store(db, series_id, fingerprint, run_id, state="complete", **summary)
        db["analysis_results"].insert({"series_id": series_id, "result": text}, replace=True)


def save_failure(db: sqlite_utils.Database, series_id: str, fingerprint: str, message: str, run_id: int | None) -> None:
    """Store that the analysis of a series failed, with the reason, replacing any earlier one."""
    with write_transaction(db):
        _store(db, series_id, fingerprint, run_id, state="failed", message=str(message))
        db.execute("DELETE FROM analysis_results WHERE series_id = ?", [series_id])


def _store(db: sqlite_utils.Database, series_id: str, fingerprint: str, run_id: int | None, **columns) -> None:
    """Write the ``analyses`` row (state and summary), replacing any earlier one."""
    require_series(db, series_id)
    db["analyses"].insert({
        "series_id": series_id,
        "fingerprint": fingerprint,
        "message": None,
        "confidence": None,
        "flags": "[]",
        "suggested_order": None,
        "suggested_seasonal_order": None,
        "d": None,
        "engine_version": None,
        "run_id": run_id,
        "analysed_at": utc_now(),
        **columns,
    }, replace=True)


def _summary(series_id: str, result: dict) -> dict:
    try:
        confidence = result["confidence"]
        flags = list(result["flags"])
        order = list(result["suggested"]["order"])
        seasonal = list(result["suggested"]["seasonal_order"])
        d = int(result["d"])
    except (KeyError, TypeError, ValueError) as exc:
        raise LagdeskError(f"series {series_id!r}: the analysis result has no usable {exc} field") from None
    if result.get("series_id", series_id) != series_id:
        raise LagdeskError(f"series {series_id!r}: the analysis result is for series {result['series_id']!r}")
    if confidence not in CONFIDENCE_LEVELS:
        raise LagdeskError(
            f"series {series_id!r}: confidence must be one of {', '.join(CONFIDENCE_LEVELS)}, not {confidence!r}"
        )
    return {
        "confidence": confidence,
        "flags": json.dumps(flags),
        "suggested_order": json.dumps(order),
        "suggested_seasonal_order": json.dumps(seasonal),
        "d": d,
        "engine_version": result.get("engine_version"),
    }


def load_analysis(db: sqlite_utils.Database, series_id: str) -> dict | None:
    """The stored result dict of a series (current or stale), or None without a complete one."""
    row = db.execute("SELECT result FROM analysis_results WHERE series_id = ?", [series_id]).fetchone()
    return None if row is None else json.loads(row[0])


def analysis_record(db: sqlite_utils.Database, series_id: str) -> dict:
    """What is known about a series' analysis, without the result itself.

    Returns ``{"state": "current"|"stale"|"failed"|"missing", "message", "fingerprint",
    "run_id", "analysed_at", "engine_version"}`` (``message`` holds a failure's reason).

    Raises
    ------
    UnknownSeries
        When the database holds no such series.
    """
    rows = list(db.query(
        f"SELECT {ANALYSIS_STATE_SQL} AS state, a.message, a.fingerprint, a.run_id, a.analysed_at, "
        "a.engine_version FROM series s LEFT JOIN analyses a ON a.series_id = s.series_id "
        "WHERE s.series_id = ?",
        [series_id],
    ))
    if not rows:
        require_series(db, series_id)
    return rows[0]
