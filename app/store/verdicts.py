"""Reviewer decisions: the current verdict per series, its version, and its history.

Every series gets a ``pending`` verdict at version 0 when it is first imported. Each change
raises the version by one and appends a row to the history. A change names the version it
was based on; when that is no longer the current one (another reviewer, or new data, got
there first) it is refused with :class:`StaleVersion`, so no decision is ever lost silently.

A decision records the fingerprint of the data it was made on (:func:`decision_fingerprint`):
that of the stored analysis the reviewer was shown, or of the series when there is none; and
that analysis' differencing (:func:`seen_differencing`). New
data leave the verdict alone; the next analysis refits the order and either sends the verdict
to ``recheck`` (:func:`mark_recheck`) or records that the order still holds on the new data
(:func:`confirm_on_new_data`).
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterable, Sequence

import sqlite_utils

from app.core.analysis import Intervention
from app.core.errors import LagdeskError, OrderError
from app.core.order import TRENDS
from app.core.vocabulary import DECIDED, REVIEWER_STATUSES, VerdictStatus
from app.store.database import prefix_match, require_series, utc_now, write_transaction
from app.store.migrations import SEEN_DIFFERENCING

STATUSES = tuple(VerdictStatus)
TRANSFORMS = ("none", "log")
SYSTEM_REVIEWER = "lagdesk"
NO_SEASONAL_ORDER = [0, 0, 0, 0]


class StaleVersion(LagdeskError):
    """A verdict change named a version that is no longer the current one."""

    http_status = 409

    def details(self) -> dict:
        return {"verdict": self.current}

    def __init__(self, series_id: str, named: int, current: dict) -> None:
        self.series_id = series_id
        self.named = named
        self.current = current
        super().__init__(
            f"series {series_id!r}: the verdict changed since version {named} was read "
            f"(now version {current['version']}, {current['status']}"
            + (f" by {current['reviewer']}" if current["reviewer"] else "")
            + "); reload and decide again"
        )


class InvalidVerdict(LagdeskError):
    """A verdict with a status, order or transform that cannot be stored."""


_COLUMNS = ("status, arima_order, seasonal_order, transform, note, reviewer, version, decided_at, recheck_reason, trend, "
            "interventions")


def add_pending(db: sqlite_utils.Database, series_ids: Iterable[str]) -> None:
    """Give newly imported series their first verdict: pending, version 0 (no history row)."""
    db.conn.executemany(
        "INSERT INTO verdicts (series_id, status, transform, note, reviewer, version) "
        "VALUES (?, 'pending', '\"none\"', '', '', 0)",
        [(series_id,) for series_id in series_ids],
    )


def get_verdict(db: sqlite_utils.Database, series_id: str) -> dict:
    """The current verdict of a series.

    Raises
    ------
    UnknownSeries
        When the database holds no such series.
    """
    row = db.execute(f"SELECT {_COLUMNS} FROM verdicts WHERE series_id = ?", [series_id]).fetchone()
    if row is None:
        require_series(db, series_id)
    return _verdict_from_row(row)


def _verdict_from_row(row: Sequence) -> dict:
    status, order, seasonal, transform, note, reviewer, version, decided_at, reason, trend, interventions = row
    return {
        "status": status,
        "order": _loads(order),
        "seasonal_order": _loads(seasonal),
        "transform": json.loads(transform),
        "trend": trend,
        "include_constant": None if trend is None else trend != "n",
        "interventions": _loads(interventions),
        "note": note,
        "reviewer": reviewer,
        "version": version,
        "decided_at": decided_at,
        "recheck_reason": reason,
    }


def set_verdict(
    db: sqlite_utils.Database,
    series_id: str,
    *,
    status: str,
    order: Sequence[int] | None,
    seasonal_order: Sequence[int] | None,
    transform: str | dict = "none",
    trend: str | None = None,
    interventions: Sequence[Intervention] | None = None,
    note: str = "",
    reviewer: str = "",
    version: int,
) -> dict:
    """Record a reviewer's decision, provided ``version`` is still the current one.

    ``approved`` and ``overridden`` need an order; ``pending`` and ``parked`` may leave it
    empty; ``not_arima`` has none. ``trend`` is the model's deterministic term (``n``, ``c``,
    ``t``, ``ct``; None: the term the analysis gives the order) and ``interventions`` (the
    reviewer's, sized with the order; None: the analysis' own) are stored only with an order.
    ``recheck`` is set by Lagdesk itself (:func:`mark_recheck`), not by a reviewer.

    Raises
    ------
    StaleVersion
        When the verdict is no longer at ``version``; ``.current`` holds what it is now.
    InvalidVerdict, OrderError
        When the status, transform or order cannot be stored.
    UnknownSeries
        When the database holds no such series.
    """
    if status not in REVIEWER_STATUSES:
        raise InvalidVerdict(
            f"series {series_id!r}: status must be one of {', '.join(REVIEWER_STATUSES)}, not {status!r}"
        )
    if status in DECIDED and order is None:
        raise InvalidVerdict(f"series {series_id!r}: an {status} verdict needs an order (p, d, q)")
    if status == VerdictStatus.NOT_ARIMA and order is not None:
        raise InvalidVerdict(f"series {series_id!r}: a not_arima verdict carries no order")
    if trend is not None and trend not in TRENDS:
        raise InvalidVerdict(f"series {series_id!r}: trend must be one of {', '.join(TRENDS)}, not {trend!r}")
    new_order = _checked_order(order, 3, "order", series_id)
    new_seasonal = _checked_order(seasonal_order, 4, "seasonal order", series_id)
    new_transform = _checked_transform(transform, series_id)
    if new_order is not None and new_seasonal is None:
        new_seasonal = list(NO_SEASONAL_ORDER)
    with write_transaction(db):
        current = get_verdict(db, series_id)
        decided_at = utc_now() if status != "pending" else None
        seen = _fingerprint_seen(db, series_id) if status != "pending" else None
        updated = db.execute(
            "UPDATE verdicts SET status = ?, arima_order = ?, seasonal_order = ?, transform = ?, note = ?, "
            "reviewer = ?, version = version + 1, decided_at = ?, recheck_reason = NULL, data_sha256 = ?, trend = ?, "
            f"interventions = ?, seen_differencing = ({SEEN_DIFFERENCING}) WHERE series_id = ? AND version = ?",
            [status, _dumps(new_order), _dumps(new_seasonal), json.dumps(new_transform),
             str(note), str(reviewer), decided_at, seen, trend if new_order is not None else None,
             _dumps([i.to_dict() for i in interventions]) if interventions is not None and new_order is not None else None,
             series_id, version],
        )
        if updated.rowcount != 1:
            raise StaleVersion(series_id, version, current)
        _append_history(db, series_id, current["status"])
        return get_verdict(db, series_id)


def mark_recheck(db: sqlite_utils.Database, series_id: str, reason: str) -> None:
    """Ask for another look at an approved or overridden series, keeping its order.

    Other statuses are left as they are: a pending or parked series is still to be decided,
    and one already marked for recheck keeps its first reason.

    Raises
    ------
    UnknownSeries
        When the database holds no such series.
    """
    with write_transaction(db):
        current = get_verdict(db, series_id)
        if current["status"] not in DECIDED:
            return
        db.execute(
            "UPDATE verdicts SET status = 'recheck', recheck_reason = ?, version = version + 1 "
            "WHERE series_id = ?",
            [reason, series_id],
        )
        _append_history(db, series_id, current["status"], reviewer=SYSTEM_REVIEWER, note=reason)


def add_to_recheck_reason(db: sqlite_utils.Database, series_ids: list[str], words: str) -> None:
    """Append ``words`` to the reason of those of ``series_ids`` waiting for a re-check: a reason
    that names data no longer stored (an import's refusal, since corrected) is not left alone
    to say so. Inside the caller's transaction; the status and version stay."""
    db.conn.executemany("UPDATE verdicts SET recheck_reason = recheck_reason || ? WHERE series_id = ? AND status = 'recheck'",
                        [(f"; {words}", series_id) for series_id in series_ids])


def confirm_on_new_data(db: sqlite_utils.Database, series_id: str, data_sha256: str, note: str, version: int) -> bool:
    """Record that an approved or overridden order still holds on new data.

    The verdict keeps its status, order, reviewer and note; its data fingerprint becomes
    ``data_sha256`` and the history gets a row by Lagdesk with ``note``. Nothing happens (and
    False is returned) when the verdict is no longer at ``version`` or no longer decided: a
    reviewer got there first.
    """
    with write_transaction(db):
        current = get_verdict(db, series_id)
        if current["version"] != version or current["status"] not in DECIDED:
            return False
        db.execute(
            f"UPDATE verdicts SET data_sha256 = ?, seen_differencing = ({SEEN_DIFFERENCING}), version = version + 1 "
            "WHERE series_id = ?",
            [data_sha256, series_id],
        )
        _append_history(db, series_id, current["status"], reviewer=SYSTEM_REVIEWER, note=note)
    return True


def decision_fingerprint(db: sqlite_utils.Database, series_id: str) -> str | None:
    """The fingerprint of the data the series' verdict was decided (or last confirmed) on;
    None for a series never decided."""
    row = db.execute("SELECT data_sha256 FROM verdicts WHERE series_id = ?", [series_id]).fetchone()
    if row is None:
        require_series(db, series_id)
    return row[0]


def seen_differencing(db: sqlite_utils.Database, series_id: str) -> tuple[int, int] | None:
    """The differencing (d, D) of the analysis the series' verdict was decided (or last confirmed)
    on; None when it was decided without an analysis, or before Lagdesk kept it."""
    row = db.execute("SELECT seen_differencing FROM verdicts WHERE series_id = ?", [series_id]).fetchone()
    if row is None:
        require_series(db, series_id)
    if row[0] is None:
        return None
    d, D = json.loads(row[0])
    return int(d), int(D)


def _fingerprint_seen(db: sqlite_utils.Database, series_id: str) -> str | None:
    """The data a reviewer judged: the stored analysis' data, else the series' current data."""
    row = db.execute(
        "SELECT coalesce((SELECT fingerprint FROM analyses WHERE series_id = ?), "
        "(SELECT fingerprint FROM series WHERE series_id = ?))",
        [series_id, series_id],
    ).fetchone()
    return row[0]


def _append_history(
    db: sqlite_utils.Database, series_id: str, from_status: str, reviewer: str | None = None, note: str | None = None
) -> None:
    """Copy the verdict as it now stands into the history (optionally naming who and why)."""
    db.execute(
        "INSERT INTO verdict_history (series_id, version, at, from_status, status, arima_order, "
        "seasonal_order, transform, note, reviewer, trend, interventions) "
        "SELECT series_id, version, ?, ?, status, arima_order, seasonal_order, transform, "
        "coalesce(?, note), coalesce(?, reviewer), trend, interventions FROM verdicts WHERE series_id = ?",
        [utc_now(), from_status, note, reviewer, series_id],
    )


def sent_to_recheck(db: sqlite_utils.Database, since: str, until: str | None = None) -> list[dict]:
    """The decided verdicts Lagdesk sent back to ``recheck`` from ``since`` to ``until`` (times
    as :func:`~app.store.database.utc_now` writes them; None: until now), oldest first:
    ``{"series_id", "reason", "at"}``."""
    rows = db.execute(
        "SELECT series_id, note, at FROM verdict_history WHERE status = 'recheck' AND reviewer = ? AND at >= ? "
        "AND (? IS NULL OR at <= ?) ORDER BY at, history_id",
        [SYSTEM_REVIEWER, since, until, until],
    ).fetchall()
    return [{"series_id": series_id, "reason": note, "at": at} for series_id, note, at in rows]


def verdict_history(db: sqlite_utils.Database, series_id: str) -> list[dict]:
    """Every change of the series' verdict, oldest first."""
    rows = db.execute(
        "SELECT version, at, from_status, status, arima_order, seasonal_order, transform, note, reviewer, trend, "
        "interventions FROM verdict_history WHERE series_id = ? ORDER BY version",
        [series_id],
    ).fetchall()
    return [
        {
            "version": version,
            "at": at,
            "from_status": from_status,
            "status": status,
            "order": _loads(order),
            "seasonal_order": _loads(seasonal),
            "transform": json.loads(transform),
            "trend": trend,
            "interventions": _loads(interventions),
            "note": note,
            "reviewer": reviewer,
        }
        for version, at, from_status, status, order, seasonal, transform, note, reviewer, trend, interventions in rows
    ]


def verdict_counts(db: sqlite_utils.Database, prefix: str | None = None) -> dict[str, int]:
    """How many series (those whose id starts with ``prefix``, when given) hold each status
    (every status present, zero when unused)."""
    counts = dict.fromkeys((str(s) for s in STATUSES), 0)
    where, params = prefix_match("series_id", prefix)
    counts.update(db.execute(f"SELECT status, count(*) FROM verdicts WHERE {where} GROUP BY status", params).fetchall())
    return counts


def _checked_order(order: Sequence[int] | None, length: int, what: str, series_id: str) -> list[int] | None:
    if order is None:
        return None
    values = list(order)
    if len(values) != length or not all(isinstance(v, int) and not isinstance(v, bool) and v >= 0 for v in values):
        raise OrderError(f"series {series_id!r}: the {what} must be {length} whole numbers >= 0, not {order!r}")
    if length == 4 and any(values[:3]) and values[3] < 2:
        raise OrderError(f"series {series_id!r}: a seasonal order needs a period s >= 2, not {values[3]}")
    return values


def _checked_transform(transform: str | dict, series_id: str) -> str | dict:
    if transform in TRANSFORMS:
        return transform
    if isinstance(transform, dict) and set(transform) == {"box_cox"}:
        lam = transform["box_cox"]
        if isinstance(lam, (int, float)) and not isinstance(lam, bool) and math.isfinite(lam):
            return {"box_cox": float(lam)}
    raise InvalidVerdict(
        f"series {series_id!r}: transform must be 'none', 'log' or {{'box_cox': number}}, not {transform!r}"
    )


def _dumps(value: list | None) -> str | None:
    return None if value is None else json.dumps(value)


def _loads(text: str | None) -> list | None:
    return None if text is None else json.loads(text)
