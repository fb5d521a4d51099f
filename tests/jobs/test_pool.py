"""The local process pool: results in order of completion and equal to a serial run, BLAS
pinned to one thread inside the workers, workers that end when their parent is killed.

The reference for the results is :func:`app.jobs.work.identify_task` run in this process; the
thread counts come from threadpoolctl's own inspection of the loaded BLAS libraries.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import textwrap
import threading
import time
from contextlib import closing
from pathlib import Path

import pytest
from simulated_portfolio import simulated_series
from threadpoolctl import threadpool_info, threadpool_limits

from app.core.errors import LagdeskError
from app.jobs.analyze import run_analysis
from app.jobs.executors import ExecutorChoice, local, map_unordered
from app.jobs.executors.chunks import chunks
from app.jobs.executors.local import IN_PROCESS_MAX_ITEMS
from app.jobs.work import SeriesTask, identify_task
from app.store.database import open_database
from app.store.imports import import_portfolio

REPO = Path(__file__).resolve().parents[2]
WAIT_S = 60
ORDER_ITEMS = 6
POOLED_ITEMS = IN_PROCESS_MAX_ITEMS + 1  # the smallest job that starts a pool


def blocks_until_the_others_ran(job: tuple[int, str]) -> int:
    """Item 0 waits until every other item has left its mark, so it cannot complete first."""
    item, folder = job
    if item == 0:
        deadline = time.monotonic() + WAIT_S
        others = [Path(folder) / str(i) for i in range(1, ORDER_ITEMS)]
        while not all(p.exists() for p in others) and time.monotonic() < deadline:
            time.sleep(0.01)
    (Path(folder) / str(item)).touch()
    return item


def blas_threads(_: object) -> list[tuple[str, int]]:
    """(library, threads) of every BLAS/OpenMP pool loaded in the calling process."""
    return [(info["internal_api"], info["num_threads"]) for info in threadpool_info()]


def reports_pid_and_waits(folder: str) -> None:
    """Leave this worker's pid in ``folder`` and wait (far longer than any test)."""
    (Path(folder) / str(os.getpid())).touch()
    time.sleep(3600)


def leaves(value, path: str = "") -> dict[str, object]:
    """Every number, string, bool and None of a nested result, keyed by its path."""
    if isinstance(value, dict):
        return {k: v for key, item in value.items() for k, v in leaves(item, f"{path}/{key}").items()}
    if isinstance(value, (list, tuple)):
        return {"#" + path: len(value)} | {k: v for i, item in enumerate(value) for k, v in leaves(item, f"{path}[{i}]").items()}
    return {path: value}


def assert_same_results(got, expected) -> None:
    """Equal structure, equal text and integers, floats equal to 1e-9 relative (NaN == NaN).

    Not bit for bit: the numerical standard errors of a fit were seen to differ in the 11th
    digit between processes (likely SIMD kernels whose rounding depends on how their arrays
    happen to be aligned in memory); everything else came out identical.
    """
    got, expected = leaves(got), leaves(expected)
    assert got.keys() == expected.keys()
    for key, value in expected.items():
        if isinstance(value, float) and isinstance(got[key], float):
            assert got[key] == pytest.approx(value, rel=1e-9, abs=1e-12, nan_ok=True), key
        else:
            assert got[key] == value, key


def by_series(outcomes) -> dict[str, dict]:
    """Each outcome in its JSON form, so :func:`assert_same_results` compares it leaf by leaf."""
    return {o.series_id: {"result": o.result.to_dict() if o.result is not None else None, "problem": o.problem}
            for o in outcomes}


@pytest.fixture(scope="module")
def tasks() -> list[SeriesTask]:
    return [SeriesTask(series_id, values) for series_id, values in simulated_series(6, (80, 120), seed=5).items()]


def test_chunks_keeps_every_item_once_in_order():
    assert list(chunks(range(10), 4)) == [[0, 1, 2, 3], [4, 5, 6, 7], [8, 9]]
    assert list(chunks([], 4)) == []


def test_pool_yields_results_in_order_of_completion(tmp_path):
    jobs = [(i, str(tmp_path)) for i in range(ORDER_ITEMS)]
    got = list(map_unordered(blocks_until_the_others_ran, jobs, workers=2, chunk=1))
    assert sorted(got) == list(range(ORDER_ITEMS))
    assert got[-1] == 0


@pytest.mark.parametrize("workers", [1, 2])
def test_pool_results_equal_a_serial_run(tasks, workers):
    with threadpool_limits(limits=1):
        serial = by_series(identify_task(t) for t in tasks)
    pooled = by_series(map_unordered(identify_task, tasks, workers=workers))
    assert_same_results(pooled, serial)
    assert all(v["result"] is not None for v in serial.values())


def test_pool_workers_run_blas_on_one_thread():
    per_worker = list(map_unordered(blas_threads, range(4), workers=2, chunk=1))
    for pools in per_worker:
        assert any(api in ("openblas", "mkl", "blis") for api, _ in pools), pools
        assert all(threads == 1 for _, threads in pools), pools


def test_pool_started_from_a_thread_works_as_from_the_main_thread():
    # As an analysis started from the web page does: it runs in a thread of the server.
    found = []
    runner = threading.Thread(target=lambda: found.extend(map_unordered(blas_threads, range(POOLED_ITEMS), workers=2, chunk=1)))
    runner.start()
    runner.join(WAIT_S)
    assert len(found) == POOLED_ITEMS and all(threads == 1 for pools in found for _, threads in pools), found


def process_id(_: object) -> int:
    return os.getpid()


class NoPool:
    def __init__(self, *args, **kwargs) -> None:
        raise AssertionError("a small job started a process pool")


def test_a_small_job_runs_in_this_process_without_starting_a_pool(monkeypatch):
    monkeypatch.setattr(local, "ProcessPoolExecutor", NoPool)
    assert list(map_unordered(process_id, range(IN_PROCESS_MAX_ITEMS), workers=2)) == [os.getpid()] * IN_PROCESS_MAX_ITEMS


def test_a_job_larger_than_the_in_process_limit_uses_the_pool():
    assert os.getpid() not in set(map_unordered(process_id, range(POOLED_ITEMS), workers=2, chunk=1))


def test_this_process_works_while_the_pool_starts():
    # The pool's start (its forkserver importing the engine) takes seconds and these items
    # microseconds, so this process does the items after the first 2 * workers chunks, which
    # wait in the pool's queue and go to the workers once they run.
    pids = list(map_unordered(process_id, range(40), workers=2, chunk=1))
    assert len(pids) == 40
    assert pids.count(os.getpid()) >= 40 - 2 * 2
    assert len(set(pids) - {os.getpid()}) >= 1


def test_analysing_one_series_starts_no_pool(monkeypatch, tmp_path):
    values = simulated_series(1, (80, 80), seed=5)
    csv = tmp_path / "one.csv"
    csv.write_text("series_id,timestamp,value\n" + "".join(
        f"{series_id},{t},{v!r}\n" for series_id, path in values.items() for t, v in enumerate(path)))
    db_path = tmp_path / "one.db"
    with closing(open_database(db_path)) as db:
        import_portfolio(db, csv)
    monkeypatch.setattr(local, "ProcessPoolExecutor", NoPool)
    run = run_analysis(db_path, workers=2)
    assert (run["state"], run["done"], run["failed"]) == ("finished", 1, 0)


def test_executor_choice_rejects_unknown_executors_and_stray_schedulers():
    with pytest.raises(LagdeskError, match="'spark' is not one of local, dask"):
        ExecutorChoice("spark")
    with pytest.raises(LagdeskError, match="only used with the dask executor"):
        ExecutorChoice("local", "tcp://127.0.0.1:8786")


def _descendants(pid: int) -> set[int]:
    found, todo = set(), [pid]
    while todo:
        parent = todo.pop()
        for task in Path(f"/proc/{parent}/task").iterdir():
            children = {int(c) for c in (task / "children").read_text().split()}
            todo += children - found
            found |= children
    return found


def _running(pid: int) -> bool:
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except FileNotFoundError:
        return False
    return state != "Z"


@pytest.mark.skipif(not Path("/proc/self/task").exists(), reason="reads the process tree from Linux /proc")
def test_pool_workers_exit_when_their_parent_is_killed(tmp_path):
    script = textwrap.dedent(f"""
        import sys
        sys.path.insert(0, {str(Path(__file__).parent)!r})
        from app.jobs.executors import map_unordered
        from test_pool import reports_pid_and_waits
        if __name__ == "__main__":
            for _ in map_unordered(reports_pid_and_waits, [{str(tmp_path)!r}] * {POOLED_ITEMS}, workers=2, chunk=1):
                pass
    """)
    (tmp_path / "run_pool.py").write_text(script)
    parent = subprocess.Popen([sys.executable, str(tmp_path / "run_pool.py")], cwd=REPO, stderr=subprocess.PIPE)
    survivors: set[int] = set()
    try:
        deadline = time.monotonic() + WAIT_S
        while len([p for p in tmp_path.iterdir() if p.name.isdigit()]) < 2:
            assert parent.poll() is None and time.monotonic() < deadline, parent.stderr.read().decode()
            time.sleep(0.05)
        pool_processes = _descendants(parent.pid)
        workers = {int(p.name) for p in tmp_path.iterdir() if p.name.isdigit()}
        assert workers <= pool_processes
        os.kill(parent.pid, signal.SIGKILL)
        parent.wait()
        deadline = time.monotonic() + WAIT_S
        while (survivors := {p for p in pool_processes if _running(p)}) and time.monotonic() < deadline:
            time.sleep(0.1)
        assert survivors == set()
    finally:
        for pid in survivors:
            os.kill(pid, signal.SIGKILL)
        if parent.poll() is None:
            parent.kill()
            parent.wait()
        parent.stderr.close()
