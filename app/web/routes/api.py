"""The JSON API: the data of every page, for scripts (OpenAPI schema at ``/openapi.json``).

Every state-changing call (POST) carries the ``X-CSRF-Token`` header equal to the
``lagdesk_csrf`` cookie: ``GET /api/csrf`` gives a client that keeps cookies both (a call that
sends the access token in ``X-Lagdesk-Token`` needs neither; see :mod:`app.web.security`).

Errors come back as ``{"detail": message}``: 404 for an unknown series, run or bulk approval,
409 (with the current ``verdict``) when a verdict names a version that is no longer current, or
when a bulk approval can no longer be undone, 422 for an impossible order or a bad value (and for
a risky approval without a note, or an order failing Ljung-Box at 1% without ``confirm``), 429 while the series is busy with another forecast check or
fit, 400 for an unusable file or a malformed request, 403 without the CSRF header or from
another site, 413 for a body over the limit.
"""

from __future__ import annotations

import math
from typing import Annotated, Literal

import sqlite_utils
from fastapi import APIRouter, Depends, Form, HTTPException, Path, Query, Request, UploadFile
from pydantic import BaseModel, ConfigDict, Field

from app.config import Settings
from app.core.backtest import DEFAULT_ORIGINS
from app.core.series_ids import MAX_ID_LENGTH
from app.jobs.analyze import start_background_analysis
from app.review.bulk import approve_firm, park, undo_bulk_approval, waiting_ids
from app.review.decisions import MAX_NOTE_LENGTH, OverrideNeeded, decide, fit_custom_order
from app.review.export import parse_statuses
from app.review.filters import SeriesFilter
from app.review.forecast_check import MAX_ORIGINS, MIN_HORIZON_CAP, backtest_series
from app.store.analyses import analysis_record, load_analysis
from app.store.bulk_approvals import get_bulk_approval
from app.store.runs import get_run, latest_run, list_runs
from app.store.series import count_by, group_counts, list_series
from app.store.status import portfolio_status
from app.store.verdicts import get_verdict, verdict_history
from app.web.deps import (
    SQLITE_MAX_INTEGER,
    clean_reviewer,
    computation_slot,
    export_document,
    get_db,
    get_runs_db,
    get_settings,
    saving_slot,
    whole_numbers,
)
from app.web.queue import rejected_in_filter
from app.web.security import CSRF_HEADER, CSRF_PATH, csrf_token
from app.web.uploads import UploadOptions, import_upload


class ErrorMessage(BaseModel):
    """Every error answer: ``detail`` is the message (for a malformed request, FastAPI's list of
    field errors); a 409 adds the current ``verdict``."""

    model_config = ConfigDict(extra="allow")
    detail: str | list[dict]


ERROR_STATUSES = (400, 401, 403, 404, 408, 409, 411, 413, 422, 429, 503)
# An id of MAX_ID_LENGTH characters has at most half as many non-empty parts between slashes.
MAX_GROUP_DEPTH = MAX_ID_LENGTH // 2
router = APIRouter(prefix="/api", tags=["api"], responses={code: {"model": ErrorMessage} for code in ERROR_STATUSES})

Db = Annotated[sqlite_utils.Database, Depends(get_db)]
RunsDb = Annotated[sqlite_utils.Database, Depends(get_runs_db)]
Config = Annotated[Settings, Depends(get_settings)]
Note = Annotated[str, Field(description=f"at most {MAX_NOTE_LENGTH:,} characters")]
Order = Annotated[list[int], Field(min_length=3, max_length=3, description="[p, d, q]")]
SeasonalOrder = Annotated[list[int], Field(min_length=4, max_length=4, description="[P, D, Q, s]; s = 0 for no season")]
Transform = Annotated[str | dict[str, float] | None, Field(
    description='"none", "log" or {"box_cox": lambda}; default: the analysis\' transform (log and Box-Cox need positive data)',
    examples=["log", {"box_cox": 0.5}],
)]


class InterventionIn(BaseModel):
    timestamp: str = Field(max_length=64, description="a time of the series, as it writes them", examples=["2024-03-01"])
    kind: Literal["additive", "level_shift", "temporary_change"]


Interventions = Annotated[list[InterventionIn] | None, Field(
    max_length=1000,
    description=("the outliers and level shifts to take out of the series, sized jointly with the order; "
                 "default: the analysis' own; [] takes none out"),
)]
IncludeConstant = Annotated[bool | None, Field(
    description="a constant (a mean undifferenced, a drift after one difference) or none; default: the engine's term for the order",
)]
BulkId = Annotated[int, Path(ge=1, le=SQLITE_MAX_INTEGER)]


def finite(value):
    """The value with every NaN or infinite float replaced by None (JSON has no NaN)."""
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, dict):
        return {k: finite(v) for k, v in value.items()}
    if isinstance(value, list):
        return [finite(v) for v in value]
    return value


class Suggested(BaseModel):
    order: list[int] | None
    seasonal_order: list[int] | None


class SuggestedModel(Suggested):
    transform: str | dict[str, float] | None = Field(description=(
        '"none", "log" or {"box_cox": lambda}; null without an analysis, or unknown (an analysis stored before it was listed)'))
    trend: str | None = Field(description=(
        "the deterministic term: n, c (a mean), t (a drift), ct; null without an analysis, or unknown"))
    interventions: list[dict] | None = Field(description=(
        "the outliers and level shifts taken out with the model (position, timestamp, kind, size, t_stat); "
        "null without an analysis, or unknown (an analysis stored before interventions were detected)"))


class SeriesItem(BaseModel):
    series_id: str
    n: int | None
    freq: str | None
    status: str
    confidence: str | None
    main_reason: str | None = Field(description="the first reason for the confidence, in the engine's words")
    suggested: SuggestedModel
    chosen: Suggested
    flags: list[str]
    reviewer: str
    analysis_state: str
    analysis_message: str | None = Field(None, description="why the analysis of the current data failed (analysis_state 'failed')")
    attention: float
    recheck_reason: str | None


class GroupCounts(BaseModel):
    prefix: str = Field(description="the id's first `depth` parts and '/', or a whole id with no more parts")
    total: int
    pending: int
    weak: int = Field(description="pending series with a weak suggestion (tentative and firm likewise)")
    tentative: int
    firm: int
    decided: int = Field(description="approved, overridden or not_arima")
    parked: int
    recheck: int


class RejectedSeries(BaseModel):
    series_id: str
    reason: str = Field(description="why the import refused it, in words")
    flag: str | None = Field(description="the reason's code: too_short, constant, ...")
    line: int | None = Field(description="the file line the reason names")
    file: str
    imported_at: str


class SeriesList(BaseModel):
    total: int = Field(description="how many series pass the filters (all pages)")
    limit: int
    offset: int
    items: list[SeriesItem]
    rejected: list[RejectedSeries] = Field(description=(
        "not analysed: the series of the filter's q and prefix that an import refused (too short, constant ...), "
        "so never stored; empty when the filter asks for a status, confidence or flag"))


class Verdict(BaseModel):
    status: str
    order: list[int] | None
    seasonal_order: list[int] | None
    transform: str | dict
    trend: str | None = Field(description="the model's deterministic term: n, c (a mean), t (a drift), ct; null without an order")
    include_constant: bool | None
    interventions: list[dict] | None = Field(description=(
        "the reviewer's interventions (timestamp, kind, size, t_stat), sized with the order; null: the analysis' own"))
    note: str
    reviewer: str
    version: int
    decided_at: str | None
    recheck_reason: str | None


class VerdictIn(BaseModel):
    status: Literal["approved", "overridden", "parked", "pending", "not_arima"] = Field(
        description="'pending' reopens a decided series; 'not_arima': no ARIMA order should forecast it (listed apart in the export)")
    order: Order | None = Field(None, description="needed for 'overridden'; 'approved' takes the suggestion")
    seasonal_order: SeasonalOrder | None = None
    transform: Transform = None
    include_constant: IncludeConstant = None
    interventions: Interventions = None
    confirm: bool = Field(False, description="save an order whose residuals fail the Ljung-Box test at 1% anyway")
    note: Note = Field("", description=f"at most {MAX_NOTE_LENGTH:,} characters; needed to approve a suggestion "
                       "that did not converge, fails Ljung-Box at 1%, lacks standard errors or is for intermittent demand")
    reviewer: str = ""
    version: int = Field(strict=True, ge=0, le=SQLITE_MAX_INTEGER, description="the verdict version the decision was based on")


class FitIn(BaseModel):
    order: Order
    seasonal_order: SeasonalOrder = [0, 0, 0, 0]
    transform: Transform = None
    include_constant: IncludeConstant = None
    interventions: Interventions = None


def chosen(items: list[InterventionIn] | None) -> list[dict] | None:
    return None if items is None else [item.model_dump() for item in items]


class BulkApprovalIn(BaseModel):
    reviewer: str
    note: Note = ""


class UndoIn(BaseModel):
    reviewer: str
    note: Note = Field("", description="stored on each reopened verdict (default: 'undo of bulk approval N')")


class BulkApprovalRecord(BaseModel):
    bulk_id: int
    at: str
    reviewer: str
    note: str
    filter: dict = Field(description="the queue filter it applied to, as query parameters")
    undone_at: str | None
    undone_by: str | None
    approved: dict[str, int] = Field(description="each series approved, with the verdict version the approval gave it")
    changed: list[str] = Field(description="series whose verdict changed since: while any, the approval cannot be undone")
    undoable: bool


class Reopened(BaseModel):
    count: int
    reopened: list[str]


class ParkIn(BaseModel):
    series_ids: list[str] | None = Field(None, description="the series to park; without it, every waiting series of the filter")
    reviewer: str
    note: Note


class Parked(BaseModel):
    count: int
    parked: list[str]


class BulkApproval(BaseModel):
    bulk_id: int | None = Field(description="undo it with POST /api/bulk/{bulk_id}/undo; null when nothing was approved")
    count: int
    approved: list[str]


class Run(BaseModel):
    run_id: int
    started_at: str
    updated_at: str | None = None
    finished_at: str | None
    engine_version: str
    settings: dict
    total: int
    done: int
    failed: int
    state: str
    duration_s: float | None


class RunStarted(BaseModel):
    run_id: int


class CsrfToken(BaseModel):
    csrf_token: str = Field(description="send it back in the header named by `header`, with the cookie this answer sets")
    header: str


def filter_params(
    status: str | None = None, confidence: str | None = None, flag: str | None = None, q: str | None = None,
    prefix: Annotated[str | None, Query(description="keep series whose id starts with this text")] = None,
    sort: str = "attention", descending: bool = False,
) -> SeriesFilter:
    """The queue filter from query parameters (``sort``: attention, series_id, n, order,
    confidence, status or reviewer)."""
    return SeriesFilter(status=status, confidence=confidence, flag=flag, q=q, prefix=prefix, sort=sort, descending=descending)


Filter = Annotated[SeriesFilter, Depends(filter_params)]


@router.get(CSRF_PATH.removeprefix("/api"), response_model=CsrfToken)
def csrf(request: Request) -> dict:
    """The CSRF token every POST of the API sends in the ``X-CSRF-Token`` header; the answer
    also sets the ``lagdesk_csrf`` cookie it must match, so keep cookies between calls."""
    return {"csrf_token": csrf_token(request), "header": CSRF_HEADER}


@router.get("/series", response_model=SeriesList)
def series_list(db: Db, settings: Config, flt: Filter, limit: Annotated[int | None, Query(ge=0)] = None,
                offset: Annotated[int, Query(ge=0, le=SQLITE_MAX_INTEGER)] = 0) -> dict:
    """One page of the portfolio, filtered and sorted as the queue shows it."""
    limit = settings.page_size if limit is None else min(limit, settings.max_page_size)
    total, items = list_series(db, limit=limit, offset=offset, **flt.store_kwargs())
    return {"total": total, "limit": limit, "offset": offset, "items": items, "rejected": rejected_in_filter(db, flt)}


@router.get("/groups", response_model=list[GroupCounts])
def groups(db: Db, depth: Annotated[int, Query(ge=1, le=MAX_GROUP_DEPTH)] = 1,
           prefix: Annotated[str | None, Query(description="count only series whose id starts with this text")] = None) -> list[dict]:
    """Counts per id prefix at ``depth`` ('/'-separated parts: ``company/`` at 1, ``company/site/`` at 2)."""
    return group_counts(db, depth, prefix)


def named_reviewer(name: str | None) -> str:
    """The reviewer a request names, as stored (:func:`app.web.deps.clean_reviewer`); 422 when
    nothing is left of it: every verdict records who decided it."""
    reviewer = clean_reviewer(name)
    if not reviewer:
        raise HTTPException(status_code=422, detail="reviewer must not be empty")
    return reviewer


@router.post("/series/{series_id:path}/verdict", response_model=Verdict)
def series_verdict(request: Request, db: Db, series_id: str, body: VerdictIn) -> dict:
    """Record a decision; refused with 409 (and the current verdict) when ``version`` is not
    current, before any fit the decision needs. A save that fits an order waits for the series'
    computation slot (:func:`app.web.deps.saving_slot`; 429 when it stays taken)."""
    try:
        return decide(
            db, series_id, status=body.status, order=body.order, seasonal_order=body.seasonal_order,
            note=body.note, reviewer=named_reviewer(body.reviewer), version=body.version,
            transform=body.transform, include_constant=body.include_constant, interventions=chosen(body.interventions),
            confirm=body.confirm, computing=saving_slot(request, series_id),
        )
    except OverrideNeeded as exc:
        raise OverrideNeeded(f"{exc}: send the status 'overridden' with the same fields") from None


@router.post("/series/{series_id:path}/fit")
def series_fit(request: Request, db: Db, series_id: str, body: FitIn) -> dict:
    """Fit an order to the stored series now (nothing is saved), with the transform, constant and
    interventions asked for: the candidate statistics, its residuals and residual ACF,
    ``delta_aicc`` against the stored candidates of the same differencing (d, D and s) and
    transform (null when there is none, or when the reviewer's interventions make the data
    another), and the ``interventions`` taken out with their sizes in this fit. 429 while another
    fit or forecast check of the series runs."""
    with computation_slot(request, series_id):
        fit = fit_custom_order(db, series_id, body.order, body.seasonal_order, body.transform, body.include_constant,
                               chosen(body.interventions))
        return finite(fit.to_dict())


@router.get("/series/{series_id:path}/backtest")
def series_backtest(
    request: Request, db: Db, series_id: str,
    order: Annotated[str | None, Query(description="p,d,q (default: the decided order of an approved or overridden series, else the suggested order)", examples=["0,1,1"])] = None,
    seasonal_order: Annotated[str | None, Query(description="P,D,Q,s (default: the decided or suggested one when order is not given, else none)")] = None,
    horizon: Annotated[int | None, Query(ge=1, description=(
        f"steps ahead (default: one season of the series, or 8 when it has no period); at most two seasons or {MIN_HORIZON_CAP}, whichever is more"))] = None,
    origins: Annotated[int | None, Query(ge=1, le=MAX_ORIGINS, description=f"forecast origins (default {DEFAULT_ORIGINS})")] = None,
) -> dict:
    """Rolling-origin forecast check of an order: MASE against the seasonal naive forecast, the
    coverage of the 80% and 95% intervals, the error by step ahead, and the data to plot.

    Orders up to the engine's search limits (p, q <= 5; P, Q <= 2); one check or fit per series
    at a time (429 while another runs)."""
    chosen = whole_numbers(order, 3, "order") if order else None
    seasonal = whole_numbers(seasonal_order, 4, "seasonal_order") if seasonal_order else None
    with computation_slot(request, series_id):
        return finite(backtest_series(db, series_id, chosen, seasonal, horizon=horizon, origins=origins))


@router.get("/orders")
def orders(request: Request, db: Db,
           status: Annotated[str | None, Query(description="decisions to include, comma-separated (default approved,overridden)")] = None) -> dict:
    """The export of the decided orders: the ``lagdesk-orders`` document (JSON Schema in
    ``schemas/lagdesk-orders.schema.json``), as ``lagdesk export`` writes it; one export is
    built at a time (:func:`app.web.deps.export_document`)."""
    return export_document(request, db, parse_statuses(status))


@router.get("/series/{series_id:path}")
def series_detail(db: Db, series_id: str) -> dict:
    """The stored analysis of a series with its verdict and history (oldest first)."""
    verdict = get_verdict(db, series_id)
    record = analysis_record(db, series_id)
    analysis = load_analysis(db, series_id)
    return finite({
        "series_id": series_id,
        **(analysis.to_dict() if analysis else {}),
        "analysis_state": record["state"],
        "analysis_message": record["message"],
        "verdict": verdict,
        "history": verdict_history(db, series_id),
    })


@router.get("/portfolio")
def portfolio(db: Db) -> dict:
    """Counts by confidence and status, how many series are analysed, stale, failed or rejected by
    the import, and each series not analysed with the reason (``not_analysed``)."""
    return {"counts": count_by(db), **portfolio_status(db)}


@router.post("/approve-firm", response_model=BulkApproval)
def bulk_approve(db: Db, flt: Filter, body: BulkApprovalIn) -> dict:
    """Approve the suggestion of every pending series with a firm, current analysis in the filter."""
    reviewer = named_reviewer(body.reviewer)
    done = approve_firm(db, flt, reviewer, body.note)
    return {"bulk_id": done.bulk_id, "count": len(done.approved), "approved": done.approved}


@router.get("/bulk/{bulk_id}", response_model=BulkApprovalRecord)
def bulk_approval(db: Db, bulk_id: BulkId) -> dict:
    """A bulk approval: what it approved, and whether it can still be undone."""
    return get_bulk_approval(db, bulk_id)


@router.post("/bulk/{bulk_id}/undo", response_model=Reopened)
def bulk_undo(db: Db, bulk_id: BulkId, body: UndoIn) -> dict:
    """Reopen (pending) every series the bulk approval approved, all or none: refused with 409,
    naming the series, when any of them changed since (or it was undone already)."""
    reviewer = named_reviewer(body.reviewer)
    reopened = undo_bulk_approval(db, bulk_id, reviewer, body.note)
    return {"count": len(reopened), "reopened": reopened}


@router.post("/park", response_model=Parked)
def bulk_park(db: Db, flt: Filter, body: ParkIn) -> dict:
    """Park, with one note, the listed series (or every series of the filter) that wait for a
    decision (pending or recheck); decided and parked ones are left alone."""
    reviewer = named_reviewer(body.reviewer)
    ids = waiting_ids(db, flt) if body.series_ids is None else body.series_ids
    parked = park(db, ids, reviewer, body.note)
    return {"count": len(parked), "parked": parked}


@router.post("/imports")
def imports(db: Db, settings: Config, file: UploadFile, options: Annotated[UploadOptions, Form()]) -> dict:
    """Import a CSV portfolio (multipart upload); the import report."""
    return import_upload(db, file, options, settings).to_dict()


@router.get("/runs", response_model=list[Run])
def runs(db: RunsDb, limit: Annotated[int, Query(ge=1, le=500)] = 50) -> list[dict]:
    return list_runs(db, limit)


@router.get("/runs/latest", response_model=Run | None)
def runs_latest(db: RunsDb) -> dict | None:
    return latest_run(db)


@router.get("/runs/{run_id}", response_model=Run)
def run_detail(db: RunsDb, run_id: Annotated[int, Path(ge=1, le=SQLITE_MAX_INTEGER)]) -> dict:
    return get_run(db, run_id)


@router.post("/runs", response_model=RunStarted, status_code=202)
def run_start(settings: Config) -> dict:
    """Start analysing every series whose analysis is missing or stale; poll ``/api/runs/{run_id}``."""
    return {"run_id": start_background_analysis(settings.db_path, workers=settings.analysis_workers)}
