"""Run records: progress readable from the database, final state and duration."""

from __future__ import annotations

from datetime import datetime

import pytest

from app.core.errors import LagdeskError
from app.store.runs import finish_run, get_run, latest_run, list_runs, record_progress, start_run


def test_a_run_reports_its_progress_and_closes_with_a_duration(fresh_db):
    assert latest_run(fresh_db) is None
    run_id = start_run(fresh_db, {"workers": 2, "everything": False}, total=40, engine_version="0.1.0")
    run = get_run(fresh_db, run_id)
    assert (run["state"], run["total"], run["done"], run["failed"], run["finished_at"]) == ("running", 40, 0, 0, None)
    assert run["settings"] == {"workers": 2, "everything": False} and run["engine_version"] == "0.1.0"
    assert run["duration_s"] >= 0
    record_progress(fresh_db, run_id, done=25, failed=2)
    assert (get_run(fresh_db, run_id)["done"], get_run(fresh_db, run_id)["failed"]) == (25, 2)
    finish_run(fresh_db, run_id, "interrupted")
    run = get_run(fresh_db, run_id)
    assert run["state"] == "interrupted" and run["finished_at"] >= run["started_at"]
    elapsed = datetime.fromisoformat(run["finished_at"]) - datetime.fromisoformat(run["started_at"])
    assert run["duration_s"] == elapsed.total_seconds()


def test_runs_are_listed_newest_first(fresh_db):
    ids = [start_run(fresh_db, {"n": i}, total=i, engine_version="0.1.0") for i in range(3)]
    assert [run["run_id"] for run in list_runs(fresh_db)] == ids[::-1]
    assert [run["run_id"] for run in list_runs(fresh_db, limit=2)] == ids[:0:-1]
    assert latest_run(fresh_db)["run_id"] == ids[-1]


def test_bad_run_updates_are_refused(fresh_db):
    run_id = start_run(fresh_db, {}, total=1, engine_version="0.1.0")
    with pytest.raises(LagdeskError, match="final state must be one of"):
        finish_run(fresh_db, run_id, "done")
    with pytest.raises(LagdeskError, match="no run 99"):
        record_progress(fresh_db, 99, 1, 0)
    with pytest.raises(LagdeskError, match="no run 99"):
        get_run(fresh_db, 99)
    with pytest.raises(LagdeskError, match="must be >= 0"):
        record_progress(fresh_db, run_id, -1, 0)
    assert get_run(fresh_db, run_id)["state"] == "running"
