"""The queue: the filter a reviewer works through, one page of it, and the bulk approval of firm series."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import asdict, dataclass, replace
from urllib.parse import urlencode

import sqlite_utils

from app.store.analyses import CONFIDENCE_LEVELS, load_analysis
from app.store.runs import latest_run
from app.store.series import count_by, list_series, load_series
from app.store.verdicts import STATUSES, get_verdict, set_verdict
from app.web.sparkline import sparkline_svg

# The queue's sortable columns and the store's sort key for each (``attention``: what needs a human first).
SORT_COLUMNS = ("attention", "series_id", "n", "order", "confidence", "status", "reviewer")


@dataclass(frozen=True)
class QueueFilter:
    """Which series the reviewer is working through, in which order (empty fields mean 'any')."""

    status: str | None = None
    confidence: str | None = None
    flag: str | None = None
    q: str | None = None
    sort: str = "attention"
    descending: bool = False

    @classmethod
    def from_params(cls, params: Mapping[str, str]) -> QueueFilter:
        """Read the filter from query parameters (blank values are 'any')."""
        def text(name: str) -> str | None:
            value = (params.get(name) or "").strip()
            return value or None

        return cls(
            status=text("status"), confidence=text("confidence"), flag=text("flag"), q=text("q"),
            sort=text("sort") or "attention", descending=(params.get("descending") or "").lower() in ("1", "true", "on", "yes"),
        )

    def store_kwargs(self) -> dict:
        """Keyword arguments of ``list_series`` / ``series_neighbours``."""
        return asdict(self)

    def query(self, **changes) -> str:
        """This filter (with ``changes``) as a query string, default values left out."""
        merged = {**asdict(self), **changes}
        fields = {k: v for k, v in merged.items() if v not in (None, "", False) and not (k == "sort" and v == "attention")}
        if fields.get("descending") is True:
            fields["descending"] = "1"
        return urlencode(fields)

    @property
    def is_empty(self) -> bool:
        return self == QueueFilter(sort=self.sort, descending=self.descending)


def firm_pending_filter(flt: QueueFilter) -> QueueFilter | None:
    """The part of ``flt`` a bulk approval touches: pending series with a firm suggestion.

    None when the filter excludes them (it asks for another status or confidence).
    """
    if flt.status not in (None, "pending") or flt.confidence not in (None, "firm"):
        return None
    return replace(flt, status="pending", confidence="firm")


def firm_pending_ids(db: sqlite_utils.Database, flt: QueueFilter) -> list[str]:
    """Pending series in ``flt`` whose current analysis is firm: what a bulk approval would approve."""
    target = firm_pending_filter(flt)
    if target is None:
        return []
    total, _ = list_series(db, limit=0, **target.store_kwargs())
    _, items = list_series(db, limit=total, **target.store_kwargs())
    return [item["series_id"] for item in items if item["analysis_state"] == "current"]


def approve_firm(db: sqlite_utils.Database, flt: QueueFilter, reviewer: str, note: str = "") -> list[str]:
    """Approve the suggestion of every pending, firm series in ``flt``; returns the ids approved.

    Each series is re-read before it is approved: one decided or re-analysed meanwhile is left alone.
    """
    approved = []
    for series_id in firm_pending_ids(db, flt):
        verdict = get_verdict(db, series_id)
        analysis = load_analysis(db, series_id)
        if verdict["status"] != "pending" or analysis is None or analysis["confidence"] != "firm":
            continue
        set_verdict(
            db, series_id, status="approved", order=analysis["suggested"]["order"],
            seasonal_order=analysis["suggested"]["seasonal_order"], transform=analysis.get("transform", "none"),
            note=note, reviewer=reviewer, version=verdict["version"],
        )
        approved.append(series_id)
    return approved


def queue_page(db: sqlite_utils.Database, flt: QueueFilter, offset: int, limit: int) -> dict:
    """Everything the queue page shows: counts, one page of series with sparklines, the pager."""
    total, items = list_series(db, limit=limit, offset=offset, **flt.store_kwargs())
    for item in items:
        values = load_series(db, item["series_id"])
        item["sparkline"] = sparkline_svg(values.to_numpy() if values is not None else [])
    target = firm_pending_filter(flt)
    firm_in_filter = list_series(db, limit=0, **target.store_kwargs())[0] if target else 0
    counts = count_by(db)
    return {
        "filter": flt,
        "total": total,
        "items": items,
        "offset": offset,
        "limit": limit,
        "counts": counts,
        "reviewed_share": counts["reviewed"] / counts["total"] if counts["total"] else 0.0,
        "firm_in_filter": firm_in_filter,
        "statuses": STATUSES,
        "confidence_levels": CONFIDENCE_LEVELS,
        "sort_columns": SORT_COLUMNS,
        "run": latest_run(db),
    }
