"""The record of each bulk approval: which series it approved and at which verdict version, so
that it can be undone while none of them has changed since.

``bulk_approvals`` holds one row per approval (when, who, the note, the queue filter as JSON,
and when and by whom it was undone); ``bulk_approved`` one row per series it approved, with the
verdict version the approval gave it.
"""

from __future__ import annotations

import json

import sqlite_utils

from app.core.errors import LagdeskError
from app.store.database import utc_now, write_transaction


class UnknownBulkApproval(LagdeskError):
    """A bulk approval id that the database does not hold."""

    http_status = 404

    def __init__(self, bulk_id: int) -> None:
        self.bulk_id = bulk_id
        super().__init__(f"no bulk approval {bulk_id}")


# A bulk approval can be undone while it is not undone yet and every series it approved is still
# at the version it gave them (nothing decided, reopened or re-checked since).
_UNDOABLE_SQL = (
    "b.undone_at IS NULL AND NOT EXISTS (SELECT 1 FROM bulk_approved i JOIN verdicts v ON v.series_id = i.series_id "
    "WHERE i.bulk_id = b.bulk_id AND v.version != i.version)"
)


def record_bulk_approval(
    db: sqlite_utils.Database, reviewer: str, note: str, filter_params: dict, approved: dict[str, int]
) -> int:
    """Keep a bulk approval: ``approved`` maps each series it approved to the verdict version the
    approval gave it. Returns the new id."""
    with write_transaction(db):
        cursor = db.execute(
            "INSERT INTO bulk_approvals (at, reviewer, note, filter) VALUES (?, ?, ?, ?)",
            [utc_now(), reviewer, note, json.dumps(filter_params, sort_keys=True)],
        )
        bulk_id = int(cursor.lastrowid or 0)
        db.conn.executemany(
            "INSERT INTO bulk_approved (bulk_id, series_id, version) VALUES (?, ?, ?)",
            [(bulk_id, series_id, version) for series_id, version in approved.items()],
        )
    return bulk_id


def get_bulk_approval(db: sqlite_utils.Database, bulk_id: int) -> dict:
    """A bulk approval: ``bulk_id``, ``at``, ``reviewer``, ``note``, ``filter`` (query parameters),
    ``undone_at``, ``undone_by``, ``approved`` (``{series_id: version}`` in id order),
    ``changed`` (the ids whose verdict moved since, in id order) and ``undoable``.

    Raises
    ------
    UnknownBulkApproval
    """
    row = db.execute(
        f"SELECT b.bulk_id, b.at, b.reviewer, b.note, b.filter, b.undone_at, b.undone_by, {_UNDOABLE_SQL} "
        "FROM bulk_approvals b WHERE b.bulk_id = ?",
        [bulk_id],
    ).fetchone()
    if row is None:
        raise UnknownBulkApproval(bulk_id)
    items = db.execute(
        "SELECT i.series_id, i.version, v.version FROM bulk_approved i JOIN verdicts v ON v.series_id = i.series_id "
        "WHERE i.bulk_id = ? ORDER BY i.series_id",
        [bulk_id],
    ).fetchall()
    return {
        "bulk_id": row[0], "at": row[1], "reviewer": row[2], "note": row[3], "filter": json.loads(row[4]),
        "undone_at": row[5], "undone_by": row[6],
        "approved": {series_id: version for series_id, version, _ in items},
        "changed": [series_id for series_id, version, now in items if now != version],
        "undoable": bool(row[7]) and bool(items),
    }


def latest_undoable(db: sqlite_utils.Database) -> dict | None:
    """The most recent bulk approval that can still be undone (see :func:`get_bulk_approval`), or None."""
    row = db.execute(
        f"SELECT b.bulk_id FROM bulk_approvals b WHERE {_UNDOABLE_SQL} "
        "AND EXISTS (SELECT 1 FROM bulk_approved i WHERE i.bulk_id = b.bulk_id) ORDER BY b.bulk_id DESC LIMIT 1"
    ).fetchone()
    return None if row is None else get_bulk_approval(db, row[0])


def mark_undone(db: sqlite_utils.Database, bulk_id: int, reviewer: str) -> None:
    """Record that the bulk approval was undone, when and by whom."""
    db.execute("UPDATE bulk_approvals SET undone_at = ?, undone_by = ? WHERE bulk_id = ?", [utc_now(), reviewer, bulk_id])
