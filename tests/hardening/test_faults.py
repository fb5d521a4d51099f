"""Crashes: ``kill -9`` of the server while reviewers post, and of an analysis run at random
points; afterwards nothing acknowledged is missing and the database is consistent.

A request in flight when the server dies may have been committed without its answer reaching
the client: such a verdict is in the history but was never acknowledged. The checks allow at
most one such verdict per reviewer (each has one request in flight), and require every
acknowledged one.
"""

from __future__ import annotations

import json
import os
import random
import shutil
import signal
import sqlite3
import subprocess
import sys
import threading
import time
from collections import Counter
from pathlib import Path

import pytest
from conftest import REPO, run_lagdesk, table_rows
from reviewers import build_portfolio, run_reviewers, stored_history

CLIENTS = 8
POSTS_PER_CLIENT = 400
SERIES = 32
SERVER_KILLS = 3
ACKS_BEFORE_KILL = 150
ANALYSIS_KILLS = 5
ANALYSIS_SERIES = 30
POLL_S = 0.05
WAIT_LIMIT_S = 120


def _integrity(db_path: Path) -> str:
    conn = sqlite3.connect(db_path)
    try:
        return conn.execute("PRAGMA integrity_check").fetchone()[0]
    finally:
        conn.close()


def _wait_for(condition, what: str) -> None:
    deadline = time.monotonic() + WAIT_LIMIT_S
    while not condition():
        if time.monotonic() > deadline:
            raise AssertionError(f"gave up waiting for {what}")
        time.sleep(POLL_S)


@pytest.mark.slow
def test_kill_9_of_the_server_loses_no_acknowledged_verdict(tmp_path, live_server):
    db_path = tmp_path / "kill.db"
    series_ids = build_portfolio(db_path, SERIES)
    acknowledged: Counter = Counter()
    for kill in range(SERVER_KILLS):
        server = live_server(db_path)
        stop = threading.Event()
        result: dict = {}
        worker = threading.Thread(
            # This kill's server, stop and result bound now: a worker outliving its join must not see the next ones.
            target=lambda url=server.url, stop=stop, result=result: result.update(
                logs=run_reviewers(url, CLIENTS, series_ids, POSTS_PER_CLIENT, stop)[0]),
            daemon=True,
        )
        worker.start()
        wanted = sum(acknowledged.values()) + ACKS_BEFORE_KILL
        _wait_for(lambda wanted=wanted: len(stored_history(db_path)) >= wanted, "verdicts")
        server.kill()
        stop.set()
        worker.join(timeout=WAIT_LIMIT_S)
        logs = result["logs"]
        assert [bad for log in logs for bad in log.bad] == []
        acknowledged.update((a.series_id, a.version, a.note) for log in logs for a in log.acks)
        assert _integrity(db_path) == "ok", f"after kill {kill + 1}"
        history = Counter(stored_history(db_path))
        missing = acknowledged - history
        assert not missing, f"acknowledged but lost after kill {kill + 1}: {list(missing)[:5]}"
        unacknowledged = history - acknowledged
        assert sum(unacknowledged.values()) <= CLIENTS * (kill + 1)
        acknowledged = history  # in-flight ones that were committed count from now on
    print(f"\nkill -9 of the server: {SERVER_KILLS} kills survived, {sum(acknowledged.values())} verdicts kept, 0 lost")
    # After the last kill the server starts again on the same file and takes new verdicts.
    server = live_server(db_path)
    logs, _ = run_reviewers(server.url, 2, series_ids, 10)
    assert [bad for log in logs for bad in log.bad] == [] and all(log.acks for log in logs)


def _analysed(db_path: Path) -> int:
    try:
        conn = sqlite3.connect(f"file:{db_path}?mode=ro", uri=True, timeout=5)
        try:
            return conn.execute("SELECT count(*) FROM analyses").fetchone()[0]
        finally:
            conn.close()
    except sqlite3.Error:
        return 0


def _analysis_results(db_path: Path) -> dict[str, str]:
    return {sid: result for sid, result in table_rows(db_path)["analysis_results"]}


@pytest.mark.slow
def test_analysis_killed_five_times_ends_complete_and_consistent(tmp_path):
    db_path = tmp_path / "analyse.db"
    build_portfolio(db_path, ANALYSIS_SERIES)
    reference = tmp_path / "reference.db"
    shutil.copy(db_path, reference)
    done = run_lagdesk("analyze", "--db", str(reference), "--workers", "1")
    assert done.returncode == 0, done.stderr

    rng = random.Random(20240607)
    kills = 0
    for _ in range(ANALYSIS_KILLS):
        before = _analysed(db_path)
        if before == ANALYSIS_SERIES:
            break
        extra = rng.randint(0, 2)  # kill before the first result, or after one or two more
        run = subprocess.Popen(
            [sys.executable, "-m", "app.cli", "analyze", "--db", str(db_path), "--workers", "1"],
            cwd=REPO, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, start_new_session=True,
        )
        try:
            target = min(before + extra, ANALYSIS_SERIES)
            _wait_for(lambda run=run, target=target: _analysed(db_path) >= target or run.poll() is not None, "progress")
            time.sleep(rng.uniform(0, 0.5))  # somewhere inside the next series
        finally:
            if run.poll() is None:
                os.killpg(run.pid, signal.SIGKILL)  # the run and its worker processes
                kills += 1
            run.wait(timeout=30)
        assert _integrity(db_path) == "ok"
    assert kills == ANALYSIS_KILLS, f"the run finished before {ANALYSIS_KILLS} kills; use more series"

    final = run_lagdesk("analyze", "--db", str(db_path), "--workers", "1")
    assert final.returncode == 0, final.stderr
    assert _integrity(db_path) == "ok"
    status = run_lagdesk("status", "--db", str(db_path), "--json")
    counts = json.loads(status.stdout)
    assert (counts["series"], counts["analysed"], counts["stale"], counts["failed"]) == (ANALYSIS_SERIES, ANALYSIS_SERIES, 0, 0)
    runs = table_rows(db_path)["runs"]
    assert all(row[-2] in ("finished", "interrupted") for row in runs), runs  # no run left 'running'
    # The engine is deterministic: the results equal those of a run never interrupted.
    assert _analysis_results(db_path) == _analysis_results(reference)
    print(f"\nanalysis: {kills} kill -9 survived; {ANALYSIS_SERIES} series complete, results equal to an uninterrupted run")
