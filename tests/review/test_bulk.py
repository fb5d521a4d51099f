"""Decisions on many series at once: parking a selection or a filter with one note, approving the
firm suggestions of a filter, and undoing that approval."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd
import pytest
from threadpoolctl import threadpool_limits

from app.core.identify import identify_series
from app.core.vocabulary import Confidence
from app.review.bulk import UndoRefused, approve_firm, count_waiting, park, undo_bulk_approval, waiting_ids
from app.review.decisions import DecisionError, approval_risks
from app.review.filters import SeriesFilter
from app.store.analyses import save_analysis
from app.store.bulk_approvals import UnknownBulkApproval, get_bulk_approval
from app.store.database import UnknownSeries, open_database
from app.store.imports import import_portfolio
from app.store.series import series_fingerprint
from app.store.verdicts import get_verdict, mark_recheck, set_verdict, verdict_history

IDS = ["shop-1/bread", "shop-1/rolls", "shop-1/cake", "shop-2/bread"]


@pytest.fixture
def db(tmp_path):
    rows = [{"series_id": sid, "timestamp": t, "value": float((t * (i + 3)) % 7)} for i, sid in enumerate(IDS) for t in range(40)]
    pd.DataFrame(rows).to_csv(tmp_path / "p.csv", index=False)
    connection = open_database(tmp_path / "p.db")
    import_portfolio(connection, tmp_path / "p.csv")
    set_verdict(connection, "shop-1/rolls", status="approved", order=[1, 0, 0], seasonal_order=None, reviewer="ann", version=0)
    set_verdict(connection, "shop-1/cake", status="approved", order=[1, 0, 0], seasonal_order=None, reviewer="ann", version=0)
    mark_recheck(connection, "shop-1/cake", "the data changed")
    yield connection
    connection.close()


def test_park_parks_the_waiting_series_with_one_note_and_leaves_decided_ones(db):
    parked = park(db, ["shop-1/bread", "shop-1/rolls", "shop-1/cake", "shop-1/bread"], "ann", "ask the shop")
    assert parked == ["shop-1/bread", "shop-1/cake"]
    for sid in parked:
        verdict = get_verdict(db, sid)
        assert (verdict["status"], verdict["note"], verdict["reviewer"]) == ("parked", "ask the shop", "ann")
        assert verdict_history(db, sid)[-1]["status"] == "parked"
    assert get_verdict(db, "shop-1/rolls")["status"] == "approved"
    assert park(db, ["shop-1/bread"], "ann", "again") == []  # already parked


def test_park_needs_a_note_and_known_ids_and_then_parks_nothing(db):
    with pytest.raises(DecisionError, match="note"):
        park(db, ["shop-1/bread"], "ann", "  ")
    with pytest.raises(UnknownSeries):
        park(db, ["shop-1/bread", "no/such"], "ann", "why")
    assert get_verdict(db, "shop-1/bread")["status"] == "pending"


def test_waiting_ids_of_a_filter_are_its_pending_and_recheck_series(db):
    group = SeriesFilter(prefix="shop-1/")
    assert sorted(waiting_ids(db, group)) == ["shop-1/bread", "shop-1/cake"]
    assert count_waiting(db, group) == 2
    assert waiting_ids(db, SeriesFilter(prefix="shop-1/", status="recheck")) == ["shop-1/cake"]
    assert waiting_ids(db, SeriesFilter(status="approved")) == [] and count_waiting(db, SeriesFilter(status="approved")) == 0
    assert count_waiting(db, SeriesFilter()) == 3


# --- bulk approval and its undo ------------------------------------------------------------------

def decision_tables(db) -> dict[str, list]:
    """Every row of the tables decisions write, to compare before and after a refused step."""
    return {name: db.execute(f"SELECT * FROM {name} ORDER BY 1, 2").fetchall()
            for name in ("verdicts", "verdict_history", "bulk_approvals", "bulk_approved")}


@pytest.fixture
def firm_db(db):
    """The portfolio with a real engine analysis (of a seeded AR(1) path, phi = 0.6) stored, made
    firm, for every series; shop-2/bread's suggestion lacks standard errors."""
    rng = np.random.default_rng(7)
    noise = rng.normal(size=120)
    path = np.zeros(120)
    for t in range(1, 120):
        path[t] = 0.6 * path[t - 1] + noise[t]
    with threadpool_limits(limits=1):
        result = identify_series(pd.Series(10 + path, index=range(120)), "ar1").to_analysis()
    assert not approval_risks(result.suggested)
    for sid in IDS:
        firm = replace(result, series_id=sid, confidence=Confidence.FIRM)
        if sid == "shop-2/bread":
            suggested = firm.suggested
            params = tuple(replace(p, se=None) if p.name != "sigma2" else p for p in suggested.params)
            firm = replace(firm, candidates=(replace(suggested, params=params), *firm.candidates[1:]))
        save_analysis(db, sid, series_fingerprint(db, sid), firm, None)
    return db


def test_approve_firm_leaves_a_suggestion_without_standard_errors_and_records_the_batch(firm_db):
    done = approve_firm(firm_db, SeriesFilter(), "ann", "firm ones")
    # shop-1/rolls is decided already, shop-1/cake awaits a recheck, shop-2/bread lacks standard errors.
    assert done.approved == ["shop-1/bread"]
    assert get_verdict(firm_db, "shop-2/bread")["status"] == "pending"
    record = get_bulk_approval(firm_db, done.bulk_id)
    assert record["approved"] == {"shop-1/bread": get_verdict(firm_db, "shop-1/bread")["version"]}
    assert (record["reviewer"], record["note"], record["undoable"]) == ("ann", "firm ones", True)
    assert approve_firm(firm_db, SeriesFilter(), "ann").bulk_id is None  # nothing left: nothing recorded


def test_approve_firm_is_all_or_nothing_when_its_record_cannot_be_written(firm_db, monkeypatch):
    # The approvals are one transaction with their record: without it, a failure after some
    # approvals left them approved with no bulk approval to undo them by.
    set_verdict(firm_db, "shop-1/cake", status="pending", order=None, seasonal_order=None, reviewer="bob",
                version=get_verdict(firm_db, "shop-1/cake")["version"])
    before = decision_tables(firm_db)

    def fails(*args, **kwargs):
        raise RuntimeError("disk gone")

    monkeypatch.setattr("app.review.bulk.record_bulk_approval", fails)
    with pytest.raises(RuntimeError, match="disk gone"):
        approve_firm(firm_db, SeriesFilter(), "ann")
    assert decision_tables(firm_db) == before


def test_undo_reopens_exactly_the_series_the_bulk_approval_approved(firm_db):
    set_verdict(firm_db, "shop-2/bread", status="parked", order=None, seasonal_order=None, reviewer="bob", version=0)
    set_verdict(firm_db, "shop-2/bread", status="pending", order=None, seasonal_order=None, reviewer="bob", version=1)
    first = approve_firm(firm_db, SeriesFilter(prefix="shop-1/"), "ann")
    assert first.approved == ["shop-1/bread"]
    rolls_before = get_verdict(firm_db, "shop-1/rolls")
    assert undo_bulk_approval(firm_db, first.bulk_id, "ann") == ["shop-1/bread"]
    bread = get_verdict(firm_db, "shop-1/bread")
    assert (bread["status"], bread["order"], bread["note"]) == ("pending", None, f"undo of bulk approval {first.bulk_id}")
    assert [(h["from_status"], h["status"]) for h in verdict_history(firm_db, "shop-1/bread")] == [
        ("pending", "approved"), ("approved", "pending")]
    assert get_verdict(firm_db, "shop-1/rolls") == rolls_before  # approved one by one: not this batch's
    assert get_bulk_approval(firm_db, first.bulk_id)["undone_by"] == "ann"
    before = decision_tables(firm_db)
    with pytest.raises(UndoRefused, match="undone already"):
        undo_bulk_approval(firm_db, first.bulk_id, "ann")
    assert decision_tables(firm_db) == before


def test_undo_is_refused_naming_the_series_changed_since_and_changes_nothing(firm_db):
    done = approve_firm(firm_db, SeriesFilter(prefix="shop-1/bread"), "ann")
    set_verdict(firm_db, "shop-2/bread", status="parked", order=None, seasonal_order=None, reviewer="bob", version=0)
    set_verdict(firm_db, "shop-2/bread", status="pending", order=None, seasonal_order=None, reviewer="bob", version=1)
    again = approve_firm(firm_db, SeriesFilter(prefix="shop-2/"), "ann")
    assert again.approved == [] and done.approved == ["shop-1/bread"]
    version = get_verdict(firm_db, "shop-1/bread")["version"]
    set_verdict(firm_db, "shop-1/bread", status="overridden", order=[0, 0, 1], seasonal_order=None, reviewer="bob",
                version=version)
    before = decision_tables(firm_db)
    with pytest.raises(UndoRefused, match=r"1 of its 1 series changed since \('shop-1/bread'\)") as refused:
        undo_bulk_approval(firm_db, done.bulk_id, "ann")
    assert refused.value.http_status == 409
    assert decision_tables(firm_db) == before
    with pytest.raises(UnknownBulkApproval):
        undo_bulk_approval(firm_db, done.bulk_id + 100, "ann")
