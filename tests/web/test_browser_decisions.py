"""Deciding in headless Chromium: the inline reviewer prompt, the gated approve, a custom model with
its own transform and constant seen in the export, reopening one decision, "not an ARIMA series",
and the undo of a bulk approval from its page and from the queue. The live server holds a few demo
series analysed by the real engine (tests/web/conftest.py); screenshots go to
test-artifacts/decision-*.png.
"""

from __future__ import annotations

from dataclasses import replace
from urllib.parse import quote

import pytest
from browser_kit import ARTIFACTS, api, series_url, set_reviewer

from app.store.analyses import load_analysis, save_analysis
from app.store.database import open_database
from app.store.series import series_fingerprint

pytestmark = pytest.mark.browser

PROMPTED = "polarquay/freezer-3/temp-c"
GATED = "hearthloaf/riverside/sourdough"
OVERRIDDEN = "hearthloaf/chain/sugar-kg"
NOT_ARIMA = "hearthloaf/station-row/coffee-cake"
BULK_PREFIX = "polarquay/"


def verdict_of(live_server: str, series_id: str) -> dict:
    return api(live_server, f"/api/series/{quote(series_id, safe='/')}")["verdict"]


def shoot(page, name: str, selector: str | None = None) -> None:
    ARTIFACTS.mkdir(exist_ok=True)
    target = page.locator(selector) if selector else page
    target.screenshot(path=str(ARTIFACTS / f"decision-{name}.png"))


def test_the_approve_key_without_a_name_prompts_next_to_the_name_field(page, live_server):
    page.goto(series_url(live_server, PROMPTED))  # a fresh browser: no reviewer remembered
    prompt = page.locator("[data-reviewer-prompt]")
    assert prompt.is_hidden()
    page.keyboard.press("a")
    prompt.wait_for(state="visible")
    assert "Type your name here first" in prompt.inner_text()
    assert page.evaluate("document.activeElement.name") == "reviewer"
    assert page.url == series_url(live_server, PROMPTED)  # the form was kept from going
    shoot(page, "reviewer-prompt", "#decision-panel")
    assert verdict_of(live_server, PROMPTED)["status"] == "pending"
    page.fill("[data-reviewer]", "Pat")
    assert prompt.is_hidden()
    with page.expect_navigation():
        page.click("[data-key-approve]")
    assert (verdict_of(live_server, PROMPTED)["status"], verdict_of(live_server, PROMPTED)["reviewer"]) == ("approved", "Pat")
    assert not page.errors


def test_a_risky_suggestion_asks_for_a_note_before_it_is_approved(page, live_server, demo_db):
    with open_database(demo_db) as db:  # the stored suggestion made one that did not converge
        analysis = load_analysis(db, GATED)
        risky = replace(analysis, candidates=(replace(analysis.suggested, converged=False), *analysis.candidates[1:]))
        save_analysis(db, GATED, series_fingerprint(db, GATED), risky, None)
    set_reviewer(page, live_server)
    page.goto(series_url(live_server, GATED))
    approve = page.locator("[data-key-approve]")
    assert "needs a note" in approve.inner_text()
    assert "Needs a note saying why: the fit did not converge" in page.locator("[data-approval-risks]").inner_text()
    page.keyboard.press("a")
    page.locator("[data-note-prompt]").wait_for(state="visible")
    assert page.evaluate("document.activeElement.name") == "note"
    shoot(page, "gated-approve", "#decision-panel")
    assert verdict_of(live_server, GATED)["status"] == "pending"
    page.fill("#decision textarea[name=note]", "flat optimum; the AR(1) reads well")
    with page.expect_navigation():
        approve.click()
    verdict = verdict_of(live_server, GATED)
    assert (verdict["status"], verdict["note"]) == ("approved", "flat optimum; the AR(1) reads well")
    assert not page.errors


def test_a_custom_model_with_its_own_transform_and_constant_reaches_the_export_and_reopens(page, live_server):
    set_reviewer(page, live_server)
    page.goto(series_url(live_server, OVERRIDDEN))
    page.keyboard.press("c")
    for name, value in zip("pdqPDQs", ["0", "1", "1", "0", "0", "0", "0"]):
        page.fill(f"#decision input[name={name}]", value)
    lam = page.locator("[data-lambda]")
    assert lam.is_hidden()
    page.select_option("[data-transform]", "box_cox")
    assert lam.is_visible()
    page.fill("#decision input[name=lam]", "0.5")
    page.select_option("[data-constant]", "yes")
    page.click("[data-fit]")
    fitted = page.locator('#custom-fit [data-candidate-detail="custom"]')
    fitted.wait_for()
    fitted.locator(".barlayer .point").first.wait_for()
    assert "drift" in fitted.inner_text()
    shoot(page, "custom-model", "#decision-panel")
    page.fill("#decision textarea[name=note]", "square-root scale, with drift")
    with page.expect_navigation():
        page.click("[data-key-save]")
    if page.locator("[data-confirm]").count():  # residuals failing Ljung-Box at 1%: tick and save again
        page.check("[data-confirm] input")
        with page.expect_navigation():
            page.click("[data-key-save]")
    verdict = verdict_of(live_server, OVERRIDDEN)
    assert (verdict["status"], verdict["order"], verdict["transform"], verdict["trend"]) == (
        "overridden", [0, 1, 1], {"box_cox": 0.5}, "t")
    record = next(o for o in api(live_server, "/api/orders")["orders"] if o["series_id"] == OVERRIDDEN)
    assert (record["transform"], record["include_constant"]) == ({"box_cox": 0.5}, True) and "drift" in record["parameters"]

    page.goto(series_url(live_server, OVERRIDDEN))
    assert "with a drift" in page.locator(".current-verdict").inner_text()
    with page.expect_navigation():
        page.click("[data-reopen]")
    page.goto(series_url(live_server, OVERRIDDEN))
    history = page.locator("#history").inner_text()
    assert "overridden → pending" in history and "pending → overridden" in history
    shoot(page, "reopen", "#history")
    assert verdict_of(live_server, OVERRIDDEN)["status"] == "pending"
    assert OVERRIDDEN not in [o["series_id"] for o in api(live_server, "/api/orders")["orders"]]
    assert not page.errors


def test_not_an_arima_series_is_recorded_and_listed_apart(page, live_server):
    set_reviewer(page, live_server)
    page.goto(series_url(live_server, NOT_ARIMA))
    page.fill("#decision textarea[name=note]", "promotions drive it; route to the event model")
    with page.expect_navigation():
        page.click("[data-not-arima]")
    page.goto(series_url(live_server, NOT_ARIMA))
    assert "Recorded as not an ARIMA series" in page.locator("#decision-panel").inner_text()
    shoot(page, "not-arima", "#decision-panel")
    routed = api(live_server, "/api/orders")["not_arima"]
    assert [(r["series_id"], r["note"]) for r in routed] == [(NOT_ARIMA, "promotions drive it; route to the event model")]
    page.goto(live_server + "/?status=not_arima")
    assert NOT_ARIMA in page.locator("[data-queue]").inner_text()
    assert not page.errors


def test_a_bulk_approval_is_undone_from_the_queue(page, live_server):
    set_reviewer(page, live_server)
    firm = [i["series_id"] for i in api(live_server, f"/api/series?prefix={BULK_PREFIX}&status=pending&confidence=firm")["items"]]
    assert firm, "the demo subset should hold pending firm series under polarquay/"
    page.goto(f"{live_server}/approve-firm?prefix={BULK_PREFIX}")
    with page.expect_navigation():
        page.click("form.stacked button[type=submit]")
    assert "/bulk/" in page.url and "Undo this bulk approval" in page.inner_text("main")
    shoot(page, "bulk-approved")
    assert all(verdict_of(live_server, sid)["status"] == "approved" for sid in firm)
    page.goto(live_server + "/")
    banner = page.locator("[data-undo-banner]")
    assert f"approved {len(firm)} series" in banner.inner_text()
    shoot(page, "queue-undo", "[data-undo-banner]")
    with page.expect_navigation():
        banner.locator("button").click()
    assert f"Reopened {len(firm)} series" in page.inner_text("main")
    assert page.locator("[data-undo-banner]").count() == 0
    for sid in firm:
        verdict = verdict_of(live_server, sid)
        assert verdict["status"] == "pending"
        steps = api(live_server, f"/api/series/{quote(sid, safe='/')}")["history"]
        assert [s["status"] for s in steps][-2:] == ["approved", "pending"]
    assert not page.errors
