"""The queue page's view model: counts, one page of the filtered series with sparklines, the pager."""

from __future__ import annotations

import sqlite_utils

from app.review.filters import SeriesFilter
from app.store.runs import latest_run
from app.store.series import CONFIDENCE_LEVELS, count_by, list_series, load_series
from app.store.verdicts import STATUSES
from app.web.sparkline import sparkline_svg


def queue_page(db: sqlite_utils.Database, flt: SeriesFilter, offset: int, limit: int) -> dict:
    """Everything the queue page shows: counts, one page of series with sparklines, the pager."""
    total, items = list_series(db, limit=limit, offset=offset, **flt.store_kwargs())
    for item in items:
        values = load_series(db, item["series_id"])
        item["sparkline"] = sparkline_svg(values.to_numpy() if values is not None else [])
    target = flt.firm_pending()
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
        "run": latest_run(db),
    }
