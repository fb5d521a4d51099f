"""The queue page's view model: counts, one page of the filtered series with sparklines and their
suggested models, the pager, and the series the import rejected (not analysed); the suggested
models of a bulk approval's series."""

from __future__ import annotations

from collections import Counter
from collections.abc import Sequence

import sqlite_utils

from app.core.vocabulary import InterventionKind
from app.review.bulk import count_waiting
from app.review.decisions import scale_words, term_words
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
    suggested_models,
)
from app.store.verdicts import STATUSES, verdict_counts
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


def model_terms(suggested: dict) -> str:
    """What a suggested model (a :func:`list_series` item's ``suggested``) holds besides its
    orders, in a few words for a list row: ``log, with a drift, 1 level shift``.

    The transform (:func:`app.review.decisions.scale_words`), the deterministic term
    (:func:`app.review.decisions.term_words`) and the interventions counted by kind
    (:meth:`InterventionKind.words`), each left out when there is none and said to be unknown
    when the stored analysis did not record it; empty without a suggestion.
    """
    if suggested["order"] is None:
        return ""
    transform, trend, interventions = suggested["transform"], suggested["trend"], suggested["interventions"]
    parts = []
    if transform is None:
        parts.append("transform unknown")
    elif transform != "none":
        parts.append(scale_words(transform))
    if trend is None:
        parts.append("term unknown")
    elif term := term_words(suggested):
        parts.append(term)
    if interventions is None:
        parts.append("interventions unknown")
    else:
        kinds = Counter(InterventionKind(i["kind"]) for i in interventions)
        parts.extend(f"{count} {kind.words()}{'' if count == 1 else 's'}" for kind, count in kinds.items())
    return ", ".join(parts)


def approval_preview(db: sqlite_utils.Database, series_ids: Sequence[str]) -> list[dict]:
    """The series a bulk approval would approve, each with the model it would approve:
    ``[{"series_id", "suggested", "model_terms"}]`` (:func:`model_terms`), in the given order."""
    models = suggested_models(db, series_ids)
    return [{"series_id": sid, "suggested": models[sid], "model_terms": model_terms(models[sid])} for sid in series_ids]


def rejected_in_filter(db: sqlite_utils.Database, flt: SeriesFilter) -> list[dict]:
    """The series an import rejected that the filter keeps (:func:`rejected_series`): those whose
    id matches its ``q`` and ``prefix``, none when it asks for a status, confidence or flag, which
    a series without an analysis or verdict does not have. The queue page and ``GET /api/series``
    show them."""
    if flt.status or flt.confidence or flt.flag:
        return []
    return rejected_series(db, q=flt.q, prefix=flt.prefix)


def queue_page(db: sqlite_utils.Database, flt: SeriesFilter, offset: int, limit: int, default_limit: int) -> dict:
    """Everything the queue page shows: counts, groups, one page of series with sparklines and
    the words of their suggested models (:func:`model_terms`), the pager, how many series the
    bulk actions would take, and the rejected series of the filter.

    An ``offset`` past the end shows the last page; ``limit`` other than ``default_limit`` is
    kept in the page's links (``keep``).
    """
    total, items = list_series(db, limit=limit, offset=offset, **flt.store_kwargs())
    if not items and offset and total:
        offset = (total - 1) // limit * limit
        items = list_series(db, limit=limit, offset=offset, **flt.store_kwargs())[1]
    for item in items:
        item["sparkline"] = sparkline_svg(series_values(db, item["series_id"]))
        item["model_terms"] = model_terms(item["suggested"])
    target = flt.firm_pending()
    firm_in_filter = list_series(db, limit=0, **target.store_kwargs())[0] if target else 0
    counts = count_by(db, flt.prefix)  # of the group the page shows, as its list and bulk action
    portfolio = verdict_counts(db) if flt.prefix else counts["status"]  # the export takes every group
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
        "handoff": {"decided": portfolio["approved"] + portfolio["overridden"], "recheck": portfolio["recheck"]},
        "firm_in_filter": firm_in_filter,
        "waiting_in_filter": count_waiting(db, flt),
        "statuses": STATUSES,
        "confidence_levels": CONFIDENCE_LEVELS,
        "flags_present": flags_present(db),
        "crumbs": prefix_crumbs(flt.prefix),
        "groups": subgroups(db, flt.prefix),
        "run": latest_run(db),
    }
