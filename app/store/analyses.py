"""Stored analyses: the engine's result per series, kept until the next one replaces it.

The engine's :class:`~app.core.analysis.Analysis` is stored as JSON text
(:meth:`~app.core.analysis.Analysis.to_dict`) in ``analysis_results`` and read back as an
``Analysis`` (older schema versions included); ``analyses`` holds the state and the few summary columns (confidence,
its main reason, flags, the suggested model: orders, d, transform, deterministic term and interventions) that the
dashboard shows, filters and sorts on without reading results.
An analysis records the fingerprint of the data it was run on: it is *current* while that
equals the series' fingerprint and *stale* once new data changed it. A failure is stored too,
with its message, so a run does not retry it forever. Both record the engine version that made
them (:mod:`app.core.engine_version`); one made by an earlier engine keeps its state, and is
analysed again by the next run all the same (:data:`EARLIER_ENGINE_SQL`).
"""

from __future__ import annotations

import json

import sqlite_utils

from app.core.analysis import Analysis
from app.core.engine_version import ENGINE_VERSION
from app.core.errors import LagdeskError
from app.store.database import require_series, utc_now, write_transaction

# The state of a series' analysis, for a query over ``series s LEFT JOIN analyses a``.
ANALYSIS_STATE_SQL = (
    "CASE WHEN a.series_id IS NULL THEN 'missing' "
    "WHEN a.fingerprint <> s.fingerprint THEN 'stale' "
    "WHEN a.state = 'failed' THEN 'failed' ELSE 'current' END"
)
# A stored analysis or failure that an earlier engine made (or one stored before failures
# recorded their engine), for the same join; it takes the running engine's version as its
# one parameter.
EARLIER_ENGINE_SQL = "(a.series_id IS NOT NULL AND a.engine_version IS NOT ?)"


def save_analysis(db: sqlite_utils.Database, series_id: str, fingerprint: str, analysis: Analysis, run_id: int | None) -> None:
    """Store the engine's analysis of a series, replacing any earlier one.

    Parameters
    ----------
    fingerprint : str
        The fingerprint of the data that was analysed (read before the series was loaded).
    analysis : Analysis
        Read back equal by :func:`load_analysis`.

    Raises
    ------
    LagdeskError
        When the analysis names another series.
    UnknownSeries
        When the database holds no such series.
    """
    if analysis.series_id != series_id:
        raise LagdeskError(f"series {series_id!r}: the analysis is for series {analysis.series_id!r}")
    suggested = analysis.suggested.order
    summary = {
        "confidence": str(analysis.confidence),
        "main_reason": main_reason(analysis),
        "flags": json.dumps([str(f) for f in analysis.flags]),
        "suggested_order": json.dumps(list(suggested.order)),
        "suggested_seasonal_order": json.dumps(list(suggested.seasonal_order)),
        "d": suggested.d,
        "transform": json.dumps(analysis.transform.to_json()),
        "suggested_trend": suggested.trend,
        "interventions": json.dumps([i.to_dict() for i in analysis.interventions]),
        "engine_version": analysis.engine_version,
    }
    text = json.dumps(analysis.to_dict())
    with write_transaction(db):
        _store(db, series_id, fingerprint, run_id, state="complete", **summary)
        db.table("analysis_results").insert({"series_id": series_id, "result": text}, replace=True)


def main_reason(analysis: Analysis) -> str | None:
    """The first of the analysis' confidence reasons, in the engine's words (a flag as ``flag:
    NAME``), or None when it gives none: what the queue row and ``lagdesk identify`` show."""
    return analysis.confidence_reasons[0] if analysis.confidence_reasons else None


def save_failure(db: sqlite_utils.Database, series_id: str, fingerprint: str, message: str, run_id: int | None) -> None:
    """Store that the analysis of a series failed, with the reason, replacing any earlier one."""
    with write_transaction(db):
        _store(db, series_id, fingerprint, run_id, state="failed", message=str(message), engine_version=ENGINE_VERSION)
        db.execute("DELETE FROM analysis_results WHERE series_id = ?", [series_id])


def _store(db: sqlite_utils.Database, series_id: str, fingerprint: str, run_id: int | None, **columns) -> None:
    """Write the ``analyses`` row (state and summary), replacing any earlier one."""
    require_series(db, series_id)
    db.table("analyses").insert({
        "series_id": series_id,
        "fingerprint": fingerprint,
        "message": None,
        "confidence": None,
        "main_reason": None,
        "flags": "[]",
        "suggested_order": None,
        "suggested_seasonal_order": None,
        "d": None,
        "transform": None,
        "suggested_trend": None,
        "interventions": None,
        "engine_version": None,
        "run_id": run_id,
        "analysed_at": utc_now(),
        **columns,
    }, replace=True)


def load_analysis(db: sqlite_utils.Database, series_id: str) -> Analysis | None:
    """The stored analysis of a series (current or stale), or None without a complete one.

    Raises
    ------
    LagdeskError
        When the stored result cannot be read (written by an unknown, newer schema version).
    """
    row = db.execute("SELECT result FROM analysis_results WHERE series_id = ?", [series_id]).fetchone()
    return None if row is None else analysis_from_json(series_id, row[0])


def analysis_from_json(series_id: str, text: str) -> Analysis:
    """An analysis as stored in ``analysis_results.result``.

    Raises
    ------
    LagdeskError
        Naming the series, when the text is not an analysis this version of Lagdesk reads.
    """
    try:
        return Analysis.from_dict(json.loads(text))
    except (KeyError, TypeError, ValueError) as exc:
        raise LagdeskError(f"series {series_id!r}: the stored analysis cannot be read ({type(exc).__name__}: {exc})") from None


def failed_analyses(db: sqlite_utils.Database) -> list[dict]:
    """The series whose analysis failed on their current data, by id: ``[{"series_id", "message"}]``."""
    return list(db.query(
        f"SELECT s.series_id, a.message FROM series s JOIN analyses a ON a.series_id = s.series_id "
        f"WHERE {ANALYSIS_STATE_SQL} = 'failed' ORDER BY s.series_id"
    ))


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
