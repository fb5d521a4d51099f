"""Dependencies shared by the page and API routes: settings, a database per request, the reviewer."""

from __future__ import annotations

from collections.abc import Iterator

import sqlite_utils
from fastapi import Depends, Request

from app.config import Settings
from app.store.database import open_database

REVIEWER_COOKIE = "lagdesk_reviewer"
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
