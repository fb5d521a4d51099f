"""The same per-series work as the local pool, sent to a Dask distributed cluster.

Chunks of items go to the cluster as tasks and their results come back with
``distributed.as_completed``, in order of completion, to this process, which stays the only one
that touches the database: workers receive a chunk of series values and return plain results.
At most two chunks per worker thread are in flight, so a large portfolio is pulled from the
database as the cluster takes it rather than all at once.

Without a scheduler address a ``LocalCluster`` is started for the run (one single-threaded
worker process per requested worker) and closed after it. Every worker, of a local or of an
existing cluster, limits its BLAS pools to one thread through a worker plugin, as the local
pool's workers do. The workers of an existing cluster need the same Lagdesk (and statsmodels)
installed as this machine, since the work is sent by reference to :mod:`app.jobs.work`.

dask is an optional dependency (``pip install 'lagdesk[dask]'``): this module is imported only
when the dask executor is chosen, and says how to install it when it is missing.
"""

from __future__ import annotations

import logging
from collections.abc import Callable, Iterable, Iterator
from contextlib import contextmanager
from typing import Any

from app.core.errors import LagdeskError
from app.jobs.executors.blas import pin_blas_threads
from app.jobs.executors.chunks import chunks, run_chunk

try:
    import distributed
except ImportError as missing:
    raise LagdeskError(
        f"the dask executor needs dask's distributed scheduler, which is not installed ({missing}): "
        "install lagdesk[dask] (pip install 'lagdesk[dask]')"
    ) from None

CONNECT_TIMEOUT_S = 20
CHUNKS_PER_THREAD = 2


class PinBlasThreads(distributed.WorkerPlugin):
    """Worker plugin: limit the worker's BLAS pools to one thread when it joins the cluster."""

    name = "lagdesk-blas-one-thread"

    def setup(self, worker) -> None:
        pin_blas_threads()


def map_unordered_dask(
    func: Callable[[Any], Any], items: Iterable[Any], workers: int, chunk: int, scheduler: str | None = None
) -> Iterator[Any]:
    """Apply ``func`` to every item on a Dask cluster, yielding results as they complete.

    Parameters
    ----------
    func : callable
        Importable by name on the workers (it is sent by reference).
    items : iterable
        Pulled lazily, ``chunk`` at a time.
    workers : int
        Size of the LocalCluster started when ``scheduler`` is None; ignored otherwise (the
        cluster has the workers it has).
    chunk : int
        Items per task.
    scheduler : str, optional
        Address of a running scheduler, e.g. ``tcp://10.0.0.5:8786``.

    Raises
    ------
    LagdeskError
        When the scheduler cannot be reached.
    """
    with connect(scheduler, workers) as client:
        client.register_plugin(PinBlasThreads())
        in_flight = CHUNKS_PER_THREAD * max(1, sum(client.nthreads().values()))
        batches = chunks(items, chunk)
        running = distributed.as_completed()

        def submit_next() -> None:
            batch = next(batches, None)
            if batch is not None:
                running.add(client.submit(run_chunk, func, batch, pure=False))

        for _ in range(in_flight):
            submit_next()
        for future in running:
            results = future.result()
            submit_next()
            yield from results


@contextmanager
def connect(scheduler: str | None, workers: int) -> Iterator[distributed.Client]:
    """A client of the scheduler at ``scheduler``, or of a LocalCluster of ``workers``
    single-threaded worker processes started for the occasion and closed after it."""
    if scheduler is None:
        with distributed.LocalCluster(
            n_workers=max(1, workers), threads_per_worker=1, processes=True,
            dashboard_address=None, silence_logs=logging.ERROR,
        ) as cluster, distributed.Client(cluster) as client:
            yield client
        return
    try:
        client = distributed.Client(scheduler, timeout=CONNECT_TIMEOUT_S)
    except (OSError, TimeoutError, ValueError) as exc:
        raise LagdeskError(f"cannot reach the Dask scheduler at {scheduler} ({type(exc).__name__}: {exc})") from None
    with client:
        yield client
