"""How errors reach the user: JSON under ``/api/``, a page everywhere else.

Every failure a user can cause is a :class:`~app.core.errors.LagdeskError` with a message that
names what is wrong; the handlers give each kind its status code.
"""

from __future__ import annotations

import json
import sqlite3
from collections.abc import Mapping

from fastapi import FastAPI, Request
from fastapi.encoders import jsonable_encoder
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse, Response
from starlette.exceptions import HTTPException as StarletteHTTPException

from app.core.errors import LagdeskError
from app.store.database import storage_error_text
from app.web.security import SAFE_METHODS
from app.web.templating import templates

API_PREFIX = "/api/"


def status_of(exc: LagdeskError) -> int:
    """The HTTP status an error class carries (``http_status``: 404 unknown series or run, 409
    stale verdict or busy analysis, 429 a series already busy with a forecast check or fit, 400
    unusable file, 413 file too large, 403 form without its CSRF token, 503 database that cannot
    be used, 422 otherwise)."""
    return exc.http_status


def error_response(request: Request, status: int, message: str, extra: dict | None = None,
                   headers: Mapping[str, str] | None = None) -> Response:
    if request.url.path.startswith(API_PREFIX):
        return JSONResponse({"detail": message, **(extra or {})}, status_code=status, headers=headers)
    return templates.TemplateResponse(
        request=request, name="error.html", context={"status": status, "message": message}, status_code=status,
        headers=headers,
    )


# Starlette types every handler as taking an Exception; each is registered for one class only.
async def _lagdesk_error(request: Request, exc: Exception) -> Response:
    assert isinstance(exc, LagdeskError)
    extra = exc.details()  # e.g. a stale verdict answers with the verdict as it now is
    return error_response(request, status_of(exc), str(exc), extra)


async def _http_error(request: Request, exc: Exception) -> Response:
    assert isinstance(exc, StarletteHTTPException)
    return error_response(request, exc.status_code, str(exc.detail), headers=exc.headers)


async def _validation_error(request: Request, exc: Exception) -> Response:
    """A request whose parameters or body do not fit the route: 422, the page or the JSON saying
    which field and why. FastAPI's own answer echoes the input, and an input of NaN, Infinity
    or 1e400 cannot be written as JSON: it answered 500; here such an input is echoed as text."""
    assert isinstance(exc, RequestValidationError)
    errors = [{**error, "input": _json_safe(error["input"])} if "input" in error else error for error in exc.errors()]
    if request.url.path.startswith(API_PREFIX):
        return JSONResponse({"detail": jsonable_encoder(errors)}, status_code=422)
    words = "; ".join(f"{'.'.join(str(part) for part in error['loc'][1:]) or 'the request'}: {error['msg']}" for error in errors)
    return error_response(request, 422, words)


def _json_safe(value: object) -> object:
    """``value`` as JSON can hold it: text for a float that is not finite (and for a structure
    holding one)."""
    try:
        json.dumps(jsonable_encoder(value), allow_nan=False)
    except (ValueError, TypeError):
        return repr(value)
    return value


async def _storage_error(request: Request, exc: Exception) -> Response:
    """A full disk, a read-only or damaged file, a database busy past the timeout: 503. A page
    or call that only reads says the database could not be read."""
    assert isinstance(exc, sqlite3.Error)
    return error_response(request, 503, storage_error_text(exc, writing=request.method not in SAFE_METHODS))


def install_error_handlers(app: FastAPI) -> None:
    app.add_exception_handler(LagdeskError, _lagdesk_error)
    app.add_exception_handler(sqlite3.Error, _storage_error)
    app.add_exception_handler(StarletteHTTPException, _http_error)
    app.add_exception_handler(RequestValidationError, _validation_error)
