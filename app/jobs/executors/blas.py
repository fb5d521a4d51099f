"""One BLAS thread per worker, for the local pool's and the Dask cluster's workers alike.

statsmodels fits are small dense problems; with OpenBLAS' default threading every worker would
start one thread per core and they fight over the cores (measured here: fits 21-45x slower on a
busy 2-core machine). Each worker therefore limits BLAS to one thread when it starts, through
threadpoolctl: setting ``OPENBLAS_NUM_THREADS`` after numpy is imported does nothing.
"""

from __future__ import annotations

from threadpoolctl import threadpool_limits

_limits = None


def pin_blas_threads() -> None:
    """Limit BLAS/OpenMP pools of this process to one thread (kept for the process' life)."""
    global _limits
    _limits = threadpool_limits(limits=1)
