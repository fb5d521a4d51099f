"""Where the per-series work runs: a process pool on this machine, or a Dask cluster.

This module is the interface the rest of Lagdesk uses: the choice of executor and one
:func:`map_unordered` that sends the work to it. The backends are :mod:`.local` (a forkserver
process pool) and :mod:`.dask` (the optional extra 'dask'); what both need lives in
:mod:`.blas` (one BLAS thread per worker) and :mod:`.chunks`. Imports point one way: this module
imports the backends (when first used, so that a command which runs
nothing does not pay for them), and neither backend imports this module or the other one.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass
from typing import Any

from app.core.errors import LagdeskError

DEFAULT_CHUNK = 4
EXECUTORS = ("local", "dask")


@dataclass(frozen=True)
class ExecutorChoice:
    """Where the per-series work runs: ``local`` (a process pool on this machine) or ``dask``
    (a Dask distributed cluster; ``scheduler`` is its address, or None for a LocalCluster
    started for the run)."""

    kind: str = "local"
    scheduler: str | None = None

    def __post_init__(self) -> None:
        if self.kind not in EXECUTORS:
            raise LagdeskError(f"executor {self.kind!r} is not one of {', '.join(EXECUTORS)}")
        if self.scheduler is not None and self.kind != "dask":
            raise LagdeskError(f"a scheduler address ({self.scheduler}) is only used with the dask executor")


LOCAL = ExecutorChoice()


def default_workers() -> int:
    """One worker per CPU the process may use."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:
        return max(1, os.cpu_count() or 1)


def map_unordered(
    func: Callable[[Any], Any], items: Iterable[Any], workers: int, chunk: int = DEFAULT_CHUNK, executor: ExecutorChoice = LOCAL
) -> Iterator[Any]:
    """Apply ``func`` to every item on the chosen executor, yielding results as they complete.

    Parameters
    ----------
    func : callable
        Importable by name: the workers receive it by reference.
    items : iterable
        Pulled lazily, ``chunk`` at a time.
    workers : int
        Worker processes (locally: 1 runs the work in this process; on dask: the size of the
        LocalCluster started when ``executor`` names no scheduler).
    chunk : int
        Items per task sent to a worker.
    executor : ExecutorChoice
        Local pool (the default) or Dask cluster.

    Raises
    ------
    LagdeskError
        On dask, when dask is not installed or the scheduler cannot be reached.
    """
    if executor.kind == "dask":
        # Imported only here: dask is an optional extra, and the module refuses to load without it.
        from app.jobs.executors.dask import map_unordered_dask

        yield from map_unordered_dask(func, items, workers, chunk, executor.scheduler)
        return
    # Imported here too: the process pool's modules cost a command that runs nothing (``--help``).
    from app.jobs.executors.local import map_unordered_local

    yield from map_unordered_local(func, items, workers, chunk)
