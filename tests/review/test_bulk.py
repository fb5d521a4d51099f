"""Decisions on many series at once: parking a selection or a filter with one note."""

from __future__ import annotations

import pandas as pd
import pytest

from app.review.bulk import count_waiting, park, waiting_ids
from app.review.decisions import DecisionError
from app.review.filters import SeriesFilter
from app.store.database import UnknownSeries, open_database
from app.store.imports import import_portfolio
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
