"""Analysis runs: the engine over every series that needs it, each result committed as it lands.

The parent process is the database's only writer. Workers receive a series' values and return
the engine's dict; the parent stores each result together with the run's progress in one
transaction, so a run stopped at any moment (Ctrl-C, ``kill -9``, a power cut) loses at most the
series in flight, and the next run picks those up because their analysis is still missing or
stale.

One run at a time per database: a run holds an OS lock on a file beside the database for as
long as it lasts. The operating system drops the lock with the process that held it, so a run
record still marked ``running`` while the lock is free was left by a run that died: the next run
closes it as ``interrupted``, and so does the dashboard when it shows runs
(:func:`app.jobs.run_lock.close_abandoned_runs`).
"""

from __future__ import annotations

import logging
import threading
import time
from collections.abc import Callable, Iterator
from dataclasses import asdict, dataclass, field
from pathlib import Path

import sqlite_utils

from app.core.engine_version import ENGINE_VERSION
from app.core.errors import LagdeskError
from app.core.identify import LONG_SERIES, SEARCH_WINDOW, EngineOptions
from app.core.seasonality import default_period
from app.jobs.executors import LOCAL, ExecutorChoice, default_workers, map_unordered
from app.jobs.recheck import recheck_after_analysis
from app.jobs.run_lock import LOCK_SUFFIX as LOCK_SUFFIX  # re-exported: app.web's tests import it from here
from app.jobs.run_lock import acquire_run_lock, held_runs, release_lock_fd, release_run, start_guard
from app.jobs.work import SeriesOutcome, SeriesTask, identify_task
from app.store.analyses import save_analysis, save_failure
from app.store.database import UnknownSeries, open_database, write_transaction
from app.store.runs import finish_run, get_run, interrupt_running_runs, list_runs, record_progress, start_run
from app.store.series import load_series, series_fingerprint, series_ids_to_analyse, series_sizes

# How long a caller waits for the run record of a run that holds the lock but is still starting.
STARTING_RUN_WAIT_S = 5.0
_STARTING_RUN_POLL_S = 0.05
# The whole-series refits of a long series cost this many times less per point than its search
# on the recent points: 0.18 s against 7.5 s for the hourly JFK temperatures (1,344 points, 672
# searched; tests/benchmarks/real_forecasts.py), per point 1/80.
REFIT_SHARE = 80

log = logging.getLogger(__name__)


class AnalysisInProgress(LagdeskError):
    """Another analysis run on the same database has not finished yet."""

    http_status = 409

    def __init__(self, db_path: Path, run_id: int | None) -> None:
        self.run_id = run_id
        which = f"run {run_id}" if run_id is not None else "a run that is starting"
        super().__init__(f"{db_path}: another analysis ({which}) is in progress; wait for it to finish")


@dataclass
class RunProgress:
    """Counts of a run so far (``done`` includes the ``failed`` series), the failures'
    problem dicts (``series_id``, ``message``) and the decided series the run sent back to
    ``recheck`` (``series_id``, ``reason``)."""

    run_id: int
    total: int
    done: int = 0
    failed: int = 0
    problems: list[dict] = field(default_factory=list)
    rechecked: list[dict] = field(default_factory=list)


ProgressCallback = Callable[[RunProgress], None]


@dataclass
class AnalysisRun:
    """A started run: its record exists, its lock is held, its series are chosen."""

    db: sqlite_utils.Database
    db_path: Path
    lock_fd: int
    run_id: int
    series_ids: list[str]
    workers: int
    options: EngineOptions
    executor: ExecutorChoice = LOCAL
    _fingerprints: dict[str, str] = field(default_factory=dict)

    def execute(self, on_progress: ProgressCallback | None = None) -> dict:
        """Analyse the chosen series, committing each result; returns the closed run record.

        Ctrl-C closes the run as ``interrupted`` and any other error as ``failed``; both are
        raised again. Either way the results committed so far stay.
        """
        progress = RunProgress(self.run_id, len(self.series_ids))
        try:
            if on_progress:
                on_progress(progress)
            for outcome in map_unordered(identify_task, self._tasks(), self.workers, executor=self.executor):
                self._commit(outcome, progress)
                if on_progress:
                    on_progress(progress)
        except KeyboardInterrupt:
            self._close("interrupted")
            raise
        except BaseException:
            self._close("failed")
            raise
        return self._close("finished")

    def _tasks(self) -> Iterator[SeriesTask]:
        # Pulled lazily by the pool, in this thread. The fingerprint is read before the values:
        # if an import lands in between, the result is stored under the older fingerprint and
        # shows as stale, never as current for data it did not see.
        for series_id in self.series_ids:
            fingerprint = series_fingerprint(self.db, series_id)
            if fingerprint is None:  # series are never deleted; a run only chooses stored ones
                raise UnknownSeries(series_id)
            self._fingerprints[series_id] = fingerprint
            yield SeriesTask(series_id, load_series(self.db, series_id), None, self.options)

    def _commit(self, outcome: SeriesOutcome, progress: RunProgress) -> None:
        fingerprint = self._fingerprints.pop(outcome.series_id)
        result = outcome.result
        problem = outcome.problem or {"series_id": outcome.series_id, "message": "the analysis returned nothing"}
        with write_transaction(self.db):
            if result is None:
                save_failure(self.db, outcome.series_id, fingerprint, problem["message"], self.run_id)
            else:
                save_analysis(self.db, outcome.series_id, fingerprint, result, self.run_id)
            record_progress(self.db, self.run_id, progress.done + 1, progress.failed + int(result is None))
        reason = recheck_after_analysis(self.db, outcome.series_id, result)
        if reason is not None:
            progress.rechecked.append({"series_id": outcome.series_id, "reason": reason})
        progress.done += 1
        if result is None:
            progress.failed += 1
            progress.problems.append(problem)

    def _close(self, state: str) -> dict:
        try:
            finish_run(self.db, self.run_id, state)
            return get_run(self.db, self.run_id)
        finally:
            self.db.close()
            release_run(self.db_path, self.lock_fd)


def begin_analysis(
    db_path: str | Path,
    *,
    workers: int,
    everything: bool = False,
    options: EngineOptions = EngineOptions(),
    executor: ExecutorChoice = LOCAL,
) -> AnalysisRun:
    """Take the database's run lock, close runs left by dead processes, choose the series
    (missing or stale analysis, or all with ``everything``) and record the start of a run.

    Raises
    ------
    AnalysisInProgress
        When another run on this database is still going (``.run_id`` names it).
    LagdeskError
        When ``workers`` is below 1 or the database cannot be opened.
    """
    if workers < 1:
        raise LagdeskError(f"workers ({workers}) must be at least 1")
    path = Path(db_path).resolve()
    with start_guard:
        if path in held_runs:
            raise AnalysisInProgress(path, held_runs[path])
        db = open_database(path)
        try:
            lock_fd = acquire_run_lock(path)
            if lock_fd is None:
                raise AnalysisInProgress(path, _running_run_id(db))
            try:
                interrupt_running_runs(db)
                series_ids = heaviest_first(series_ids_to_analyse(db, everything), series_sizes(db), options.period)
                settings = {"workers": workers, "everything": everything, "options": asdict(options), "executor": asdict(executor)}
                run_id = start_run(db, settings, len(series_ids), ENGINE_VERSION)
            except BaseException:
                release_lock_fd(lock_fd)
                raise
        except BaseException:
            db.close()
            raise
        held_runs[path] = run_id
    return AnalysisRun(db, path, lock_fd, run_id, series_ids, workers, options, executor)


def expected_cost(n: int, freq: str, period_option: int | str | None) -> int:
    """A rough rank of a series' share of a run's CPU, for :func:`heaviest_first`: ``n * s**2``.

    One likelihood evaluation costs O(n r) by the Chandrasekhar recursions
    (:mod:`app.core.likelihood`), the state dimension r of a seasonal order grows with the
    period s (s + 1 for a seasonal AR or MA term of order one), and a seasonal series has more
    candidates to fit; the extra factor of s stands for those. A series longer than
    :data:`~app.core.identify.LONG_SERIES` is searched on its last
    :data:`~app.core.identify.SEARCH_WINDOW` points, and only a few candidates are refitted on
    all ``n``: its ``n`` counts as the window plus ``n /`` :data:`REFIT_SHARE`. Only the order
    of these numbers is used; the search's own choices (how many candidates, interventions)
    are not known before.
    """
    period = period_option if isinstance(period_option, int) else default_period(freq) if period_option is not None else None
    searched = n if n <= LONG_SERIES else SEARCH_WINDOW + n // REFIT_SHARE
    return searched * max(period or 1, 1) ** 2


def heaviest_first(series_ids: list[str], sizes: dict[str, tuple[int, str]], period_option: int | str | None) -> list[str]:
    """The series in the order the workers should take them: the most expensive first.

    Longest processing time first (Graham 1969): with the costly seasonal series at the start,
    the cheap ones fill the workers' remaining time at the end, instead of one worker finishing
    a long hourly series while the others wait. On the demo portfolio (91 series, one hourly
    series taking about a third of the CPU) two workers went from 1.33x to 1.67x one, together
    with the parent's work while the pool starts (README).
    Ties keep the id order.

    References
    ----------
    .. [1] Graham, R.L. (1969). Bounds on multiprocessing timing anomalies. *SIAM J. Appl.
       Math.* 17, 416-429.
    """
    return sorted(series_ids, key=lambda series_id: -expected_cost(*sizes[series_id], period_option))


def run_analysis(
    db_path: str | Path,
    *,
    workers: int,
    everything: bool = False,
    options: EngineOptions = EngineOptions(),
    executor: ExecutorChoice = LOCAL,
    on_progress: ProgressCallback | None = None,
) -> dict:
    """Analyse every series whose analysis is missing or stale (or all), in this thread.

    Returns the run record (:func:`app.store.runs.get_run`) once the run is closed.
    ``on_progress`` is called once the series are chosen and after every committed result.
    """
    run = begin_analysis(db_path, workers=workers, everything=everything, options=options, executor=executor)
    return run.execute(on_progress)


def start_background_analysis(db_path: str | Path, workers: int | None = None) -> int:
    """Start a run of the missing and stale series in a background thread; returns its id at once.

    The progress is read from the database (:func:`app.store.runs.get_run`). When a run on this
    database is already going, in this process or another, its id is returned instead.
    """
    try:
        run = begin_analysis(db_path, workers=workers or default_workers())
    except AnalysisInProgress as busy:
        if busy.run_id is None:
            raise
        return busy.run_id
    threading.Thread(target=_execute_logged, args=(run,), name=f"lagdesk-run-{run.run_id}", daemon=True).start()
    return run.run_id


def _execute_logged(run: AnalysisRun) -> None:
    try:
        run.execute()
    except Exception:
        log.exception("analysis run %s failed", run.run_id)


def _running_run_id(db: sqlite_utils.Database) -> int | None:
    """The id of the run that holds the lock; it may still be writing its record."""
    deadline = time.monotonic() + STARTING_RUN_WAIT_S
    while True:
        running = [run["run_id"] for run in list_runs(db, limit=1) if run["state"] == "running"]
        if running or time.monotonic() >= deadline:
            return running[0] if running else None
        time.sleep(_STARTING_RUN_POLL_S)
