"""Analysis run records: when, which engine and settings, and progress readable by the web page.

``done`` counts the series finished so far (analysed or failed) and ``failed`` those of them
that failed, so ``done / total`` is the progress. A run whose process died is left ``running``
until someone who can tell that it died (the run lock is free:
:func:`app.jobs.run_lock.close_abandoned_runs`) closes it with :func:`interrupt_running_runs`.
"""

from __future__ import annotations

import json
from datetime import datetime

import sqlite_utils

from app.core.errors import LagdeskError
from app.store.database import insert_row, utc_now

FINAL_STATES = ("finished", "interrupted", "failed")

_COLUMNS = "run_id, started_at, updated_at, finished_at, engine_version, settings, total, done, failed, state, duration_s"


class UnknownRun(LagdeskError):
    """A run id that the database does not hold."""

    http_status = 404

    def __init__(self, run_id: int) -> None:
        self.run_id = run_id
        super().__init__(f"no run {run_id} in the database")


def start_run(db: sqlite_utils.Database, settings: dict, total: int, engine_version: str) -> int:
    """Record the start of a run over ``total`` series; returns its id."""
    if total < 0:
        raise LagdeskError(f"a run's total ({total}) must be >= 0")
    now = utc_now()
    return insert_row(db, "runs", {
        "started_at": now,
        "updated_at": now,
        "engine_version": engine_version,
        "settings": json.dumps(settings),
        "total": total,
        "done": 0,
        "failed": 0,
        "state": "running",
    })


def record_progress(db: sqlite_utils.Database, run_id: int, done: int, failed: int) -> None:
    """Set a running run's counts (totals so far, not increments)."""
    if done < 0 or failed < 0:
        raise LagdeskError(f"run {run_id}: done ({done}) and failed ({failed}) must be >= 0")
    _update(db, run_id, "done = ?, failed = ?, updated_at = ?", [done, failed, utc_now()])


def finish_run(db: sqlite_utils.Database, run_id: int, state: str) -> None:
    """Close a run as ``finished``, ``interrupted`` or ``failed``, recording its duration."""
    if state not in FINAL_STATES:
        raise LagdeskError(f"run {run_id}: final state must be one of {', '.join(FINAL_STATES)}, not {state!r}")
    now = utc_now()
    started = get_run(db, run_id)["started_at"]
    _update(db, run_id, "state = ?, finished_at = ?, updated_at = ?, duration_s = ?", [state, now, now, _seconds(started, now)])


def running_run_ids(db: sqlite_utils.Database) -> list[int]:
    """The runs whose record still says ``running``, oldest first."""
    return [run_id for (run_id,) in db.execute("SELECT run_id FROM runs WHERE state = 'running' ORDER BY run_id")]


def interrupt_running_runs(db: sqlite_utils.Database) -> list[int]:
    """Close every run still marked ``running`` as ``interrupted``; their ids.

    Only for a caller that knows no process is running them any more (it holds the run lock).
    """
    run_ids = running_run_ids(db)
    for run_id in run_ids:
        finish_run(db, run_id, "interrupted")
    return run_ids


def _update(db: sqlite_utils.Database, run_id: int, assignments: str, params: list) -> None:
    if db.execute(f"UPDATE runs SET {assignments} WHERE run_id = ?", params + [run_id]).rowcount != 1:
        raise UnknownRun(run_id)


def get_run(db: sqlite_utils.Database, run_id: int) -> dict:
    """One run: ``{"run_id", "started_at", "updated_at", "finished_at", "engine_version",
    "settings", "total", "done", "failed", "state", "duration_s"}``; a running run's duration
    is the time since it started."""
    runs = _select(db, "WHERE run_id = ?", [run_id])
    if not runs:
        raise UnknownRun(run_id)
    return runs[0]


def list_runs(db: sqlite_utils.Database, limit: int = 50) -> list[dict]:
    """The latest runs, newest first."""
    return _select(db, "ORDER BY run_id DESC LIMIT ?", [limit])


def latest_run(db: sqlite_utils.Database) -> dict | None:
    """The most recent run, or None before the first one."""
    runs = list_runs(db, limit=1)
    return runs[0] if runs else None


def _select(db: sqlite_utils.Database, clause: str, params: list) -> list[dict]:
    runs = list(db.query(f"SELECT {_COLUMNS} FROM runs {clause}", params))
    now = utc_now()
    for run in runs:
        run["settings"] = json.loads(run["settings"])
        if run["duration_s"] is None:
            run["duration_s"] = _seconds(run["started_at"], now)
    return runs


def _seconds(start: str, end: str) -> float:
    return (datetime.fromisoformat(end) - datetime.fromisoformat(start)).total_seconds()
