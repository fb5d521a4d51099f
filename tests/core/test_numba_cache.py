"""The likelihood's compiled-code cache: a read-only install must not stop the engine, and a
command can tell beforehand that the first call will compile."""

from __future__ import annotations

import sys
import tempfile
from pathlib import Path

from app.core import numba_cache
from app.core.numba_cache import CACHE_ENV, compile_pending, ensure_writable_cache


def test_a_writable_package_directory_changes_nothing(tmp_path):
    environ: dict[str, str] = {}
    assert ensure_writable_cache(environ, tmp_path)
    assert environ == {}


def test_an_unwritable_package_directory_falls_back_to_a_private_temporary_one(tmp_path):
    blocker = tmp_path / "a-file"
    blocker.write_text("not a directory")
    environ: dict[str, str] = {}
    assert ensure_writable_cache(environ, blocker / "core")  # nothing can be created under a file
    assert Path(environ[CACHE_ENV]).is_dir() and "lagdesk-numba" in environ[CACHE_ENV]


def test_nothing_writable_means_no_cache_and_no_failure(tmp_path, monkeypatch):
    blocker = tmp_path / "a-file"
    blocker.write_text("not a directory")
    monkeypatch.setattr(tempfile, "gettempdir", lambda: str(blocker))
    assert not ensure_writable_cache({CACHE_ENV: str(blocker / "cache")}, blocker / "core")
    monkeypatch.setattr(numba_cache, "CACHE_USABLE", False)

    @numba_cache.njit(cache=True)
    def plus_one(x):
        return x + 1

    assert plus_one(1) == 2
    assert type(plus_one._cache).__name__ == "NullCache"  # compiled without a cache


def test_compile_pending_reads_the_cache_index(tmp_path):
    environ = {CACHE_ENV: str(tmp_path)}
    assert compile_pending(environ)
    tag = f"py{sys.version_info.major}{sys.version_info.minor}"
    index = tmp_path / "core_0123" / f"likelihood._filter-209.{tag}.nbi"
    index.parent.mkdir()
    index.write_bytes(b"")
    assert not compile_pending(environ)


def test_the_compiled_likelihood_runs_without_the_global_lock():
    # Held, the lock let one long fit in the dashboard stop every other request (numba's
    # nogil option releases it for the compiled code, which touches no Python object).
    from app.core import likelihood

    kernels = [f for f in vars(likelihood).values() if hasattr(f, "targetoptions")]
    assert kernels and all(f.targetoptions.get("nogil") for f in kernels)
