"""The series that could not be analysed, through the API and the queue page: those the import
refused (``rejected`` of ``GET /api/series``, ``not_analysed`` of ``GET /api/portfolio``) and
those whose analysis failed (``analysis_message`` on their row).

The fixture portfolio holds a constant series that the import refuses (``web_portfolio.py``).
"""

from __future__ import annotations

import re

import pytest
from web_portfolio import CONSTANT_ID

from app.core.errors import SeriesProblem
from app.store.analyses import save_failure
from app.store.imports import import_portfolio, list_imports
from app.store.series import series_fingerprint
from app.web import queue

FAILED_ID = "plant-b/ar2"
ENGINE_WORDS = "seasonal period 24 is not shorter than the series (60 observations)"


def _import_rejection(db) -> dict:
    """The import's own record of the constant series' rejection."""
    [rejection] = [r for report in list_imports(db) for r in report.rejected]
    return rejection


def test_series_list_names_the_rejected_series_with_the_import_reason(client, db):
    rejection = _import_rejection(db)
    body = client.get("/api/series").json()
    assert [i["series_id"] for i in body["items"] if i["series_id"] == CONSTANT_ID] == []
    [rejected] = body["rejected"]
    assert (rejected["series_id"], rejected["flag"], rejected["line"]) == (CONSTANT_ID, "constant", None)
    assert f"series {CONSTANT_ID!r}: {rejected['reason']}" == rejection["message"]
    assert {"file", "imported_at"} <= set(rejected)
    assert all(item["analysis_message"] is None for item in body["items"])


@pytest.mark.parametrize("params, shown", [
    ({"q": "CONST"}, [CONSTANT_ID]),
    ({"prefix": "broken/"}, [CONSTANT_ID]),
    ({"prefix": "plant-a/"}, []),
    ({"status": "pending"}, []),  # a rejected series has no verdict, analysis or flag to match
    ({"confidence": "weak"}, []),
    ({"flag": "gaps"}, []),
])
def test_the_rejected_series_follow_the_id_filters_only(client, params, shown):
    assert [r["series_id"] for r in client.get("/api/series", params=params).json()["rejected"]] == shown


def test_a_failed_analysis_carries_its_reason_on_the_row_and_in_the_portfolio(client, db):
    # Stored as a run stores a SeriesProblem whose engine message named the series already.
    message = str(SeriesProblem(FAILED_ID, str(SeriesProblem(FAILED_ID, ENGINE_WORDS))))
    save_failure(db, FAILED_ID, series_fingerprint(db, FAILED_ID), message, None)
    [item] = client.get("/api/series", params={"q": FAILED_ID}).json()["items"]
    assert (item["analysis_state"], item["analysis_message"]) == ("failed", ENGINE_WORDS)
    portfolio = client.get("/api/portfolio").json()
    assert (portfolio["failed"], portfolio["rejected"]) == (1, 1)
    # The queue's counts add up: a series without a suggestion is named beside the confidence cards.
    assert re.search(r"data-unsuggested>1 without a suggestion", client.get("/").text)
    assert portfolio["not_analysed"] == [
        {"series_id": CONSTANT_ID, "stage": "import", "reason": _import_rejection(db)["message"].split(": ", 1)[1]},
        {"series_id": FAILED_ID, "stage": "analysis", "reason": ENGINE_WORDS},
    ]


def test_the_queue_page_lists_the_rejected_series_apart_from_the_rows_to_review(client):
    page = client.get("/").text
    assert "1 series not analysed" in page
    assert f'data-rejected="{CONSTANT_ID}"' in page
    assert f'data-row data-series-id="{CONSTANT_ID}"' not in page
    assert "data-not-analysed" not in client.get("/", params={"status": "approved"}).text


def test_the_queue_page_shows_the_first_rejected_series_and_links_to_all(client, db, tmp_path, monkeypatch):
    flat = tmp_path / "flat.csv"
    flat.write_text("series_id,timestamp,value\n" + "".join(f"flat/{i},{t},5\n" for i in range(3) for t in range(20)))
    import_portfolio(db, flat)
    monkeypatch.setattr(queue, "REJECTED_SHOWN", 2)
    page = client.get("/", params={"prefix": "flat/"}).text
    assert "3 series not analysed" in page
    assert re.findall(r'data-rejected="([^"]+)"', page) == ["flat/0", "flat/1"]
    assert "The first 2 are shown" in page
    assert len(client.get("/api/series", params={"prefix": "flat/"}).json()["rejected"]) == 3


def test_the_queue_page_names_a_series_whose_new_data_an_import_refused(client, db, tmp_path):
    # It keeps its earlier data and analysis, so it is no row "not analysed"; without this
    # block nothing on the page said the newer file was refused for it.
    stored = "plant-a/line-1/ar1"
    update = tmp_path / "update.csv"
    update.write_text(f"series_id,timestamp,value\n{stored},2099-01-01,twelve\n")
    import_portfolio(db, update)
    page = client.get("/").text
    assert f'data-refused-update="{stored}"' in page and "kept its earlier data" in page
    assert "value &#39;twelve&#39; is not a number" in page
