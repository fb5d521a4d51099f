"""Dependencies shared by the page and API routes: settings, a database per request, the reviewer."""

from __future__ import annotations

from collections.abc import Iterator

import sqlite_utils
from fastapi import Depends, Request

from app.config import Settings
from app.core.errors import OrderError
from app.store.database import open_database

REVIEWER_COOKIE = "lagdesk_reviewer"
# The largest integer SQLite stores: ids, versions and offsets beyond it are refused with 422
# at the door instead of overflowing in the driver.
SQLITE_MAX_INTEGER = 2**63 - 1
REVIEWER_MAX_LENGTH = 80


def get_settings(request: Request) -> Settings:
    """The settings the app was built with (tests may override this dependency)."""
    return request.app.state.settings


def get_db(settings: Settings = Depends(get_settings)) -> Iterator[sqlite_utils.Database]:
    """One connection per request, closed when the response is done.

    A connection per request rather than one per app: endpoints run in a thread pool, and the
    database runs in WAL mode, so a page stays readable while an analysis run writes.
    """
    db = open_database(settings.db_path)
    try:
        yield db
    finally:
        db.close()


def clean_reviewer(name: str | None) -> str:
    """A reviewer name as stored: trimmed, one line, at most :data:`REVIEWER_MAX_LENGTH` characters."""
    return " ".join((name or "").split())[:REVIEWER_MAX_LENGTH]


def get_reviewer(request: Request) -> str:
    """The reviewer name remembered in the browser's cookie ('' until it is given once)."""
    return clean_reviewer(request.cookies.get(REVIEWER_COOKIE))


def whole_numbers(text: str, count: int, name: str) -> list[int]:
    """``count`` comma-separated whole numbers from a query parameter (``order=1,1,0``).

    Raises
    ------
    OrderError
        When ``text`` is not that (answered with 422).
    """
    try:
        values = [int(part) for part in text.split(",")]
    except ValueError:
        values = []
    if len(values) != count:
        raise OrderError(f"{name} must be {count} comma-separated whole numbers, not {text!r}")
    return values
