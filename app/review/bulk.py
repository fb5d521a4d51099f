"""Decisions on many series at once: the approval of every pending, firm suggestion in a filter
(and its undo), and parking a selection of series (or every waiting one in a filter) with one note."""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass

import sqlite_utils

from app.core.errors import LagdeskError
from app.core.vocabulary import AWAITING, Confidence, VerdictStatus
from app.review.decisions import DecisionError, approval_risks, checked_note, decide
from app.review.filters import SeriesFilter
from app.store.analyses import load_analysis
from app.store.bulk_approvals import get_bulk_approval, mark_undone, record_bulk_approval
from app.store.database import write_transaction
from app.store.series import list_series
from app.store.verdicts import StaleVersion, get_verdict, set_verdict

# What a reviewer may park in bulk: series still waiting for a decision.
WAITING = tuple(str(status) for status in AWAITING)  # as the store filters take them


def _items(db: sqlite_utils.Database, store_kwargs: dict) -> list[dict]:
    """Every series ``list_series`` finds with these arguments, in its order."""
    total, _ = list_series(db, limit=0, **store_kwargs)
    return list_series(db, limit=total, **store_kwargs)[1]


def firm_pending_ids(db: sqlite_utils.Database, flt: SeriesFilter) -> list[str]:
    """Pending series in ``flt`` whose current analysis is firm: what a bulk approval would approve."""
    target = flt.firm_pending()
    if target is None:
        return []
    return [item["series_id"] for item in _items(db, target.store_kwargs()) if item["analysis_state"] == "current"]


def _waiting(flt: SeriesFilter) -> dict | None:
    """``list_series`` arguments for the series of ``flt`` waiting for a decision; None when
    the filter asks for another status."""
    if flt.status is not None and flt.status not in WAITING:
        return None
    return {**flt.store_kwargs(), "status": [flt.status] if flt.status else list(WAITING)}


def count_waiting(db: sqlite_utils.Database, flt: SeriesFilter) -> int:
    """How many series of ``flt`` wait for a decision (pending or recheck)."""
    target = _waiting(flt)
    return 0 if target is None else list_series(db, limit=0, **target)[0]


def waiting_ids(db: sqlite_utils.Database, flt: SeriesFilter) -> list[str]:
    """Series in ``flt`` waiting for a decision (pending or recheck): what parking the filter parks."""
    target = _waiting(flt)
    return [] if target is None else [item["series_id"] for item in _items(db, target)]


def park(db: sqlite_utils.Database, series_ids: Iterable[str], reviewer: str, note: str) -> list[str]:
    """Park every series of ``series_ids`` that waits for a decision, with one note; returns the
    ids parked. Decided and already parked series are left alone, and so is one decided by
    someone else while this runs.

    Raises
    ------
    DecisionError
        When the note is empty (it says why the series wait) or too long; nothing is parked.
    UnknownSeries
        When an id names no series; nothing is parked.
    """
    note = checked_note(note)
    if not note.strip():
        raise DecisionError("parking series in bulk needs a note saying why they wait")
    verdicts = {series_id: get_verdict(db, series_id) for series_id in dict.fromkeys(series_ids)}
    parked = []
    for series_id, verdict in verdicts.items():
        if verdict["status"] not in WAITING:
            continue
        try:
            decide(db, series_id, status=VerdictStatus.PARKED, order=None, seasonal_order=None, note=note,
                   reviewer=reviewer, version=verdict["version"])
        except StaleVersion:
            continue
        parked.append(series_id)
    return parked


@dataclass(frozen=True)
class BulkApproval:
    """What a bulk approval did: its id (None when it approved nothing, and nothing was
    recorded) and the series it approved."""

    bulk_id: int | None
    approved: list[str]


class UndoRefused(LagdeskError):
    """A bulk approval that can no longer be undone: undone already, or a series of it changed since."""

    http_status = 409


# How many changed series an undo refusal names before it says "and N more".
NAMED_IN_REFUSAL = 10


def approve_firm(db: sqlite_utils.Database, flt: SeriesFilter, reviewer: str, note: str = "") -> BulkApproval:
    """Approve the suggestion of every pending, firm series in ``flt`` and record the batch, so
    that :func:`undo_bulk_approval` can reopen exactly these series.

    Each series is re-read before it is approved: one decided or re-analysed meanwhile is left
    alone, and so is a firm suggestion that a single approval would ask a note for
    (:func:`app.review.decisions.approval_risks`: firm already rules out a fit that did not
    converge or fails the Ljung-Box test, but not coefficients without a standard error). The
    approvals and their record are one transaction, which holds the write lock from its start:
    a verdict saved meanwhile waits for it, and a failure leaves no approval without a record
    to undo it by.

    Raises
    ------
    DecisionError
        When the note is longer than :data:`app.review.decisions.MAX_NOTE_LENGTH`.
    """
    note = checked_note(note)
    approved: dict[str, int] = {}
    with write_transaction(db):
        for series_id in firm_pending_ids(db, flt):
            verdict = get_verdict(db, series_id)
            analysis = load_analysis(db, series_id)
            if verdict["status"] != VerdictStatus.PENDING or analysis is None or analysis.confidence != Confidence.FIRM:
                continue
            if approval_risks(analysis.suggested, analysis.flags):
                continue
            suggested = analysis.suggested.order
            saved = set_verdict(
                db, series_id, status=VerdictStatus.APPROVED, order=list(suggested.order),
                seasonal_order=list(suggested.seasonal_order), transform=analysis.transform.to_json(),
                trend=suggested.trend, note=note, reviewer=reviewer, version=verdict["version"],
            )
            approved[series_id] = saved["version"]
        bulk_id = record_bulk_approval(db, reviewer, note, flt.params(), approved) if approved else None
    return BulkApproval(bulk_id, list(approved))


def undo_bulk_approval(db: sqlite_utils.Database, bulk_id: int, reviewer: str, note: str = "") -> list[str]:
    """Reopen (``pending``) every series bulk approval ``bulk_id`` approved, all or none; returns their ids.

    Allowed while the approval is not undone yet and each of its series is still at the
    verdict version the approval gave it. The history keeps the approval and the reopening.

    Raises
    ------
    UnknownBulkApproval
        When there is no such bulk approval.
    UndoRefused
        When it was undone already, or series changed since (the message names them); nothing
        is changed.
    """
    note = checked_note(note)
    with write_transaction(db):
        record = get_bulk_approval(db, bulk_id)
        if record["undone_at"]:
            raise UndoRefused(f"bulk approval {bulk_id} was undone already ({record['undone_at']} by {record['undone_by']})")
        changed = record["changed"]
        if changed:
            named = ", ".join(repr(series_id) for series_id in changed[:NAMED_IN_REFUSAL])
            more = f" and {len(changed) - NAMED_IN_REFUSAL} more" if len(changed) > NAMED_IN_REFUSAL else ""
            raise UndoRefused(
                f"bulk approval {bulk_id} cannot be undone: {len(changed)} of its {len(record['approved'])} series "
                f"changed since ({named}{more}); reopen the others one by one"
            )
        for series_id, version in record["approved"].items():
            set_verdict(db, series_id, status=VerdictStatus.PENDING, order=None, seasonal_order=None,
                        note=note or f"undo of bulk approval {bulk_id}", reviewer=reviewer, version=version)
        mark_undone(db, bulk_id, reviewer)
    return list(record["approved"])
