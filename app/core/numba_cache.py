"""Where numba keeps the likelihood's compiled code, and whether it still has to compile it.

numba writes the machine code of ``@njit(cache=True)`` functions beside their source, in
``app/core/__pycache__``, or where ``NUMBA_CACHE_DIR`` points. On a read-only install without
that variable it has nowhere to write and fails when the function is defined.
:func:`ensure_writable_cache` runs before numba is imported (:mod:`app.core.likelihood` imports
:func:`njit` from here) and, in that case only, points ``NUMBA_CACHE_DIR`` at a private
directory under the system's temporary directory; when even that cannot be written, :func:`njit`
compiles without a cache (every process compiles again, but nothing fails). :func:`compile_pending` tells
whether the first engine call of this process will compile (about half a minute of CPU, measured
with an empty cache on the development machine), so a command can say so before it goes quiet.
"""

from __future__ import annotations

import os
import sys
import tempfile
from collections.abc import MutableMapping
from pathlib import Path
from typing import Any

CORE_DIR = Path(__file__).resolve().parent
CACHE_ENV = "NUMBA_CACHE_DIR"
# Measured 2026-12-04 with an empty cache (python -c 'import app.jobs.preload'): 47 s of CPU on
# a machine busy with other work, 36 s before the missing-point route of app.core.likelihood.
COMPILE_SECONDS = 45
COMPILE_NOTICE = f"Compiling the likelihood once (about {COMPILE_SECONDS} s of CPU); later runs reuse it."


def _writable(directory: Path) -> bool:
    """Whether a file can be created in ``directory`` (created if missing)."""
    try:
        directory.mkdir(parents=True, exist_ok=True)
        with tempfile.NamedTemporaryFile(dir=directory):
            return True
    except OSError:
        return False


def ensure_writable_cache(environ: MutableMapping[str, str] = os.environ, package_dir: Path = CORE_DIR) -> bool:
    """Make sure numba has a cache directory it can write; returns whether one is in place.

    The places numba itself tries come first: ``NUMBA_CACHE_DIR`` when set, then
    ``package_dir/__pycache__``. When neither can be written, ``NUMBA_CACHE_DIR`` is pointed at
    a private directory under the system's temporary directory.
    """
    configured = environ.get(CACHE_ENV)
    if configured and _writable(Path(configured)) or _writable(package_dir / "__pycache__"):
        return True
    fallback = Path(tempfile.gettempdir()) / f"lagdesk-numba-{os.getuid() if hasattr(os, 'getuid') else 'user'}"
    if not _writable(fallback):
        return False
    environ[CACHE_ENV] = str(fallback)
    return True


def compile_pending(environ: MutableMapping[str, str] = os.environ, package_dir: Path = CORE_DIR) -> bool:
    """Whether no compiled likelihood for this Python is cached where numba will look."""
    tag = f"py{sys.version_info.major}{sys.version_info.minor}"
    places = [Path(environ[CACHE_ENV])] if environ.get(CACHE_ENV) else [package_dir / "__pycache__"]
    return not any(any(place.rglob(f"likelihood.*.{tag}.nbi")) for place in places if place.is_dir())


CACHE_USABLE = ensure_writable_cache()

from numba import njit as _numba_njit  # noqa: E402  (after the cache directory is settled, on purpose)


def njit(*args: Any, **kwargs: Any) -> Any:
    """numba's ``njit``, with ``cache=True`` honoured only when a cache can be written, and the
    compiled code run without Python's global lock (``nogil``): it touches no Python object, and
    holding the lock, one long fit in the dashboard (a custom order on 20,000 hourly points,
    133 s) stopped the server from answering any other request until it ended."""
    if kwargs.get("cache"):
        kwargs["cache"] = CACHE_USABLE
    kwargs.setdefault("nogil", True)
    return _numba_njit(*args, **kwargs)
