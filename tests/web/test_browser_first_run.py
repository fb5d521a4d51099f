"""A first run that explains itself, in headless Chromium: the queue lists the series that could
not be analysed, each with its reason.

The database holds three series of the invented demo portfolio: two the import refuses (the
stuck sensor, whose every value is equal, and the 8-point series) and one the engine analyses;
plus a 20-point series whose analysis fails in a real run of the job, asked for a seasonal period
longer than the series (``app.core.seasonality``: a period must be shorter than the series).
"""

from __future__ import annotations

import pytest
from browser_kit import ARTIFACTS, api
from web_portfolio import analyse_all, demo_subset_csv

from app.core.identify import EngineOptions
from app.jobs.analyze import run_analysis
from app.store.database import open_database
from app.store.imports import import_portfolio

pytestmark = pytest.mark.browser

STUCK_SENSOR = "polarquay/chiller-5/temp-c"
EIGHT_POINTS = "hearthloaf/station-row/sandwich-loaf"
ANALYSED = "polarquay/freezer-3/temp-c"
FAILING = "probe/twenty-points"
FAILING_POINTS = 20
TOO_LONG_PERIOD = 24


@pytest.fixture(scope="module")
def first_run(tmp_path_factory) -> dict:
    """The database and what its imports reported: ``{"db", "rejected": {series_id: message}}``."""
    folder = tmp_path_factory.mktemp("first-run")
    db_path = folder / "first-run.db"
    probe = folder / "probe.csv"
    probe.write_text("series_id,timestamp,value\n" + "".join(
        f"{FAILING},{t},{(t * 7919) % 13}\n" for t in range(FAILING_POINTS)))
    with open_database(db_path) as db:
        report = import_portfolio(db, demo_subset_csv(folder / "demo.csv", [STUCK_SENSOR, EIGHT_POINTS, ANALYSED]))
        analyse_all(db)
        import_portfolio(db, probe)
    run = run_analysis(db_path, workers=1, options=EngineOptions(period=TOO_LONG_PERIOD))
    assert (run["total"], run["failed"]) == (1, 1)
    return {"db": db_path, "rejected": {r["series_id"]: r["message"] for r in report.rejected}}


@pytest.fixture(scope="module")
def demo_db(first_run):
    return first_run["db"]


def test_the_queue_lists_the_series_not_analysed_with_their_reasons(page, live_server, first_run):
    assert set(first_run["rejected"]) == {STUCK_SENSOR, EIGHT_POINTS}  # refused at import, as in the demo
    page.goto(live_server + "/")

    section = page.locator("[data-not-analysed]")
    assert section.is_visible()
    assert "2 series not analysed" in section.locator("summary").inner_text()
    rows = section.locator("[data-rejected]")
    assert rows.evaluate_all("rows => rows.map(r => r.dataset.rejected)") == sorted(first_run["rejected"])
    for i in range(rows.count()):
        row = rows.nth(i)
        series_id = row.get_attribute("data-rejected")
        reason = row.locator(".reason").inner_text()
        # The reason the import gave, without the series id it starts with (the row names it).
        assert first_run["rejected"][series_id] == f"series {series_id!r}: {reason}"
        assert "not analysed" in row.inner_text()

    failed = page.locator(f'[data-queue] [data-row][data-series-id="{FAILING}"]')
    assert "analysis failed" in failed.inner_text()
    message = failed.locator("[data-analysis-message]").inner_text()
    assert f"seasonal period {TOO_LONG_PERIOD}" in message and str(FAILING_POINTS) in message
    ARTIFACTS.mkdir(exist_ok=True)
    page.screenshot(path=str(ARTIFACTS / "first-run-queue.png"), full_page=True)

    # The keyboard walks the series to review only: j marks the first row of the queue table.
    page.keyboard.press("j")
    assert page.locator(".row-marked").get_attribute("data-series-id") == api(live_server, "/api/series")["items"][0]["series_id"]
    assert not page.errors


def test_the_not_analysed_rows_follow_the_filter_as_the_api_does(page, live_server):
    page.goto(live_server + "/?prefix=hearthloaf/")
    shown = page.locator("[data-not-analysed] [data-rejected]").evaluate_all("rows => rows.map(r => r.dataset.rejected)")
    assert shown == [r["series_id"] for r in api(live_server, "/api/series?prefix=hearthloaf/")["rejected"]] == [EIGHT_POINTS]

    page.goto(live_server + "/?confidence=firm")
    assert page.locator("[data-not-analysed]").count() == 0
    assert api(live_server, "/api/series?confidence=firm")["rejected"] == []
    assert not page.errors
