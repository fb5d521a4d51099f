"""Verdicts: versions refuse lost updates, every change is in the history, recheck keeps the order."""

from __future__ import annotations

import sqlite3
import threading

import pytest
import sqlite_utils

from app.core.errors import OrderError
from app.store.analyses import save_analysis
from app.store.bulk_approvals import UnknownBulkApproval, get_bulk_approval, latest_undoable, mark_undone, record_bulk_approval
from app.store.database import UnknownSeries, open_database
from app.store.imports import import_portfolio
from app.store.migrations import MIGRATIONS
from app.store.series import series_fingerprint
from app.store.verdicts import (
    InvalidVerdict,
    StaleVersion,
    confirm_on_new_data,
    decision_fingerprint,
    get_verdict,
    mark_recheck,
    set_verdict,
    verdict_history,
)


@pytest.fixture
def portfolio_db(fresh_db, write_csv, monthly):
    import_portfolio(fresh_db, write_csv("p.csv", {"a": monthly(1), "b": monthly(2)}))
    return fresh_db


def test_a_new_series_is_pending_at_version_zero_with_no_history(portfolio_db):
    assert get_verdict(portfolio_db, "a") == {
        "status": "pending", "order": None, "seasonal_order": None, "transform": "none", "note": "",
        "reviewer": "", "version": 0, "decided_at": None, "recheck_reason": None, "trend": None,
        "include_constant": None, "interventions": None,
    }
    assert verdict_history(portfolio_db, "a") == []


def test_second_update_naming_the_same_version_is_refused_with_the_current_verdict(portfolio_db):
    first = set_verdict(portfolio_db, "a", status="approved", order=[1, 0, 0], seasonal_order=None,
                        reviewer="ann", version=0)
    assert (first["version"], first["seasonal_order"]) == (1, [0, 0, 0, 0])
    with pytest.raises(StaleVersion) as refused:
        set_verdict(portfolio_db, "a", status="overridden", order=[0, 1, 1], seasonal_order=[0, 1, 1, 12],
                    reviewer="bob", note="seasonal", version=0)
    assert refused.value.current == first
    assert "now version 1, approved by ann" in str(refused.value)
    assert get_verdict(portfolio_db, "a") == first
    assert len(verdict_history(portfolio_db, "a")) == 1


def test_history_holds_every_change_in_order(portfolio_db):
    steps = [
        dict(status="parked", order=None, seasonal_order=None, note="wait for Q3 data", reviewer="ann"),
        dict(status="overridden", order=[2, 1, 0], seasonal_order=[0, 1, 1, 12], transform="log",
             note="log fits the spread", reviewer="bob"),
        dict(status="approved", order=[1, 1, 1], seasonal_order=[0, 0, 0, 0], transform={"box_cox": 0.5},
             reviewer="ann"),
    ]
    for version, step in enumerate(steps):
        set_verdict(portfolio_db, "a", version=version, **step)
    history = verdict_history(portfolio_db, "a")
    assert [(h["version"], h["from_status"], h["status"], h["reviewer"]) for h in history] == [
        (1, "pending", "parked", "ann"), (2, "parked", "overridden", "bob"), (3, "overridden", "approved", "ann")]
    assert history[1]["order"] == [2, 1, 0] and history[1]["transform"] == "log"
    assert history[2]["transform"] == {"box_cox": 0.5}
    assert [h["at"] for h in history] == sorted(h["at"] for h in history)
    assert verdict_history(portfolio_db, "b") == []


def test_concurrent_reviewers_naming_one_version_exactly_one_wins(portfolio_db, tmp_path):
    path = tmp_path / "lagdesk.db"
    outcomes: list[str] = []
    start = threading.Barrier(4)

    def review(name: str) -> None:
        db = open_database(path)
        start.wait()
        try:
            set_verdict(db, "b", status="approved", order=[1, 0, 0], seasonal_order=None, reviewer=name, version=0)
            outcomes.append("won")
        except StaleVersion:
            outcomes.append("refused")
        finally:
            db.close()

    threads = [threading.Thread(target=review, args=(f"reviewer{i}",)) for i in range(4)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    assert sorted(outcomes) == ["refused", "refused", "refused", "won"]
    assert get_verdict(portfolio_db, "b")["version"] == 1
    assert len(verdict_history(portfolio_db, "b")) == 1


def test_mark_recheck_keeps_the_order_and_bumps_the_version(portfolio_db):
    decided = set_verdict(portfolio_db, "a", status="overridden", order=[0, 1, 1], seasonal_order=[0, 1, 1, 12],
                          reviewer="bob", note="airline model", version=0)
    mark_recheck(portfolio_db, "a", "the data changed")
    verdict = get_verdict(portfolio_db, "a")
    assert (verdict["status"], verdict["order"], verdict["seasonal_order"]) == ("recheck", [0, 1, 1], [0, 1, 1, 12])
    assert (verdict["recheck_reason"], verdict["version"], verdict["note"]) == ("the data changed", 2, "airline model")
    last = verdict_history(portfolio_db, "a")[-1]
    assert (last["from_status"], last["status"], last["note"], last["reviewer"]) == (
        "overridden", "recheck", "the data changed", "lagdesk")
    with pytest.raises(StaleVersion):  # a reviewer who loaded the page before the change
        set_verdict(portfolio_db, "a", status="approved", order=[0, 1, 1], seasonal_order=[0, 1, 1, 12],
                    version=decided["version"])
    again = set_verdict(portfolio_db, "a", status="approved", order=[0, 1, 1], seasonal_order=[0, 1, 1, 12],
                        reviewer="bob", version=2)
    assert again["recheck_reason"] is None


def test_mark_recheck_leaves_undecided_series_alone(portfolio_db):
    mark_recheck(portfolio_db, "b", "the data changed")
    assert get_verdict(portfolio_db, "b")["status"] == "pending"
    assert verdict_history(portfolio_db, "b") == []


@pytest.mark.parametrize("change, error, message", [
    (dict(status="recheck", order=[1, 0, 0]), InvalidVerdict, "status must be one of"),
    (dict(status="approved", order=None), InvalidVerdict, "needs an order"),
    (dict(status="approved", order=[1, -1, 0]), OrderError, "3 whole numbers"),
    (dict(status="approved", order=[1, 0]), OrderError, "3 whole numbers"),
    (dict(status="approved", order=[1, 0, 0], seasonal_order=[1, 0, 0, 1]), OrderError, "period s >= 2"),
    (dict(status="approved", order=[1, 0, 0], transform="sqrt"), InvalidVerdict, "transform must be"),
    (dict(status="approved", order=[1, 0, 0], trend="quadratic"), InvalidVerdict, "trend must be one of"),
    (dict(status="not_arima", order=[1, 0, 0]), InvalidVerdict, "carries no order"),
])
def test_a_verdict_that_cannot_be_stored_is_refused(portfolio_db, change, error, message):
    change.setdefault("seasonal_order", None)
    with pytest.raises(error, match=message):
        set_verdict(portfolio_db, "a", version=0, **change)
    assert get_verdict(portfolio_db, "a")["version"] == 0


def test_verdicts_of_an_unknown_series_are_refused(portfolio_db):
    with pytest.raises(UnknownSeries):
        get_verdict(portfolio_db, "zzz")
    with pytest.raises(UnknownSeries):
        set_verdict(portfolio_db, "zzz", status="parked", order=None, seasonal_order=None, version=0)
    with pytest.raises(UnknownSeries):
        mark_recheck(portfolio_db, "zzz", "why")


def test_a_decision_records_the_data_the_reviewer_saw(portfolio_db, write_csv, monthly, relabel):
    assert decision_fingerprint(portfolio_db, "a") is None  # never decided
    first = series_fingerprint(portfolio_db, "a")
    save_analysis(portfolio_db, "a", first, relabel("a"), None)
    changed = monthly(1)
    changed.iloc[3] += 1.0
    import_portfolio(portfolio_db, write_csv("v2.csv", {"a": changed}))
    assert series_fingerprint(portfolio_db, "a") != first
    # Decided while the stored analysis is of the older data: that is the data the reviewer judged.
    set_verdict(portfolio_db, "a", status="approved", order=[1, 0, 0], seasonal_order=None, version=0)
    assert decision_fingerprint(portfolio_db, "a") == first
    # Without an analysis, the series' current data.
    set_verdict(portfolio_db, "b", status="parked", order=None, seasonal_order=None, version=0)
    assert decision_fingerprint(portfolio_db, "b") == series_fingerprint(portfolio_db, "b")


def test_confirm_on_new_data_keeps_the_decision_and_records_the_check(portfolio_db):
    decided = set_verdict(portfolio_db, "a", status="approved", order=[1, 0, 0], seasonal_order=None,
                          reviewer="ann", note="plain AR(1)", version=0)
    assert not confirm_on_new_data(portfolio_db, "a", "f" * 64, "checked", version=0)  # stale version
    assert confirm_on_new_data(portfolio_db, "a", "f" * 64, "AR(1) still holds", version=1)
    verdict = get_verdict(portfolio_db, "a")
    assert verdict == {**decided, "version": 2}
    assert decision_fingerprint(portfolio_db, "a") == "f" * 64
    last = verdict_history(portfolio_db, "a")[-1]
    assert (last["from_status"], last["status"], last["note"], last["reviewer"]) == (
        "approved", "approved", "AR(1) still holds", "lagdesk")
    assert not confirm_on_new_data(portfolio_db, "b", "f" * 64, "checked", version=0)  # pending: nothing to keep


def test_upgrading_an_older_file_fills_the_fingerprint_of_decided_verdicts(tmp_path, write_csv, monthly):
    path = tmp_path / "old.db"
    old = sqlite_utils.Database(path)
    MIGRATIONS.apply(old, stop_before="verdict_data_fingerprint")
    import_portfolio(old, write_csv("p.csv", {"a": monthly(1), "b": monthly(2), "c": monthly(3)}))
    old.execute("UPDATE verdicts SET status = 'approved', arima_order = '[1, 0, 0]', "
                "seasonal_order = '[0, 0, 0, 0]', version = 1, decided_at = 'then' WHERE series_id = 'a'")
    old.execute("UPDATE verdicts SET status = 'recheck', arima_order = '[1, 0, 0]', "
                "seasonal_order = '[0, 0, 0, 0]', version = 2, decided_at = 'then' WHERE series_id = 'c'")
    old.conn.commit()
    old.close()
    db = open_database(path)
    # Version 1 sent a decided verdict to recheck on any change of data, so an approved one was
    # decided on the current data; a recheck one was not, and a pending one was never decided.
    assert decision_fingerprint(db, "a") == series_fingerprint(db, "a")
    assert (decision_fingerprint(db, "b"), decision_fingerprint(db, "c")) == (None, None)
    db.close()


def test_the_trend_is_kept_with_an_order_and_in_the_history(portfolio_db):
    kept = set_verdict(portfolio_db, "a", status="overridden", order=[1, 1, 0], seasonal_order=None, transform="log",
                       trend="t", reviewer="ann", version=0)
    assert (kept["trend"], kept["include_constant"], kept["transform"]) == ("t", True, "log")
    dropped = set_verdict(portfolio_db, "a", status="overridden", order=[1, 0, 0], seasonal_order=None, trend="n",
                          reviewer="ann", version=1)
    assert (dropped["trend"], dropped["include_constant"]) == ("n", False)
    # A verdict without an order keeps no term, whatever is sent.
    reopened = set_verdict(portfolio_db, "a", status="pending", order=None, seasonal_order=None, trend="c", version=2)
    assert (reopened["trend"], reopened["include_constant"]) == (None, None)
    assert [h["trend"] for h in verdict_history(portfolio_db, "a")] == ["t", "n", None]


def test_not_arima_is_a_decision_without_an_order(portfolio_db):
    verdict = set_verdict(portfolio_db, "a", status="not_arima", order=None, seasonal_order=None,
                          note="90% zeros", reviewer="ann", version=0)
    assert (verdict["status"], verdict["order"], verdict["note"], verdict["version"]) == ("not_arima", None, "90% zeros", 1)
    assert verdict["decided_at"] is not None
    mark_recheck(portfolio_db, "a", "new data")  # only approved and overridden orders are re-checked
    assert get_verdict(portfolio_db, "a")["status"] == "not_arima"


def test_upgrading_a_version_3_file_keeps_every_verdict_and_allows_the_new_state(tmp_path, write_csv, monthly):
    path = tmp_path / "v3.db"
    old = sqlite_utils.Database(path)
    old.execute("PRAGMA foreign_keys = ON")
    MIGRATIONS.apply(old, stop_before="verdict_choices_and_bulk_undo")
    import_portfolio(old, write_csv("p.csv", {"a": monthly(1), "b": monthly(2)}))
    old.execute("UPDATE verdicts SET status = 'approved', arima_order = '[1, 0, 0]', seasonal_order = '[0, 0, 0, 0]', "
                "transform = '\"log\"', version = 1, decided_at = 'then', data_sha256 = 'x' WHERE series_id = 'a'")
    old.execute("INSERT INTO verdict_history (series_id, version, at, from_status, status, arima_order, seasonal_order, "
                "transform, note, reviewer) VALUES ('a', 1, 'then', 'pending', 'approved', '[1, 0, 0]', '[0, 0, 0, 0]', "
                "'\"log\"', 'ok', 'ann')")
    with pytest.raises(sqlite3.IntegrityError):  # version 3's CHECK knows no not_arima
        old.execute("UPDATE verdicts SET status = 'not_arima' WHERE series_id = 'b'")
    before = old.execute("SELECT series_id, status, arima_order, transform, version, data_sha256 FROM verdicts "
                         "ORDER BY series_id").fetchall()
    old.conn.commit()
    old.close()
    db = open_database(path)
    after = db.execute("SELECT series_id, status, arima_order, transform, version, data_sha256 FROM verdicts "
                       "ORDER BY series_id").fetchall()
    assert after == before
    assert get_verdict(db, "a")["trend"] is None  # the engine's term, as before
    assert verdict_history(db, "a")[0]["trend"] is None and verdict_history(db, "a")[0]["note"] == "ok"
    set_verdict(db, "b", status="not_arima", order=None, seasonal_order=None, version=0)
    assert get_verdict(db, "b")["status"] == "not_arima"
    assert [row[0] for row in db.execute("SELECT name FROM sqlite_master WHERE tbl_name = 'verdicts' AND type = 'index'")
            if not row[0].startswith("sqlite_")] == ["verdicts_status"]
    db.close()


def test_a_bulk_approval_is_undoable_while_none_of_its_series_changed(portfolio_db):
    assert latest_undoable(portfolio_db) is None
    versions = {}
    for series_id in ("a", "b"):
        versions[series_id] = set_verdict(portfolio_db, series_id, status="approved", order=[1, 0, 0],
                                          seasonal_order=None, reviewer="ann", version=0)["version"]
    bulk_id = record_bulk_approval(portfolio_db, "ann", "firm ones", {"prefix": "x/"}, versions)
    record = get_bulk_approval(portfolio_db, bulk_id)
    assert (record["approved"], record["changed"], record["undoable"], record["filter"]) == (
        {"a": 1, "b": 1}, [], True, {"prefix": "x/"})
    assert latest_undoable(portfolio_db) == record
    set_verdict(portfolio_db, "b", status="parked", order=None, seasonal_order=None, reviewer="bob", version=1)
    record = get_bulk_approval(portfolio_db, bulk_id)
    assert (record["changed"], record["undoable"]) == (["b"], False)
    assert latest_undoable(portfolio_db) is None
    mark_undone(portfolio_db, bulk_id, "ann")
    assert get_bulk_approval(portfolio_db, bulk_id)["undone_by"] == "ann"
    with pytest.raises(UnknownBulkApproval):
        get_bulk_approval(portfolio_db, bulk_id + 1)
