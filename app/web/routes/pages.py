"""The HTML pages: queue, series review, bulk approval, upload, runs.

Each view asks the view models (:mod:`app.web.queue`, :mod:`app.web.review`) for a plain dict
and hands it to a template; decisions go through :mod:`app.review`. Every form is a plain
POST answered by a redirect (or by the page again with a message), so the pages work without
JavaScript; the scripts add keyboard shortcuts, the charts and in-place fitting.
"""

from __future__ import annotations

from typing import Annotated, Literal

import sqlite_utils
from fastapi import APIRouter, Depends, Form, Query, Request, UploadFile
from fastapi import Path as FastApiPath
from fastapi.responses import FileResponse, RedirectResponse, Response

from app.config import Settings
from app.core.errors import LagdeskError
from app.jobs.analyze import start_background_analysis
from app.review.bulk import approve_firm, firm_pending_ids, park, undo_bulk_approval, waiting_ids
from app.review.decisions import ConfirmationNeeded, DecisionError, approval_risks, decide, fit_custom_order, verdict_of
from app.review.export import orders_text
from app.review.filters import SeriesFilter
from app.store.analyses import load_analysis
from app.store.bulk_approvals import get_bulk_approval, latest_undoable
from app.store.database import UnknownSeries
from app.store.orders import verdict_model
from app.store.runs import get_run, list_runs
from app.store.series import next_awaiting, series_neighbours
from app.store.verdicts import sent_to_recheck
from app.web.charts import PLOTLY_JS
from app.web.deps import (
    REVIEWER_COOKIE,
    SQLITE_MAX_INTEGER,
    clean_reviewer,
    computation_slot,
    export_document,
    get_db,
    get_runs_db,
    get_settings,
    remember_reviewer,
    saving_slot,
    whole_numbers,
)
from app.web.errors import status_of
from app.web.forecast import forecast_check_view
from app.web.forms import CustomModel, DecisionForm
from app.web.queue import approval_preview, queue_page
from app.web.review import FormState, custom_fit_view, review_page
from app.web.security import check_csrf
from app.web.templating import quote_path, templates
from app.web.uploads import UploadOptions, import_upload

# Pages are for browsers; the OpenAPI schema describes the JSON API only.
router = APIRouter(dependencies=[Depends(check_csrf)], include_in_schema=False)

Db = Annotated[sqlite_utils.Database, Depends(get_db)]
RunsDb = Annotated[sqlite_utils.Database, Depends(get_runs_db)]
Config = Annotated[Settings, Depends(get_settings)]
BULK_PREVIEW = 12
RECHECKED_SHOWN = 10  # decided orders a finished run's page lists by name
VENDOR_MAX_AGE_S = 7 * 24 * 3600
EXPORT_MEDIA_TYPES = {"json": "application/json", "csv": "text/csv; charset=utf-8"}
NAME_NEEDED = "Give your name once (this browser remembers it); it is stored with each verdict."


def render(request: Request, name: str, context: dict, status_code: int = 200) -> Response:
    return templates.TemplateResponse(request=request, name=name, context=context, status_code=status_code)


def queue_filter(request: Request) -> SeriesFilter:
    return SeriesFilter.from_params(request.query_params)


Filter = Annotated[SeriesFilter, Depends(queue_filter)]


def with_query(url: str, query: str) -> str:
    return f"{url}?{query}" if query else url


def model_fields(verdict: dict) -> dict:
    """The custom model's transform and constant fields as the verdict left them (blank: the
    analysis' choice, for a verdict without an order or saved before they were stored)."""
    fields = {"transform": "", "lam": "", "constant": ""}
    if verdict["order"] is None:
        return fields
    transform = verdict["transform"]
    if isinstance(transform, dict):
        fields.update(transform="box_cox", lam=f"{transform['box_cox']:g}")
    else:
        fields["transform"] = transform
    if verdict["include_constant"] is not None:
        fields["constant"] = "yes" if verdict["include_constant"] else "no"
    return fields


def verdict_is_custom(page: dict) -> bool:
    """Whether the verdict's model is none of the analysis' candidates as they stand (another
    order, or a candidate's order on another scale or with another constant): the form then
    starts on it as a custom model."""
    verdict, analysis = page["verdict"], page["analysis"]
    if verdict["order"] is None or analysis is None:
        return page["choice"] == "custom"
    candidate = verdict_model(analysis, verdict["order"], verdict["seasonal_order"], verdict["trend"])[1]
    return candidate is None or analysis.transform.to_json() != verdict["transform"]


def decision_context(page: dict) -> dict:
    """What the decision panel needs besides the review page's view model: why approving the
    suggestion in one step is risky (it then needs a note), and the custom model's fields (the
    verdict's when the form starts on its order as a custom one; a candidate brings its own)."""
    analysis = page["analysis"]
    verdict = page["verdict"]
    return {
        "approval_risks": approval_risks(analysis.suggested, analysis.flags) if analysis else [],
        "model_fields": model_fields(verdict if page["choice"] == "custom" else {**verdict, "order": None}),
        "confirm_needed": False,
    }


@router.get("/", name="queue")
def queue(request: Request, db: RunsDb, settings: Config, flt: Filter,
          offset: Annotated[int, Query(ge=0, le=SQLITE_MAX_INTEGER)] = 0,
          limit: Annotated[int | None, Query(ge=1, le=SQLITE_MAX_INTEGER)] = None,
          page: Annotated[int | None, Query(ge=1, le=SQLITE_MAX_INTEGER)] = None, approved: int | None = None,
          parked: int | None = None, reopened: int | None = None) -> Response:
    """The queue: ``limit`` rows a page (at most ``max_page_size``), from ``offset`` or from
    ``page`` (1 is the first; a page past the end shows the last)."""
    size = settings.page_size if limit is None else min(limit, settings.max_page_size)
    if page is not None:
        offset = min((page - 1) * size, SQLITE_MAX_INTEGER)
    view = queue_page(db, flt, offset, size, settings.page_size)
    return render(request, "queue.html", {**view, "approved_count": approved, "parked_count": parked,
                                          "undoable_bulk": latest_undoable(db), "reopened_count": reopened})


@router.get("/series/{series_id:path}/forecast-check", name="forecast_check")
def forecast_check(request: Request, db: Db, flt: Filter, series_id: str, order: str,
                   custom: Annotated[CustomModel, Query()], seasonal: str = "0,0,0,0", fragment: bool = False) -> Response:
    """The forecast check of an order (in place on the review page with JavaScript, as a page
    without), with a custom model's transform, constant and interventions when they are given."""
    try:
        transform, include_constant = custom.model_choice()
        with computation_slot(request, series_id):
            check = forecast_check_view(
                db, series_id, whole_numbers(order, 3, "order"), whole_numbers(seasonal, 4, "seasonal order"),
                transform, include_constant, custom.chosen_interventions(),
            )
    except UnknownSeries:
        raise
    except LagdeskError as exc:
        if fragment:
            return render(request, "_fit_error.html", {"message": str(exc)}, status_code=status_of(exc))
        raise
    context = {"check": check, "series_id": series_id, "filter": flt}
    return render(request, "_forecast_check.html" if fragment else "forecast_check.html", context)


@router.get("/series/{series_id:path}", name="review")
def review(request: Request, db: Db, flt: Filter, series_id: str,
           candidate: str | None = None, saved: str | None = None) -> Response:
    page = review_page(db, series_id, flt, selected=candidate)
    if verdict_is_custom(page):
        page["choice"] = "custom"
    return render(request, "review.html", {**page, **decision_context(page), "saved": saved})


def _redraw(request: Request, db: sqlite_utils.Database, series_id: str, flt: SeriesFilter, data: DecisionForm,
            status: int, error: LagdeskError | None = None, custom_fit: dict | None = None) -> Response:
    """The review page again, keeping what the reviewer typed, with an error (and the
    confirmation box when the error asks for one) or a custom fit."""
    custom = data.custom_fields()
    form = FormState(
        choice="custom" if custom_fit or data.action == "fit" else data.choice,
        custom=custom, note=data.note, reviewer=clean_reviewer(data.reviewer),
        error=str(error) if error else None, custom_fit=custom_fit,
    )
    page = review_page(db, series_id, flt, selected="custom" if custom_fit else None, form=form)
    context = {
        **page, **decision_context(page), "saved": None, "confirm_needed": isinstance(error, ConfirmationNeeded),
        "model_fields": {name: custom[name] for name in ("transform", "lam", "constant")},
    }
    return render(request, "review.html", context, status_code=status)


@router.post("/series/{series_id:path}/verdict", name="save_verdict")
def save_verdict(request: Request, db: Db, flt: Filter, series_id: str,
                 data: Annotated[DecisionForm, Form()]) -> Response:
    verdict_of(db, series_id)  # an unknown series is a 404 page, not a form error
    reviewer = clean_reviewer(data.reviewer)
    if not reviewer:
        return _redraw(request, db, series_id, flt, data, 422, DecisionError(NAME_NEEDED))
    # The next series is found before saving, as the saved one may leave the filter: the next
    # that awaits a decision, else the next in the list.
    next_id = next_awaiting(db, series_id, **flt.store_kwargs()) or series_neighbours(db, series_id, **flt.store_kwargs())[1]
    try:
        status, order, seasonal, transform, include_constant, interventions = data.decision(load_analysis(db, series_id))
        decide(db, series_id, status=status, order=order, seasonal_order=seasonal, note=data.note,
               reviewer=reviewer, version=data.version, transform=transform, include_constant=include_constant,
               interventions=interventions, confirm=data.confirm, computing=saving_slot(request, series_id))
    except ConfirmationNeeded as exc:
        # The page comes back with the custom fit shown (and its tick beside it), as after Fit.
        with computation_slot(request, series_id):
            shown = _refit(db, series_id, data)
        return _redraw(request, db, series_id, flt, data, status_of(exc), exc, shown)
    except LagdeskError as exc:
        return _redraw(request, db, series_id, flt, data, status_of(exc), exc)
    url = with_query(request.app.url_path_for("review", series_id=quote_path(next_id or series_id)), flt.query(saved=series_id))
    return remember_reviewer(RedirectResponse(url, status_code=303), reviewer)


def _refit(db: sqlite_utils.Database, series_id: str, data: DecisionForm) -> dict | None:
    """The custom model of the form fitted again for the page (None when the choice is a candidate)."""
    if data.choice != "custom":
        return None
    order, seasonal = data.custom_order()
    transform, include_constant = data.model_choice()
    fit = fit_custom_order(db, series_id, order, seasonal, transform, include_constant, data.chosen_interventions())
    return custom_fit_view(db, series_id, fit, data.query())


@router.post("/series/{series_id:path}/fit", name="fit_custom")
def fit_custom(request: Request, db: Db, flt: Filter, series_id: str,
               data: Annotated[DecisionForm, Form()]) -> Response:
    """Fit the typed custom order and show it (in place with JavaScript, as a page without)."""
    try:
        with computation_slot(request, series_id):
            fit = _refit(db, series_id, data.model_copy(update={"choice": "custom"}))
    except UnknownSeries:
        raise
    except LagdeskError as exc:
        if data.fragment:
            return render(request, "_fit_error.html", {"message": str(exc)}, status_code=status_of(exc))
        return _redraw(request, db, series_id, flt, data, status_of(exc), exc)
    if data.fragment:
        return render(request, "_candidate_detail.html", {"candidate": fit, "hidden": False, "series_id": series_id})
    return _redraw(request, db, series_id, flt, data, 200, custom_fit=fit)


@router.get("/export/lagdesk-orders.{fmt}", name="download_orders")
def download_orders(request: Request, db: Db, fmt: Literal["json", "csv"]) -> Response:
    """The export of the decided orders as a file to save (what ``lagdesk export`` writes); one
    export is built at a time (:func:`app.web.deps.export_document`)."""
    text = orders_text(export_document(request, db), fmt)
    return Response(text, media_type=EXPORT_MEDIA_TYPES[fmt], headers={
        "Content-Disposition": f'attachment; filename="lagdesk-orders.{fmt}"',
    })


@router.get("/approve-firm", name="approve_firm_confirm")
def approve_firm_confirm(request: Request, db: Db, flt: Filter) -> Response:
    ids = firm_pending_ids(db, flt)
    context = {"filter": flt, "count": len(ids), "preview": approval_preview(db, ids[:BULK_PREVIEW]), "error": None}
    return render(request, "approve_firm.html", context)


@router.post("/approve-firm", name="approve_firm_save")
def approve_firm_save(request: Request, db: Db, flt: Filter, expected: Annotated[int, Form()],
                      reviewer: Annotated[str, Form()] = "", note: Annotated[str, Form()] = "") -> Response:
    name = clean_reviewer(reviewer)
    ids = firm_pending_ids(db, flt)
    if not name or len(ids) != expected:
        message = NAME_NEEDED if not name else (
            f"The filter now holds {len(ids)} pending firm series, not the {expected} you confirmed; check again."
        )
        context = {"filter": flt, "count": len(ids), "preview": approval_preview(db, ids[:BULK_PREVIEW]), "error": message}
        return render(request, "approve_firm.html", context, status_code=422 if not name else 409)
    done = approve_firm(db, flt, name, note)
    if done.bulk_id is None:
        url = with_query(request.app.url_path_for("queue"), flt.query(approved=0))
    else:
        url = with_query(request.app.url_path_for("bulk_approval", bulk_id=done.bulk_id), flt.query())
    return remember_reviewer(RedirectResponse(url, status_code=303), name)


@router.get("/bulk/{bulk_id}", name="bulk_approval")
def bulk_approval(request: Request, db: Db, flt: Filter,
                  bulk_id: Annotated[int, FastApiPath(ge=1, le=SQLITE_MAX_INTEGER)]) -> Response:
    """What a bulk approval approved, with its undo while nothing of it changed since."""
    record = get_bulk_approval(db, bulk_id)
    return render(request, "bulk_approval.html", {"bulk": record, "filter": flt, "error": None})


@router.post("/bulk/{bulk_id}/undo", name="bulk_undo")
def bulk_undo(request: Request, db: Db, flt: Filter, bulk_id: Annotated[int, FastApiPath(ge=1, le=SQLITE_MAX_INTEGER)],
              reviewer: Annotated[str, Form()] = "", note: Annotated[str, Form()] = "") -> Response:
    """Undo a bulk approval (every series it approved back to pending), or say why not."""
    name = clean_reviewer(reviewer)
    try:
        if not name:
            raise DecisionError(NAME_NEEDED)
        reopened = undo_bulk_approval(db, bulk_id, name, note)
    except LagdeskError as exc:
        context = {"bulk": get_bulk_approval(db, bulk_id), "filter": flt, "error": str(exc)}
        return render(request, "bulk_approval.html", context, status_code=status_of(exc))
    url = with_query(request.app.url_path_for("queue"), flt.query(reopened=len(reopened)))
    return remember_reviewer(RedirectResponse(url, status_code=303), name)


@router.post("/park", name="park_save")
def park_save(request: Request, db: Db, flt: Filter, note: Annotated[str, Form()],
              scope: Annotated[Literal["selected", "filter"], Form()] = "selected",
              series: Annotated[list[str] | None, Form()] = None, expected: Annotated[int | None, Form()] = None,
              reviewer: Annotated[str, Form()] = "") -> Response:
    """Park the rows ticked on the queue, or every waiting series of its filter, with one note."""
    name = clean_reviewer(reviewer)
    if not name:
        raise DecisionError(NAME_NEEDED)
    if scope == "filter":
        ids = waiting_ids(db, flt)
        if len(ids) != expected:
            raise DecisionError(f"The filter now holds {len(ids)} waiting series, not the {expected} shown; check again.")
    else:
        ids = series or []
        if not ids:
            raise DecisionError("Tick the rows to park first (or choose every waiting series of the filter).")
    parked = park(db, ids, name, note)
    url = with_query(request.app.url_path_for("queue"), flt.query(parked=len(parked)))
    return remember_reviewer(RedirectResponse(url, status_code=303), name)


@router.get("/upload", name="upload")
def upload_form(request: Request) -> Response:
    return render(request, "upload.html", {"options": UploadOptions(), "report": None, "error": None})


@router.post("/upload", name="upload_save")
def upload_save(request: Request, db: Db, settings: Config, file: UploadFile,
                options: Annotated[UploadOptions, Form()]) -> Response:
    try:
        report = import_upload(db, file, options, settings)
    except LagdeskError as exc:
        context = {"options": options, "report": None, "error": str(exc)}
        return render(request, "upload.html", context, status_code=status_of(exc))
    return render(request, "upload.html", {"options": options, "report": report, "error": None})


@router.post("/runs", name="start_run")
def start_run(request: Request, settings: Config) -> Response:
    run_id = start_background_analysis(settings.db_path, workers=settings.analysis_workers)
    return RedirectResponse(request.app.url_path_for("run_progress", run_id=run_id), status_code=303)


@router.get("/runs", name="runs")
def runs(request: Request, db: RunsDb) -> Response:
    return render(request, "runs.html", {"runs": list_runs(db)})


@router.get("/runs/{run_id}", name="run_progress")
def run_progress(request: Request, db: RunsDb, run_id: Annotated[int, FastApiPath(ge=1, le=SQLITE_MAX_INTEGER)]) -> Response:
    run = get_run(db, run_id)
    rechecked = sent_to_recheck(db, run["started_at"], run["finished_at"]) if run["state"] != "running" else []
    return render(request, "run.html", {"run": run, "rechecked": rechecked, "rechecked_shown": RECHECKED_SHOWN})


@router.post("/reviewer", name="set_reviewer")
def set_reviewer(request: Request, name: Annotated[str, Form()] = "", back: Annotated[str, Form()] = "/") -> Response:
    """Remember (or, with an empty name, forget) the reviewer name; back to the page it came from."""
    target = back if back.startswith("/") and not back.startswith("//") else "/"
    response = RedirectResponse(target, status_code=303)
    reviewer = clean_reviewer(name)
    if not reviewer:
        response.delete_cookie(REVIEWER_COOKIE)
        return response
    return remember_reviewer(response, reviewer)


@router.get("/vendor/plotly.min.js", name="plotly_js")
def plotly_js() -> Response:
    """plotly.js from the installed plotly package: the pages never load it from another host."""
    return FileResponse(PLOTLY_JS, media_type="text/javascript", headers={"Cache-Control": f"max-age={VENDOR_MAX_AGE_S}"})
