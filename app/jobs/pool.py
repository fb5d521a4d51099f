"""A process pool for per-series work, with BLAS threads pinned to one per worker.

statsmodels fits are small dense problems; with OpenBLAS' default threading every worker would
start one thread per core and they fight over the cores (measured here: fits 21-45x slower on a
busy 2-core machine). Each worker therefore limits BLAS to one thread when it starts, and the
series are sent in chunks so the pool's overhead stays small next to the fits. Results come
back in order of completion, so progress can be shown as they land.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Iterable, Iterator
from concurrent.futures import FIRST_COMPLETED, Future, ProcessPoolExecutor, wait
from typing import Any

from threadpoolctl import threadpool_limits

DEFAULT_CHUNK = 4
_limits = None


def default_workers() -> int:
    """One worker per CPU the process may use."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:
        return max(1, os.cpu_count() or 1)


def pin_blas_threads() -> None:
    """Limit BLAS/OpenMP pools of this process to one thread (kept for the process' life)."""
    global _limits
    _limits = threadpool_limits(limits=1)


def _run_chunk(func: Callable[[Any], Any], chunk: list[Any]) -> list[Any]:
    return [func(item) for item in chunk]


def map_unordered(func: Callable[[Any], Any], items: Iterable[Any], workers: int, chunk: int = DEFAULT_CHUNK) -> Iterator[Any]:
    """Apply ``func`` to every item, yielding results as they complete.

    With ``workers == 1`` the work runs in this process (no pool to start); otherwise in a
    process pool whose workers pin BLAS to one thread. At most ``2 * workers`` chunks are in
    flight, so a large portfolio is never held in the pool's queue all at once.
    """
    if workers <= 1:
        with threadpool_limits(limits=1):
            for item in items:
                yield func(item)
        return
    iterator = iter(items)
    with ProcessPoolExecutor(max_workers=workers, initializer=pin_blas_threads) as pool:
        pending: set[Future] = set()

        def submit_next() -> bool:
            batch = [x for _, x in zip(range(chunk), iterator)]
            if batch:
                pending.add(pool.submit(_run_chunk, func, batch))
            return bool(batch)

        for _ in range(2 * workers):
            if not submit_next():
                break
        while pending:
            done, _ = wait(pending, return_when=FIRST_COMPLETED)
            for future in done:
                pending.discard(future)
                yield from future.result()
                submit_next()
