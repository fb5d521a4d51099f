"""Analysis runs over a stored portfolio: every result committed as it lands, equal to the engine's
own output, resumable after Ctrl-C or SIGKILL, one run at a time per database.

The reference for the stored results is the engine itself (``identify_task``) run directly on
the series as read from the CSV file, with BLAS pinned to one thread as in the workers.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from simulated_portfolio import SHORT_SERIES_ID, write_portfolio_csv
from threadpoolctl import threadpool_limits

from app.core.analysis import Analysis
from app.core.identify import LONG_SERIES, SEARCH_WINDOW, EngineOptions
from app.core.portfolio_file import read_portfolio
from app.jobs.analyze import (
    REFIT_SHARE,
    AnalysisInProgress,
    begin_analysis,
    expected_cost,
    heaviest_first,
    run_analysis,
    start_background_analysis,
)
from app.jobs.work import SeriesTask, identify_task
from app.store.analyses import analysis_record, load_analysis
from app.store.database import open_database
from app.store.imports import import_portfolio
from app.store.runs import get_run, list_runs, start_run
from app.store.series import series_ids_to_analyse, series_sizes
from app.store.status import portfolio_status

REPO = Path(__file__).resolve().parents[2]
SMALL_PORTFOLIO = 6
KILL_PORTFOLIO = 30
WAIT_S = 120


@pytest.fixture(scope="module")
def portfolio_csv(tmp_path_factory) -> Path:
    return write_portfolio_csv(tmp_path_factory.mktemp("portfolio") / "portfolio.csv", SMALL_PORTFOLIO, seed=4)


@pytest.fixture(scope="module")
def engine_results(portfolio_csv) -> dict[str, Analysis]:
    """What the engine returns for each good series of the file, computed without the store."""
    portfolio = read_portfolio(portfolio_csv)
    with threadpool_limits(limits=1):
        outcomes = [identify_task(SeriesTask(s.series_id, s.values, s.lines)) for s in portfolio.series]
    assert [o.series_id for o in outcomes if o.problem is not None] == [SHORT_SERIES_ID]
    return {o.series_id: o.result for o in outcomes if o.problem is None}


def _imported(db_path: Path, csv: Path) -> Path:
    db = open_database(db_path)
    try:
        import_portfolio(db, csv)
    finally:
        db.close()
    return db_path


@pytest.fixture
def db_path(tmp_path, portfolio_csv) -> Path:
    return _imported(tmp_path / "lagdesk.db", portfolio_csv)


@pytest.fixture
def read_db(db_path):
    """``read_db(fn, *args)``: call a store reader on a fresh connection to the test database."""

    def read(fn, *args, **kwargs):
        db = open_database(db_path)
        try:
            return fn(db, *args, **kwargs)
        finally:
            db.close()

    return read


@pytest.mark.parametrize("workers", [1, 2])
def test_run_analysis_stores_the_engine_result_of_every_series(db_path, read_db, engine_results, workers):
    run = run_analysis(db_path, workers=workers)

    assert run["state"] == "finished"
    assert (run["total"], run["done"], run["failed"]) == (SMALL_PORTFOLIO, SMALL_PORTFOLIO, 0)
    assert run["settings"]["workers"] == workers
    assert run["settings"]["options"]["period"] == EngineOptions().period
    assert read_db(portfolio_status)["analysed"] == SMALL_PORTFOLIO
    for series_id, expected in engine_results.items():
        # Same floats, orders and flags as the engine returned (and so the same with 1 or 2 workers).
        assert read_db(load_analysis, series_id) == expected
        record = read_db(analysis_record, series_id)
        assert (record["state"], record["run_id"]) == ("current", run["run_id"])
    assert read_db(series_ids_to_analyse, everything=True) == sorted(engine_results)


def test_runs_take_the_most_expensive_series_first():
    # n * s**2 (s from the frequency, or the period asked for): 600 * 24**2 > 180 * 12**2 >
    # 400 * 7**2 > 5000 (yearly: no season); ties keep the id order.
    sizes = {"m": (180, "MS"), "h": (600, "h"), "d1": (400, "D"), "d2": (400, "D"), "y": (5000, "YS")}
    assert heaviest_first(sorted(sizes), sizes, "auto") == ["h", "m", "d1", "d2", "y"]
    assert heaviest_first(sorted(sizes), sizes, None) == ["y", "h", "d1", "d2", "m"]
    assert heaviest_first(sorted(sizes), sizes, 4) == ["y", "h", "d1", "d2", "m"]


def test_a_long_series_costs_its_search_window_and_a_share_for_the_refits():
    # Past LONG_SERIES points only the last SEARCH_WINDOW are searched (app.core.identify): an
    # hourly series of 20,000 points costs the window plus 20,000 / REFIT_SHARE points, a little
    # more than one just over the limit and less than 2,000 points searched whole would.
    assert expected_cost(LONG_SERIES, "h", "auto") == LONG_SERIES * 24**2
    assert expected_cost(20_000, "h", "auto") == (SEARCH_WINDOW + 20_000 // REFIT_SHARE) * 24**2
    assert expected_cost(LONG_SERIES + 1, "h", "auto") < expected_cost(20_000, "h", "auto") < 2_000 * 24**2
    sizes = {"long": (20_000, "h"), "limit": (LONG_SERIES, "h")}
    assert heaviest_first(sorted(sizes), sizes, "auto") == ["limit", "long"]


def test_series_sizes_are_the_stored_length_and_frequency(db_path, read_db):
    sizes = read_db(series_sizes)
    assert sorted(sizes) == read_db(series_ids_to_analyse, everything=True)
    assert all(n >= 12 and isinstance(freq, str) for n, freq in sizes.values())


def test_a_second_run_finds_nothing_to_analyse(db_path, read_db):
    first = run_analysis(db_path, workers=1)
    second = run_analysis(db_path, workers=1)

    assert (second["state"], second["total"], second["done"]) == ("finished", 0, 0)
    ids = read_db(series_ids_to_analyse, everything=True)
    assert {read_db(analysis_record, i)["run_id"] for i in ids} == {first["run_id"]}


def test_everything_analyses_every_series_again(db_path, read_db):
    run_analysis(db_path, workers=1)
    again = run_analysis(db_path, workers=1, everything=True)

    assert (again["total"], again["done"]) == (SMALL_PORTFOLIO, SMALL_PORTFOLIO)
    ids = read_db(series_ids_to_analyse, everything=True)
    assert {read_db(analysis_record, i)["run_id"] for i in ids} == {again["run_id"]}


def test_only_series_whose_data_changed_are_analysed_again(db_path, read_db, portfolio_csv, tmp_path):
    run_analysis(db_path, workers=1)
    lines = portfolio_csv.read_text().splitlines()
    changed_id, step, value = lines[1].split(",")
    (tmp_path / "update.csv").write_text(f"{lines[0]}\n{changed_id},{step},{float(value) + 1.0!r}\n")
    _imported(db_path, tmp_path / "update.csv")
    assert read_db(analysis_record, changed_id)["state"] == "stale"

    rerun = run_analysis(db_path, workers=1)

    assert rerun["total"] == 1
    record = read_db(analysis_record, changed_id)
    assert (record["state"], record["run_id"]) == ("current", rerun["run_id"])


def test_series_the_engine_rejects_are_stored_as_failed_and_not_retried(db_path, read_db):
    # A seasonal period longer than some series is refused by the engine for those series only.
    options = EngineOptions(period=120)
    run = run_analysis(db_path, workers=1, options=options)

    failed = [i for i in read_db(series_ids_to_analyse, everything=True) if read_db(analysis_record, i)["state"] == "failed"]
    assert 0 < run["failed"] == len(failed) < SMALL_PORTFOLIO
    assert run["done"] == SMALL_PORTFOLIO
    assert all("seasonal period 120" in read_db(analysis_record, i)["message"] for i in failed)
    assert read_db(portfolio_status)["failed"] == len(failed)
    assert run_analysis(db_path, workers=1, options=options)["total"] == 0


def test_ctrl_c_keeps_the_committed_results_and_closes_the_run_as_interrupted(db_path, read_db):
    seen = []

    def interrupt_after_two(progress):
        seen.append(progress.done)
        if progress.done == 2:
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        run_analysis(db_path, workers=1, on_progress=interrupt_after_two)

    run = read_db(list_runs)[0]
    assert seen == [0, 1, 2]
    assert (run["state"], run["done"]) == ("interrupted", 2)
    assert read_db(portfolio_status)["analysed"] == 2
    resumed = run_analysis(db_path, workers=1)
    assert resumed["total"] == SMALL_PORTFOLIO - 2
    assert read_db(portfolio_status)["analysed"] == SMALL_PORTFOLIO


def test_a_run_left_running_by_a_dead_process_is_closed_as_interrupted(db_path, read_db):
    dead = read_db(start_run, {"workers": 1}, SMALL_PORTFOLIO, "0.0.0")

    run_analysis(db_path, workers=1)

    assert read_db(get_run, dead)["state"] == "interrupted"


def test_only_one_run_at_a_time_per_database(db_path, read_db):
    first = begin_analysis(db_path, workers=1)
    with pytest.raises(AnalysisInProgress) as refused:
        run_analysis(db_path, workers=1)
    assert refused.value.run_id == first.run_id
    assert start_background_analysis(db_path, workers=1) == first.run_id

    first.execute()
    assert read_db(get_run, first.run_id)["state"] == "finished"
    assert run_analysis(db_path, workers=1)["total"] == 0


def test_background_analysis_returns_the_run_id_and_records_progress(db_path, read_db):
    run_id = start_background_analysis(db_path, workers=1)

    deadline = time.monotonic() + WAIT_S
    while read_db(get_run, run_id)["state"] == "running" and time.monotonic() < deadline:
        time.sleep(0.1)
    run = read_db(get_run, run_id)
    assert (run["state"], run["done"], run["total"]) == ("finished", SMALL_PORTFOLIO, SMALL_PORTFOLIO)
    assert read_db(portfolio_status)["analysed"] == SMALL_PORTFOLIO


def _analyze_process(db_path: Path) -> subprocess.Popen:
    # Its own process group, so the kill takes the pool's workers too (as a power cut would).
    return subprocess.Popen(
        [sys.executable, "-m", "app.cli", "analyze", "--db", str(db_path), "--workers", "2"],
        cwd=REPO, stdout=subprocess.PIPE, stderr=subprocess.PIPE, start_new_session=True,
    )


@pytest.mark.slow
def test_a_killed_run_loses_nothing_and_the_next_run_resumes(tmp_path):
    db_path = _imported(tmp_path / "lagdesk.db", write_portfolio_csv(tmp_path / "p.csv", KILL_PORTFOLIO, seed=9))
    db = open_database(db_path)
    try:
        process = _analyze_process(db_path)
        deadline = time.monotonic() + WAIT_S
        while not (runs := list_runs(db)) or runs[0]["done"] == 0:
            assert process.poll() is None and time.monotonic() < deadline, process.stderr.read().decode()
            time.sleep(0.02)
        os.killpg(process.pid, signal.SIGKILL)
        process.wait()
        killed = list_runs(db)[0]
        assert killed["state"] == "running" and 0 < killed["done"] < KILL_PORTFOLIO

        rerun = subprocess.run(
            [sys.executable, "-m", "app.cli", "analyze", "--db", str(db_path), "--workers", "2"],
            cwd=REPO, capture_output=True, text=True, timeout=WAIT_S,
        )
        assert rerun.returncode == 0, rerun.stderr

        runs = list_runs(db)
        assert get_run(db, killed["run_id"])["state"] == "interrupted"
        # Every result the killed run committed counts; the rerun did only the rest.
        assert (runs[0]["state"], runs[0]["total"]) == ("finished", KILL_PORTFOLIO - killed["done"])
        ids = series_ids_to_analyse(db, everything=True)
        assert len(ids) == KILL_PORTFOLIO
        records = {i: analysis_record(db, i) for i in ids}
        assert {i: r["message"] for i, r in records.items() if r["state"] != "current"} == {}
        assert all(load_analysis(db, i) is not None for i in ids)
        assert db["analyses"].count == db["analysis_results"].count == KILL_PORTFOLIO
        assert db.execute("PRAGMA integrity_check").fetchall() == [("ok",)]
    finally:
        db.close()
