"""Opening the database: pragmas, the schema version and forward migrations, the path."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
import sqlite_utils

from app.core.analysis import Intervention
from app.core.errors import LagdeskError
from app.core.order import Order
from app.core.transform_choice import TransformChoice
from app.core.vocabulary import InterventionKind
from app.store.database import DEFAULT_DB_NAME, open_database, resolve_db_path, schema_version
from app.store.migrations import MIGRATION_SET, MIGRATIONS, STEPS
from app.store.series import list_series, suggested_models
from app.store.verdicts import seen_differencing

TABLES = {"imports", "series", "observations", "runs", "analyses", "verdicts", "verdict_history", "order_fits"}


def test_open_database_sets_wal_foreign_keys_and_busy_timeout(fresh_db):
    assert fresh_db.execute("PRAGMA journal_mode").fetchone() == ("wal",)
    assert fresh_db.execute("PRAGMA foreign_keys").fetchone() == (1,)
    assert fresh_db.execute("PRAGMA busy_timeout").fetchone() == (10_000,)


def test_open_database_creates_every_table_at_the_latest_version(fresh_db):
    assert TABLES <= set(fresh_db.table_names())
    assert schema_version(fresh_db) == len(STEPS)
    assert [m.name for m in MIGRATIONS.applied(fresh_db)] == [step.__name__ for step in STEPS]


def test_open_database_twice_applies_each_migration_once(tmp_path):
    path = tmp_path / "twice.db"
    open_database(path).close()
    db = open_database(path)
    rows = db.execute("SELECT name FROM _sqlite_migrations WHERE migration_set = ? ORDER BY id", [MIGRATION_SET]).fetchall()
    assert rows == [(step.__name__,) for step in STEPS]
    assert schema_version(db) == len(STEPS)
    db.close()


def test_open_database_upgrades_an_older_file_without_a_manual_step(tmp_path):
    path = tmp_path / "old.db"
    old = sqlite_utils.Database(path)
    MIGRATIONS.apply(old, stop_before=STEPS[-1].__name__)
    assert schema_version(old) == len(STEPS) - 1
    old.close()
    db = open_database(path)
    assert schema_version(db) == len(STEPS)
    assert TABLES <= set(db.table_names())
    db.close()


def test_open_database_refuses_a_file_from_a_newer_version(tmp_path):
    path = tmp_path / "newer.db"
    db = open_database(path)
    db["_sqlite_migrations"].insert({"migration_set": MIGRATION_SET, "name": "from_the_future", "applied_at": "x"})
    db.close()
    with pytest.raises(LagdeskError, match="newer Lagdesk.*from_the_future"):
        open_database(path)


def test_open_database_names_a_file_that_is_not_a_database(tmp_path):
    path = tmp_path / "notes.db"
    path.write_text("this is a text file, not SQLite\n" * 100)
    with pytest.raises(LagdeskError, match="notes.db: cannot be used as a Lagdesk database"):
        open_database(path)


def test_open_database_names_a_missing_folder_or_a_folder_given_as_file(tmp_path):
    with pytest.raises(LagdeskError, match="does not exist"):
        open_database(tmp_path / "nowhere" / "x.db")
    (tmp_path / "folder.db").mkdir()
    with pytest.raises(LagdeskError, match="folder.db: cannot be opened"):
        open_database(tmp_path / "folder.db")


def test_resolve_db_path_prefers_option_then_environment_then_working_folder(monkeypatch, tmp_path):
    monkeypatch.chdir(tmp_path)
    monkeypatch.setenv("LAGDESK_DB", "/data/from_env.db")
    assert str(resolve_db_path("given.db")) == "given.db"
    assert str(resolve_db_path(None)) == "/data/from_env.db"
    monkeypatch.delenv("LAGDESK_DB")
    assert resolve_db_path(None) == tmp_path / DEFAULT_DB_NAME


def _old_series_row(series_id: str) -> dict:
    """A ``series`` row for an older file (the upgrades read ``analyses`` and its results, not these values)."""
    return {"series_id": series_id, "time_kind": "integer", "freq": "step", "n": 40, "observed": 40, "gaps_filled": 0,
            "first_timestamp": "1", "last_timestamp": "40", "prep_flags": "[]", "fingerprint": "f",
            "created_import_id": 1, "updated_import_id": 1}


def test_upgrade_fills_the_main_reason_of_stored_analyses_from_their_results(tmp_path):
    path = tmp_path / "old.db"
    old = sqlite_utils.Database(path)
    MIGRATIONS.apply(old, stop_before="analysis_main_reason")
    for sid, reasons in (("a", ["flag: residual_autocorrelation", "x"]), ("b", None)):
        old["series"].insert(_old_series_row(sid))
        old["analyses"].insert({"series_id": sid, "fingerprint": "f", "state": "complete", "confidence": "weak",
                                "flags": "[]", "analysed_at": "2026-01-01"})
        result = {"confidence": "weak"} if reasons is None else {"confidence": "weak", "confidence_reasons": reasons}
        old["analysis_results"].insert({"series_id": sid, "result": json.dumps(result)})
    old.close()
    db = open_database(path)
    assert db.execute("SELECT series_id, main_reason FROM analyses ORDER BY series_id").fetchall() == [
        ("a", "flag: residual_autocorrelation"), ("b", None)]
    db.close()


def test_upgrade_fills_the_suggested_model_of_stored_analyses_from_their_results(tmp_path, relabel):
    # Three analyses as a version 5 file holds them: a result of today's engine with a Box-Cox
    # transform, a drift and a level shift; one written before schema versions
    # (tests/core/results/make_analysis_v1.py), which lists no interventions; and a failure.
    shift = Intervention(60, "60", InterventionKind.LEVEL_SHIFT, 0.1 + 0.2, 5.2)  # 17 digits, kept exactly
    drift = relabel("a-current", suggested=Order(0, 1, 1, trend="t"), transform=TransformChoice("box_cox", 0.5),
                    interventions=(shift,))
    results = {"a-current": json.dumps(drift.to_dict()),
               "b-v1": (Path(__file__).parents[1] / "core" / "results" / "analysis_v1.json").read_text()}
    path = tmp_path / "old.db"
    old = sqlite_utils.Database(path)
    MIGRATIONS.apply(old, stop_before="analysis_suggested_model")
    for sid in ("a-current", "b-v1", "c-failed"):
        old["series"].insert(_old_series_row(sid))
        old["verdicts"].insert({"series_id": sid, "status": "pending", "transform": "none", "note": "", "reviewer": "",
                                "version": 0})
    old["analyses"].insert({"series_id": "a-current", "fingerprint": "f", "state": "complete", "confidence": "tentative",
                            "flags": "[]", "suggested_order": "[0, 1, 1]", "suggested_seasonal_order": "[0, 0, 0, 0]",
                            "analysed_at": "2026-01-01"})
    old["analyses"].insert({"series_id": "b-v1", "fingerprint": "f", "state": "complete", "confidence": "firm",
                            "flags": "[]", "suggested_order": "[0, 1, 1]", "suggested_seasonal_order": "[0, 1, 1, 12]",
                            "analysed_at": "2026-01-01"})
    old["analyses"].insert({"series_id": "c-failed", "fingerprint": "f", "state": "failed", "message": "no fit",
                            "flags": "[]", "analysed_at": "2026-01-01"})
    for sid, text in results.items():
        old["analysis_results"].insert({"series_id": sid, "result": text})
    old.close()

    db = open_database(path)
    suggested = {item["series_id"]: item["suggested"] for item in list_series(db, sort="series_id")[1]}
    assert suggested == {
        "a-current": {"order": [0, 1, 1], "seasonal_order": [0, 0, 0, 0], "transform": {"box_cox": 0.5}, "trend": "t",
                      "interventions": [shift.to_dict()]},
        # the result holds its transform and term, but no list of interventions: unknown
        "b-v1": {"order": [0, 1, 1], "seasonal_order": [0, 1, 1, 12], "transform": "none", "trend": "n",
                 "interventions": None},
        "c-failed": {"order": None, "seasonal_order": None, "transform": None, "trend": None, "interventions": None},
    }
    assert suggested_models(db, ["b-v1", "a-current", "unknown"]) == {sid: suggested[sid] for sid in ("a-current", "b-v1")}
    db.close()



def test_upgrade_fills_the_differencing_each_decided_verdict_was_decided_on(tmp_path):
    # A version 6 file: an approved verdict with a seasonal analysis (d = 1, D = 1), an overridden
    # one whose analysis failed, and a pending one. Only decided verdicts with a complete
    # analysis get a differencing; the others stay unknown (a re-check then compares the order's).
    path = tmp_path / "old.db"
    old = sqlite_utils.Database(path)
    MIGRATIONS.apply(old, stop_before="verdict_seen_differencing")
    for sid, status, state in (("a", "approved", "complete"), ("b", "overridden", "failed"), ("c", "pending", "complete")):
        old["series"].insert(_old_series_row(sid))
        old["verdicts"].insert({"series_id": sid, "status": status, "transform": '"none"', "note": "", "reviewer": "",
                                "version": 1})
        old["analyses"].insert({"series_id": sid, "fingerprint": "f", "state": state, "confidence": "weak", "flags": "[]",
                                "d": 1, "suggested_order": "[0, 1, 1]", "suggested_seasonal_order": "[0, 1, 1, 12]",
                                "analysed_at": "2026-01-01"})
    old.close()
    db = open_database(path)
    assert [seen_differencing(db, sid) for sid in "abc"] == [(1, 1), None, None]
    db.close()
