"""One analysis run at a time per database: an OS lock on a file beside the database.

A run holds the lock for as long as it lasts. The operating system drops the lock with the
process that held it, so a run record still marked ``running`` while the lock is free was left
by a run that died: :func:`close_abandoned_runs` closes it as ``interrupted``. Kept apart from
:mod:`app.jobs.analyze` so that ``lagdesk status`` and the dashboard can do that without loading
the engine.
"""

from __future__ import annotations

import fcntl
import os
import threading
from pathlib import Path
from typing import TYPE_CHECKING

from app.store.runs import interrupt_running_runs, running_run_ids

if TYPE_CHECKING:
    import sqlite_utils

LOCK_SUFFIX = "-analysis.lock"

# Within one process the OS lock cannot tell two threads apart (POSIX record locks belong to
# the process), so starts are serialised here and the runs this process holds are kept by path.
start_guard = threading.Lock()
held_runs: dict[Path, int] = {}


def close_abandoned_runs(db: sqlite_utils.Database, db_path: str | Path) -> list[int]:
    """Close as ``interrupted`` the runs still marked ``running`` whose process has died (no
    process holds the run lock, and this one runs none); their ids. Costs one query while no run
    is marked running.
    """
    if not running_run_ids(db):
        return []
    path = Path(db_path).resolve()
    with start_guard:
        # Within this process the lock cannot be probed: a second lock on the file would be
        # granted, and releasing it would release the live run's too.
        if path in held_runs:
            return []
        lock_fd = acquire_run_lock(path)
        if lock_fd is None:
            return []
        try:
            return interrupt_running_runs(db)
        finally:
            release_lock_fd(lock_fd)


def acquire_run_lock(path: Path) -> int | None:
    """Lock the run-lock file beside the database; None when another process holds it.

    A POSIX record lock (``lockf``) rather than ``flock``: it is not inherited by the pool's
    forked workers, so a worker orphaned by a killed run cannot keep the database locked.
    """
    fd = os.open(f"{path}{LOCK_SUFFIX}", os.O_RDWR | os.O_CREAT, 0o644)
    try:
        fcntl.lockf(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError:
        os.close(fd)
        return None
    return fd


def release_lock_fd(fd: int) -> None:
    fcntl.lockf(fd, fcntl.LOCK_UN)
    os.close(fd)


def release_run(path: Path, fd: int) -> None:
    """Release the lock of this process' run on ``path`` and forget the run."""
    with start_guard:
        held_runs.pop(path, None)
        release_lock_fd(fd)
