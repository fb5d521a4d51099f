"""Candidates side by side: the forecast checks of two or three orders of one series.

``GET /api/series/{id}/compare`` takes the orders as the forecast check API does (``order`` as
``p,d,q`` and ``seasonal_order`` as ``P,D,Q,s``), repeated once per order and paired by
position; ``GET /series/{id}/compare`` takes the review page's candidate numbers
(``candidate=1&candidate=3``) and answers with the comparison as a page, or as a fragment for
the review page. Both hold the series' one computation slot for all the checks
(:func:`app.web.deps.computation_slot`: 429 while another check or fit of it runs), and the
bounds of a single check hold for each (:mod:`app.review.forecast_check`).
"""

from __future__ import annotations

from typing import Annotated

import sqlite_utils
from fastapi import APIRouter, Depends, Query, Request
from fastapi.responses import Response

from app.core.defaults import DEFAULT_ORIGINS
from app.core.errors import LagdeskError, OrderError
from app.review.forecast_check import MAX_COMPARED, MAX_ORIGINS, MIN_COMPARED, MIN_HORIZON_CAP, compare_orders
from app.store.analyses import load_analysis
from app.store.database import UnknownSeries
from app.store.series import series_fingerprint
from app.web.deps import computation_slot, get_db, whole_number, whole_numbers
from app.web.errors import status_of
from app.web.forecast import comparison_view
from app.web.routes.api import ERROR_STATUSES, ErrorMessage, finite
from app.web.templating import templates

router = APIRouter()

Db = Annotated[sqlite_utils.Database, Depends(get_db)]
OrderPairs = list[tuple[list[int], list[int] | None]]


def order_pairs(orders: list[str], seasonal_orders: list[str] | None) -> OrderPairs:
    """The ``(order, seasonal_order)`` pairs of a comparison from its repeated query parameters.

    Raises
    ------
    OrderError
        When an order is malformed, or seasonal orders are given but not one per order.
    """
    if seasonal_orders and len(seasonal_orders) != len(orders):
        raise OrderError(
            f"give a seasonal_order for every order or for none ({len(orders)} orders, {len(seasonal_orders)} seasonal orders)"
        )
    seasonal = [whole_numbers(s, 4, "seasonal_order") for s in seasonal_orders] if seasonal_orders else [None] * len(orders)
    return [(whole_numbers(o, 3, "order"), s) for o, s in zip(orders, seasonal)]


@router.get("/api/series/{series_id:path}/compare", tags=["api"],
            responses={code: {"model": ErrorMessage} for code in ERROR_STATUSES})
def series_compare(
    request: Request, db: Db, series_id: str,
    order: Annotated[list[str], Query(description=f"p,d,q of each order to compare ({MIN_COMPARED} or {MAX_COMPARED})",
                                      examples=[["0,1,1", "1,1,0"]])],
    seasonal_order: Annotated[list[str] | None, Query(description="P,D,Q,s of each order, in the same order (default: none)")] = None,
    horizon: Annotated[int | None, Query(ge=1, description=(
        f"steps ahead (default: one season of the series, or 8 when it has no period); at most two seasons or {MIN_HORIZON_CAP}, whichever is more"))] = None,
    origins: Annotated[int | None, Query(ge=1, le=MAX_ORIGINS, description=f"forecast origins (default {DEFAULT_ORIGINS})")] = None,
) -> dict:
    """The rolling-origin forecast checks of two or three orders on the same series, each as
    ``GET /api/series/{id}/backtest`` gives it (MASE, naive MASE, 80% and 95% coverage, error
    by step ahead, data to plot), in the order asked."""
    pairs = order_pairs(order, seasonal_order)
    if series_fingerprint(db, series_id) is None:
        raise UnknownSeries(series_id)
    with computation_slot(request, series_id):
        checks = compare_orders(db, series_id, pairs, horizon=horizon, origins=origins)
    return {"series_id": series_id, "checks": finite(checks)}


def candidate_orders(db: sqlite_utils.Database, series_id: str, keys: list[str]) -> OrderPairs:
    """The orders of the review page's candidates numbered ``keys`` (1 is the suggestion).

    Raises
    ------
    UnknownSeries
    LagdeskError
        When the series has no analysis or a number names no candidate.
    """
    if series_fingerprint(db, series_id) is None:
        raise UnknownSeries(series_id)
    analysis = load_analysis(db, series_id)
    if analysis is None:
        raise LagdeskError(f"series {series_id!r} has no analysis yet: its candidates cannot be compared")
    count = len(analysis.candidates)
    picked: OrderPairs = []
    for key in keys:
        rank = whole_number(key)
        if rank is None or not 1 <= rank <= count:
            raise LagdeskError(f"candidate {key!r} is not one of the {count} candidates of {series_id!r}")
        candidate = analysis.candidates[rank - 1]
        picked.append((list(candidate.order.order), list(candidate.order.seasonal_order)))
    return picked


@router.get("/series/{series_id:path}/compare", name="compare", include_in_schema=False)
def compare_page(request: Request, db: Db, series_id: str,
                 candidate: Annotated[list[str], Query()], fragment: bool = False) -> Response:
    """The comparison of the picked candidates (in place on the review page with JavaScript, as a page without)."""
    try:
        pairs = candidate_orders(db, series_id, candidate)
        with computation_slot(request, series_id):
            view = comparison_view(db, series_id, load_analysis(db, series_id), pairs)
    except UnknownSeries:
        raise
    except LagdeskError as exc:
        if fragment:
            return templates.TemplateResponse(request=request, name="_fit_error.html", context={"message": str(exc)},
                                              status_code=status_of(exc))
        raise
    context = {"comparison": view, "series_id": series_id}
    return templates.TemplateResponse(request=request, name="_comparison.html" if fragment else "compare.html", context=context)
