"""Dependencies shared by the page and API routes: settings, a database per request, the
reviewer, and one expensive computation per series at a time."""

from __future__ import annotations

import os
import re
import threading
from collections.abc import Callable, Iterator, Sequence
from contextlib import AbstractContextManager, contextmanager
from urllib.parse import quote, unquote

import sqlite_utils
from fastapi import Depends, Request, Response

from app.config import Settings
from app.core.errors import LagdeskError, OrderError
from app.core.series_ids import printable
from app.core.vocabulary import DECIDED
from app.jobs.run_lock import close_abandoned_runs
from app.review.export import build_orders_document
from app.store.database import open_database

REVIEWER_COOKIE = "lagdesk_reviewer"
COOKIE_MAX_AGE_S = 365 * 24 * 3600
# The largest integer SQLite stores: ids, versions and offsets beyond it are refused with 422
# at the door instead of overflowing in the driver.
SQLITE_MAX_INTEGER = 2**63 - 1
_ASCII_DIGITS = re.compile(r"[0-9]+")
REVIEWER_MAX_LENGTH = 80
# How long a reviewer's save waits for the series' computation slot before it is told the
# server is busy (a forecast check of the same series, or as many fits as CPUs, are running).
SAVE_WAIT_S = 60.0


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


def get_runs_db(db: sqlite_utils.Database = Depends(get_db), settings: Settings = Depends(get_settings)) -> sqlite_utils.Database:
    """The request's database, with the runs of processes that died closed as interrupted
    first, so a page that shows runs never shows a dead one as running."""
    close_abandoned_runs(db, settings.db_path)
    return db


class SeriesBusy(LagdeskError):
    """A forecast check or custom fit asked for while one of the same series is running."""

    http_status = 429


class SeriesSlots:
    """The series with an expensive computation (a forecast check, a custom fit) running in
    this server: each may have one at a time, so repeated requests cannot pile work on it, and
    the server at most ``limit`` at once (one per CPU by default), so that checks asked on many
    series at once cannot take every thread from the pages (45 of them kept the queue page from
    answering for a minute)."""

    def __init__(self, limit: int | None = None) -> None:
        self._lock = threading.Condition()
        self._busy: set[str] = set()
        self.limit = limit or os.cpu_count() or 1

    @contextmanager
    def hold(self, series_id: str, wait: float = 0.0) -> Iterator[None]:
        """Run the block as the series' one computation, once a slot is free: at once, or
        within ``wait`` seconds (a reviewer's save waits its turn rather than being refused).

        Raises
        ------
        SeriesBusy
            When another computation of ``series_id`` has not finished, or ``limit`` are running
            (still, after ``wait`` seconds).
        """
        with self._lock:
            self._lock.wait_for(lambda: series_id not in self._busy and len(self._busy) < self.limit, timeout=wait)
            if series_id in self._busy:
                raise SeriesBusy(
                    f"series {series_id!r} is already busy with a forecast check or fit; "
                    "try again once it has finished"
                )
            if len(self._busy) >= self.limit:
                raise SeriesBusy(
                    f"the server is busy with {len(self._busy)} forecast checks or fits, as many as it runs at once; "
                    "try again in a moment"
                )
            self._busy.add(series_id)
        try:
            yield
        finally:
            with self._lock:
                self._busy.discard(series_id)
                self._lock.notify_all()


def computation_slot(request: Request, series_id: str, wait: float = 0.0) -> AbstractContextManager[None]:
    """The series' one slot for a forecast check or a custom fit (:class:`SeriesSlots`), to
    hold while it runs; :class:`SeriesBusy` (429) when it is taken (after ``wait`` seconds)."""
    return request.app.state.series_slots.hold(series_id, wait)


def export_document(request: Request, db: sqlite_utils.Database, statuses: Sequence[str] = DECIDED) -> dict:
    """The export document (:func:`app.review.export.build_orders_document`), built one at a
    time in this server. It refits each decided order whose data changed since its last fit and
    keeps the refit, so an export that waits for another finds those fits kept; side by side,
    each would have refitted them all (four at once took about 22 s each, a server attack)."""
    with request.app.state.export_lock:
        return build_orders_document(db, statuses)


def saving_slot(request: Request, series_id: str) -> Callable[[], AbstractContextManager[None]]:
    """What a save holds while it fits an order (:func:`app.review.decisions.decide`): the
    series' computation slot, waited for up to :data:`SAVE_WAIT_S` seconds. Concurrent saves of
    one series then fit one at a time, and each after the first finds its version stale before
    fitting; saves of many series fit no more at once than the server has slots."""
    return lambda: computation_slot(request, series_id, SAVE_WAIT_S)


def clean_reviewer(name: str | None) -> str:
    """A reviewer name as stored: trimmed, one line, no control or format characters
    (:func:`app.core.series_ids.printable`), at most :data:`REVIEWER_MAX_LENGTH` characters."""
    return printable(" ".join((name or "").split()))[:REVIEWER_MAX_LENGTH]


def get_reviewer(request: Request) -> str:
    """The reviewer name remembered in the browser's cookie ('' until it is given once)."""
    return clean_reviewer(unquote(request.cookies.get(REVIEWER_COOKIE) or ""))


def remember_reviewer(response: Response, reviewer: str) -> Response:
    """``response`` with the reviewer's name in the browser's cookie, percent-encoded: a cookie
    holds Latin-1 alone, and a name such as Łukasz or 名前 is a name all the same."""
    response.set_cookie(REVIEWER_COOKIE, quote(reviewer, safe=""), max_age=COOKIE_MAX_AGE_S, httponly=True, samesite="lax")
    return response


def whole_number(text: str) -> int | None:
    """``text`` as a whole number written in the digits 0-9 alone, else None: Python's ``int``
    also reads other scripts' digits and underscores (``int("1_0")`` is 10), and
    ``str.isdigit`` passes a superscript two that ``int`` then refuses."""
    return int(text) if _ASCII_DIGITS.fullmatch(text.strip()) else None


def whole_numbers(text: str, count: int, name: str) -> list[int]:
    """``count`` comma-separated whole numbers from a query parameter (``order=1,1,0``).

    Raises
    ------
    OrderError
        When ``text`` is not that (answered with 422).
    """
    parsed = [whole_number(part) for part in text.split(",")]
    values = [v for v in parsed if v is not None] if None not in parsed else []
    if len(values) != count:
        raise OrderError(f"{name} must be {count} comma-separated whole numbers, not {text!r}")
    return values
