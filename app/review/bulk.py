"""Decisions on many series at once: the approval of every pending, firm suggestion in a filter."""

from __future__ import annotations

import sqlite_utils

from app.core.vocabulary import Confidence, VerdictStatus
from app.review.decisions import checked_note
from app.review.filters import SeriesFilter
from app.store.analyses import load_analysis
from app.store.series import list_series
from app.store.verdicts import get_verdict, set_verdict


def firm_pending_ids(db: sqlite_utils.Database, flt: SeriesFilter) -> list[str]:
    """Pending series in ``flt`` whose current analysis is firm: what a bulk approval would approve."""
    target = flt.firm_pending()
    if target is None:
        return []
    total, _ = list_series(db, limit=0, **target.store_kwargs())
    _, items = list_series(db, limit=total, **target.store_kwargs())
    return [item["series_id"] for item in items if item["analysis_state"] == "current"]


def approve_firm(db: sqlite_utils.Database, flt: SeriesFilter, reviewer: str, note: str = "") -> list[str]:
    """Approve the suggestion of every pending, firm series in ``flt``; returns the ids approved.

    Each series is re-read before it is approved: one decided or re-analysed meanwhile is left alone.

    Raises
    ------
    DecisionError
        When the note is longer than :data:`app.review.decisions.MAX_NOTE_LENGTH`.
    """
    checked_note(note)
    approved = []
    for series_id in firm_pending_ids(db, flt):
        verdict = get_verdict(db, series_id)
        analysis = load_analysis(db, series_id)
        if verdict["status"] != VerdictStatus.PENDING or analysis is None or analysis.confidence != Confidence.FIRM:
            continue
        suggested = analysis.suggested.order
        set_verdict(
            db, series_id, status=VerdictStatus.APPROVED, order=list(suggested.order),
            seasonal_order=list(suggested.seasonal_order), transform=analysis.transform.to_json(),
            note=note, reviewer=reviewer, version=verdict["version"],
        )
        approved.append(series_id)
    return approved
