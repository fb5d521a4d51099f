"""The queue page's view model: counts, one page of the filtered series with sparklines, the pager,
and the series the import rejected (not analysed)."""

from __future__ import annotations

import sqlite_utils

from app.review.bulk import count_waiting
from app.review.filters import SeriesFilter
from app.store.runs import latest_run
from app.store.series import (
    CONFIDENCE_LEVELS,
    ID_SEPARATOR,
    count_by,
    flags_present,
    group_counts,
    list_series,
    refused_updates,
    rejected_series,
    series_values,
)
from app.store.verdicts import STATUSES
from app.web.sparkline import sparkline_svg

# The page sizes the queue offers (Settings.max_page_size bounds what a request may ask for).
PAGE_SIZES = (50, 200, 1000)
# Rejected series the queue page shows at most (all of them: GET /api/series).
REJECTED_SHOWN = PAGE_SIZES[0]


def prefix_crumbs(prefix: str | None) -> list[tuple[str, str]]:
    """The breadcrumb of an id prefix: ``(label, prefix)`` from the top group down
    (``bakery/shop-3/`` -> ``[("bakery/", "bakery/"), ("shop-3/", "bakery/shop-3/")]``)."""
    crumbs: list[tuple[str, str]] = []
    start = 0
    while prefix and start < len(prefix):
        end = prefix.find(ID_SEPARATOR, start)
        end = len(prefix) if end < 0 else end + 1
        crumbs.append((prefix[start:end], prefix[:end]))
        start = end
    return crumbs


def subgroups(db: sqlite_utils.Database, prefix: str | None) -> list[dict]:
    """The groups one level below ``prefix`` (ids that continue past it), with their counts."""
    depth = (prefix or "").count(ID_SEPARATOR) + 1
    return [g for g in group_counts(db, depth, prefix) if g["prefix"].endswith(ID_SEPARATOR)]


def rejected_in_filter(db: sqlite_utils.Database, flt: SeriesFilter) -> list[dict]:
    """The series an import rejected that the filter keeps (:func:`rejected_series`): those whose
    id matches its ``q`` and ``prefix``, none when it asks for a status, confidence or flag, which
    a series without an analysis or verdict does not have. The queue page and ``GET /api/series``
    show them."""
    if flt.status or flt.confidence or flt.flag:
        return []
    return rejected_series(db, q=flt.q, prefix=flt.prefix)


def queue_page(db: sqlite_utils.Database, flt: SeriesFilter, offset: int, limit: int, default_limit: int) -> dict:
    """Everything the queue page shows: counts, groups, one page of series with sparklines, the
    pager, how many series the bulk actions would take, and the rejected series of the filter.

    An ``offset`` past the end shows the last page; ``limit`` other than ``default_limit`` is
    kept in the page's links (``keep``).
    """
    total, items = list_series(db, limit=limit, offset=offset, **flt.store_kwargs())
    if not items and offset and total:
        offset = (total - 1) // limit * limit
        items = list_series(db, limit=limit, offset=offset, **flt.store_kwargs())[1]
    for item in items:
        item["sparkline"] = sparkline_svg(series_values(db, item["series_id"]))
    target = flt.firm_pending()
    firm_in_filter = list_series(db, limit=0, **target.store_kwargs())[0] if target else 0
    counts = count_by(db)
    return {
        "filter": flt,
        "total": total,
        "items": items,
        "rejected": rejected_in_filter(db, flt),
        "refused_updates": refused_updates(db, q=flt.q, prefix=flt.prefix)[:REJECTED_SHOWN],
        "rejected_shown": REJECTED_SHOWN,
        "offset": offset,
        "limit": limit,
        "page": offset // limit + 1,
        "pages": max(-(-total // limit), 1),
        "page_sizes": sorted({*PAGE_SIZES, limit}),
        "keep": {} if limit == default_limit else {"limit": limit},
        "counts": counts,
        "reviewed_share": counts["reviewed"] / counts["total"] if counts["total"] else 0.0,
        "firm_in_filter": firm_in_filter,
        "waiting_in_filter": count_waiting(db, flt),
        "statuses": STATUSES,
        "confidence_levels": CONFIDENCE_LEVELS,
        "flags_present": flags_present(db),
        "crumbs": prefix_crumbs(flt.prefix),
        "groups": subgroups(db, flt.prefix),
        "run": latest_run(db),
    }
