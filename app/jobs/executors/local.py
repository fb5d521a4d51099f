"""The per-series work on this machine: a pool of worker processes, or this process alone.

Start method. The pool's workers are started by a *forkserver* where the platform has one (Linux,
macOS), else by *spawn*. A plain ``fork`` copies the parent as it is at that moment, and an
analysis started from the web page runs in a thread of uvicorn's process: forking there copies
whatever locks the server's other threads hold (logging, allocators, the BLAS thread pool) into
a child that has none of those threads to release them, and it hands the children the
process' open database connections. The forkserver is a small clean process started once per
process (from a fresh interpreter, with :mod:`app.jobs.preload` imported in advance), and every
worker is forked from it, so later pools start fast and no worker inherits the parent's open
files or database connections. The cost is the first pool's start (one interpreter
importing statsmodels) and that the work function must be importable by name.

Orphans. If the parent is killed outright (``kill -9``, the OOM killer), its pool's workers
would wait on their task queue forever, because every worker holds a write end of it. So each
worker starts a daemon thread that waits for the process that asked for the pool to end and
then ends the worker: on Linux it blocks on a pidfd of that process (no polling, woken by the
kernel at its exit), elsewhere it checks once a second. ``prctl(PR_SET_PDEATHSIG)`` does not do
here: it watches the worker's *parent*, which is the forkserver, and the forkserver outlives the
process that started it for as long as any of its children (the workers) hold the pipe that
keeps it alive. Once the workers are gone the forkserver and multiprocessing's resource tracker
see their pipes close and exit too.
"""

from __future__ import annotations

import itertools
import multiprocessing
import os
import queue
import select
import threading
import time
from collections.abc import Callable, Generator, Iterable, Iterator
from concurrent.futures import Future, ProcessPoolExecutor
from typing import Any

from threadpoolctl import threadpool_limits

from app.jobs.executors.blas import pin_blas_threads
from app.jobs.executors.chunks import chunks, run_chunk

# Imported once by the forkserver, so each worker starts with the engine (and its compiled
# likelihood) already loaded. multiprocessing ignores a preload that fails to import, so a
# wrong name here only shows as slower first series.
PRELOADED_MODULES = ["app.jobs.preload"]
PARENT_POLL_S = 1.0
ORPHAN_EXIT_CODE = 1
# A job of at most this many items runs in this process: the pool's start (its forkserver
# importing the engine and running it once) costs more than two short series take. `lagdesk
# identify` on demo series, 2 workers against this process, machine under load: one series
# 7.2 s against 3.5 s, two 12.0 s against 4.7 s (four 4.6 s against 2.7 s, but one monthly
# seasonal series takes about 9 s, so the pool pays from three of those).
IN_PROCESS_MAX_ITEMS = 2


def exit_with_parent(creator_pid: int) -> None:
    """End this worker process when ``creator_pid`` (the process that asked for the pool) ends.

    If that process is already gone when this runs, the worker leaves at once.
    """
    threading.Thread(target=_exit_when_gone, args=(creator_pid,), name="lagdesk-parent-watch", daemon=True).start()


def _exit_when_gone(pid: int) -> None:
    try:
        handle = os.pidfd_open(pid)
    except ProcessLookupError:
        os._exit(ORPHAN_EXIT_CODE)
    except (AttributeError, OSError):  # no pidfd (not Linux, or a kernel before 5.3)
        while _process_exists(pid):
            time.sleep(PARENT_POLL_S)
        os._exit(ORPHAN_EXIT_CODE)
    select.select([handle], [], [])
    os._exit(ORPHAN_EXIT_CODE)


def _process_exists(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def start_worker(creator_pid: int) -> None:
    """Initializer of every pool worker: exit with the parent, one BLAS thread."""
    exit_with_parent(creator_pid)
    pin_blas_threads()


def pool_context() -> multiprocessing.context.BaseContext:
    """The forkserver context where there is one, else spawn (see the module notes)."""
    if "forkserver" in multiprocessing.get_all_start_methods():
        context = multiprocessing.get_context("forkserver")
        context.set_forkserver_preload(PRELOADED_MODULES)
        return context
    return multiprocessing.get_context("spawn")


def map_unordered_local(func: Callable[[Any], Any], items: Iterable[Any], workers: int, chunk: int) -> Iterator[Any]:
    """Apply ``func`` to every item on this machine, yielding results as they complete.

    Parameters
    ----------
    func : callable
        Importable by name (the pool's workers receive it by reference).
    items : iterable
        Pulled lazily, ``chunk`` at a time.
    workers : int
        Worker processes. With 1 or fewer, or for a job of at most :data:`IN_PROCESS_MAX_ITEMS`
        items, the work runs in this process, BLAS on one thread, and no pool is started.
    chunk : int
        Items per task sent to a worker.

    Notes
    -----
    At most ``2 * workers`` chunks are in flight, so a large portfolio is never held in the
    pool's queue all at once. While the pool starts, this process works through the chunks
    after those (:func:`_work_while_starting`), so it does not wait idle for the start.
    """
    iterator = iter(items)
    head = list(itertools.islice(iterator, IN_PROCESS_MAX_ITEMS + 1))
    if workers <= 1 or len(head) <= IN_PROCESS_MAX_ITEMS:
        with threadpool_limits(limits=1):
            for item in itertools.chain(head, iterator):
                yield func(item)
        return
    batches = chunks(itertools.chain(head, iterator), chunk)
    first = list(itertools.islice(batches, 2 * workers))
    with ProcessPoolExecutor(max_workers=workers, mp_context=pool_context(), initializer=start_worker, initargs=(os.getpid(),)) as pool:
        # Futures arrive here in the order they finish (a callback run as each one completes);
        # wait(FIRST_COMPLETED) would hand over a set when several finish together, in no order.
        finished: queue.SimpleQueue[Future] = queue.SimpleQueue()

        def submit(batch: list[Any]) -> None:
            pool.submit(run_chunk, func, batch).add_done_callback(finished.put)

        # The first submit starts the workers and returns only once the forkserver has imported
        # the engine and run it once (about 2 s): it is made in a thread, and this process works
        # through the chunks after the first ones meanwhile.
        starter = _Starter(submit, first)
        in_flight = len(first)
        rest = yield from _work_while_starting(func, batches, starter)
        starter.join()
        if rest:
            submit(rest)
            in_flight += 1
        while in_flight:
            future = finished.get()
            in_flight -= 1
            yield from future.result()
            batch = next(batches, None)
            if batch is not None:
                submit(batch)
                in_flight += 1


class _Starter(threading.Thread):
    """Submits the first chunks to a pool that is still starting, in its own thread."""

    def __init__(self, submit: Callable[[list[Any]], None], batches: list[list[Any]]) -> None:
        super().__init__(name="pool-starter", daemon=True)
        self.submit, self.batches = submit, batches
        self.error: BaseException | None = None
        self.start()

    def run(self) -> None:
        try:
            for batch in self.batches:
                self.submit(batch)
        except BaseException as exc:  # handed to the caller by join()
            self.error = exc

    def join(self, timeout: float | None = None) -> None:
        """Wait for the submits, and raise their error if they failed."""
        super().join(timeout)
        if self.error is not None:
            raise self.error


def _work_while_starting(
    func: Callable[[Any], Any], batches: Iterator[list[Any]], starter: _Starter
) -> Generator[Any, None, list[Any] | None]:
    """Results of the items this process takes while the starter is still submitting (the
    workers are not running yet); returns the rest of the chunk in hand for the pool.

    An item at a time, so this process is back to only collecting results within one item of
    the workers' start."""
    with threadpool_limits(limits=1):
        while starter.is_alive():
            batch = next(batches, None)
            if batch is None:
                return None
            for i, item in enumerate(batch):
                if not starter.is_alive():
                    return batch[i:]
                yield func(item)
    return None

