"""Simulated reviewers for the load and kill tests: HTTP clients that read a series' verdict,
post a decision on the version they read, sometimes deliberately on an outdated version, and
read pages in between. Every request is recorded with its status and latency.

Only loopback addresses are ever contacted (the server is the test's own ``lagdesk serve``).
"""

from __future__ import annotations

import random
import threading
import time
from contextlib import closing
from dataclasses import dataclass, field
from pathlib import Path
from urllib.parse import quote

import httpx
import numpy as np
from corpus_files import csv_bytes, good_values, month_starts, series_rows

from app.store.database import open_database
from app.store.imports import import_portfolio
from app.web.security import CSRF_HEADER, CSRF_PATH

REQUEST_TIMEOUT_S = 30.0
STALE_EVERY = 5  # every fifth post names a version known to be outdated
READ_PAGE_EVERY = 4


@dataclass
class Ack:
    """A verdict the server acknowledged (200)."""

    series_id: str
    version: int
    note: str


@dataclass
class ReviewerLog:
    acks: list[Ack] = field(default_factory=list)
    stale_sent: int = 0
    stale_refused: int = 0  # deliberately stale posts answered 409
    races_lost: int = 0  # fresh posts answered 409 because another reviewer got there first
    statuses: dict[int, int] = field(default_factory=dict)
    latencies_s: list[float] = field(default_factory=list)
    bad: list[str] = field(default_factory=list)  # unexpected answers, with their bodies
    transport_errors: int = 0


def build_portfolio(db_path: Path, series: int) -> list[str]:
    """A database of ``series`` monthly series (imported, not analysed); their ids."""
    ids = [f"shop-{i:03d}/item {i % 7}" for i in range(series)]
    csv_path = db_path.with_suffix(".csv")
    rows = [row for i, sid in enumerate(ids) for row in series_rows(sid, good_values(level=50.0 + i), month_starts(36))]
    csv_path.write_bytes(csv_bytes(rows))
    db = open_database(db_path)
    try:
        import_portfolio(db, csv_path)
    finally:
        db.close()
    return ids


def api_client(base: str) -> httpx.Client:
    """An HTTP client as a script uses the API: it keeps the CSRF cookie ``GET /api/csrf`` sets
    and sends the token in the ``X-CSRF-Token`` header of every request (already opened: close
    it with ``contextlib.closing``)."""
    client = httpx.Client(timeout=REQUEST_TIMEOUT_S)
    client.headers[CSRF_HEADER] = client.get(f"{base}{CSRF_PATH}").json()["csrf_token"]
    return client


def _verdict_url(base: str, series_id: str) -> str:
    return f"{base}/api/series/{quote(series_id, safe='/')}/verdict"


def run_reviewer(
    base: str, reviewer: int, series_ids: list[str], posts: int, log: ReviewerLog,
    stop: threading.Event | None = None,
) -> None:
    """Post ``posts`` decisions (fewer if ``stop`` is set or the server goes away)."""
    rng = random.Random(reviewer)
    with closing(api_client(base)) as client:
        for i in range(posts):
            if stop is not None and stop.is_set():
                return
            series_id = rng.choice(series_ids)
            try:
                current = _timed(client, log, "GET", f"{base}/api/series/{quote(series_id, safe='/')}")
                if current.status_code != 200:
                    log.bad.append(f"GET detail {current.status_code}: {current.text[:300]}")
                    continue
                version = current.json()["verdict"]["version"]
                stale = i % STALE_EVERY == STALE_EVERY - 1 and version > 0
                note = f"reviewer {reviewer} decision {i}"
                body = {
                    "status": "overridden" if i % 2 else "parked", "order": [1, 0, i % 3] if i % 2 else None,
                    "version": version - 1 if stale else version, "note": note, "reviewer": f"r{reviewer}",
                    "confirm": True,  # saved even when the residuals fail Ljung-Box: the decision is what is tested
                }
                answer = _timed(client, log, "POST", _verdict_url(base, series_id), json=body)
                if answer.status_code == 200:
                    if stale:
                        log.bad.append(f"stale post accepted: {answer.text[:300]}")
                    log.acks.append(Ack(series_id, answer.json()["version"], note))
                elif answer.status_code == 409:
                    if stale:
                        log.stale_refused += 1
                    else:
                        log.races_lost += 1
                else:
                    log.bad.append(f"POST {answer.status_code}: {answer.text[:300]}")
                log.stale_sent += stale
                if i % READ_PAGE_EVERY == 0:
                    page = f"{base}/series/{quote(series_id, safe='/')}" if i % 8 else f"{base}/"
                    shown = _timed(client, log, "GET", page)
                    if shown.status_code != 200:
                        log.bad.append(f"GET page {shown.status_code}: {shown.text[:300]}")
            except httpx.TransportError:
                log.transport_errors += 1
                if stop is not None:
                    return  # the server was killed: this reviewer stops
                raise


def _timed(client: httpx.Client, log: ReviewerLog, method: str, url: str, **kwargs) -> httpx.Response:
    started = time.perf_counter()
    response = client.request(method, url, **kwargs)
    log.latencies_s.append(time.perf_counter() - started)
    log.statuses[response.status_code] = log.statuses.get(response.status_code, 0) + 1
    return response


def run_reviewers(base: str, clients: int, series_ids: list[str], posts: int,
                  stop: threading.Event | None = None) -> tuple[list[ReviewerLog], float]:
    """``clients`` reviewers at once; their logs and the wall time taken."""
    logs = [ReviewerLog() for _ in range(clients)]
    threads = [
        threading.Thread(target=run_reviewer, args=(base, c, series_ids, posts, logs[c], stop), daemon=True)
        for c in range(clients)
    ]
    started = time.perf_counter()
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join(timeout=REQUEST_TIMEOUT_S * posts)
    return logs, time.perf_counter() - started


def percentiles_ms(logs: list[ReviewerLog]) -> tuple[float, float]:
    latencies = np.concatenate([np.asarray(log.latencies_s) for log in logs]) * 1000
    return float(np.percentile(latencies, 50)), float(np.percentile(latencies, 95))


def stored_history(db_path: Path) -> list[tuple[str, int, str]]:
    """Every (series_id, version, note) of the verdict history, as stored."""
    db = open_database(db_path)
    try:
        return [tuple(row) for row in db.execute("SELECT series_id, version, note FROM verdict_history").fetchall()]
    finally:
        db.close()
