"""Each messy case of the demo portfolio caught and explained in real Chromium: a spike, a level
shift, a gap, a dropout-heavy channel, intermittent demand, and a stuck sensor that the import
refuses. The series are found by their defect in demo_data/truth.csv, so the test follows the
demo rather than naming it twice. Screenshots go to test-artifacts/messy-*.png.
"""

from __future__ import annotations

import csv
from pathlib import Path

import pytest
from browser_kit import ARTIFACTS, api, assert_served_locally, series_url, set_reviewer
from web_portfolio import build_database, demo_subset_csv

TRUTH = Path(__file__).resolve().parents[2] / "demo_data" / "truth.csv"
# What the review page must say of each defect (the engine's words or the page's).
EXPLAINED = {
    "outlier": ["additive outlier", "Interventions found in the residuals"],
    "level_shift": ["level shift", "Interventions found in the residuals"],
    "gap": ["missing"],
    "dropouts": ["missing"],
    "intermittent": ["intermittent", "Croston", "not an ARIMA series"],
}
STUCK = "constant"


def _by_defect() -> dict[str, str]:
    """The first demo series of each defect the test covers."""
    found: dict[str, str] = {}
    with TRUTH.open(newline="") as handle:
        for row in csv.DictReader(handle):
            defect = row["awkwardness"]
            if (defect in EXPLAINED or defect == STUCK) and defect not in found:
                found[defect] = row["series_id"]
    return found


MESSY = _by_defect()


@pytest.fixture(scope="module")
def demo_db(tmp_path_factory) -> Path:
    """The messy demo series only (overrides the shared fixture for this module)."""
    folder = tmp_path_factory.mktemp("messy")
    build_database(folder / "demo.db", demo_subset_csv(folder / "demo.csv", list(MESSY.values())))
    return folder / "demo.db"


def test_the_demo_has_every_messy_case():
    assert set(MESSY) == {*EXPLAINED, STUCK}


@pytest.mark.parametrize("defect", sorted(EXPLAINED))
def test_each_messy_case_is_caught_and_explained_on_its_review_page(page, live_server, defect):
    series_id = MESSY[defect]
    page.goto(series_url(live_server, series_id))
    page.wait_for_selector("#chart-series .main-svg")
    text = page.inner_text("main")
    for words in EXPLAINED[defect]:
        assert words in text, (series_id, words)
    detail = api(live_server, f"/api/series/{series_id}")
    assert detail["confidence"] != "firm", (series_id, detail["confidence_reasons"])
    if defect == "intermittent":  # one-click approval of an ARIMA for it asks for a note
        assert "needs a note" in page.inner_text("[data-key-approve]")
    page.screenshot(path=str(ARTIFACTS / f"messy-{defect.replace('_', '-')}.png"), full_page=True)
    assert_served_locally(page, live_server)


def test_the_stuck_sensor_is_listed_as_not_analysed_with_its_reason(page, live_server):
    page.goto(live_server + "/")
    block = page.locator("[data-not-analysed]")
    assert MESSY[STUCK] in block.inner_text() and "constant" in block.inner_text()
    page.screenshot(path=str(ARTIFACTS / "messy-stuck-sensor.png"), full_page=True)


def test_a_reviewer_sees_the_shift_left_in_and_fits_without_it(page, live_server):
    series_id = MESSY["level_shift"]
    set_reviewer(page, live_server)
    page.goto(series_url(live_server, series_id))
    page.wait_for_selector("#chart-acf .main-svg")
    # The correlograms as observed: the shift left in makes the ACF die away slowly.
    assert not page.is_visible("#chart-acf-observed")
    page.check("[data-correlogram-switch] input[value=observed]")
    page.wait_for_selector("#chart-acf-observed .main-svg")
    assert not page.is_visible("#chart-acf")
    # Untick the engine's level shift and fit the suggested order without it.
    box = page.locator("[data-interventions-edit] input[name=interventions]").first
    assert box.is_checked()
    box.uncheck()
    assert page.is_checked("[data-custom-choice]")
    page.click("[data-fit]")
    page.wait_for_selector("#custom-fit [data-fit-interventions]")
    assert "No interventions taken out." in page.inner_text("#custom-fit")
    page.locator("[data-correlograms]").scroll_into_view_if_needed()
    page.screenshot(path=str(ARTIFACTS / "messy-level-shift-dropped.png"), full_page=True)
    assert_served_locally(page, live_server)
