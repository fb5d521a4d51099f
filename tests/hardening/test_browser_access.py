"""In a real browser (Debian's chromium driven by Playwright, as tests/web/test_browser.py does):
a server started with an access token sends a stranger to the login page; after the token is
typed the dashboard opens; a note holding ``<script>`` shows as text and runs nothing; the
decision form, with its CSRF field, saves a verdict.
"""

from __future__ import annotations

import os
from pathlib import Path
from urllib.parse import quote

import httpx
import pytest
from conftest import SEED_ID
from reviewers import stored_history

pytestmark = pytest.mark.browser

CHROMIUM = Path("/usr/bin/chromium")
CHROMIUM_ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
                 "--disable-component-update", "--no-first-run"]
TOKEN = "browser-test-token-0123456789"
NOTE = "<script>window.__lagdeskInjected = true</script><img src=x onerror=\"window.__lagdeskInjected = true\">"
PAGE_TIMEOUT_MS = 15_000


@pytest.fixture
def page():
    try:
        from playwright.sync_api import sync_playwright
    except ImportError:
        problem = "Playwright for Python is not installed"
    else:
        problem = None if CHROMIUM.exists() else f"no browser at {CHROMIUM} (apt-get install -y chromium)"
    if problem:
        if os.environ.get("CI"):
            pytest.fail(f"browser tests cannot run under CI: {problem}")
        pytest.skip(problem)
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS)
        try:
            tab = browser.new_page()
            tab.set_default_timeout(PAGE_TIMEOUT_MS)
            yield tab
        finally:
            browser.close()


def test_login_then_a_scripted_note_is_text_and_the_form_saves(seeded_db, live_server, page):
    server = live_server(seeded_db, "--token", TOKEN)
    api = f"{server.url}/api/series/{quote(SEED_ID, safe='/')}/verdict"
    saved = httpx.post(api, json={"status": "parked", "version": 0, "note": NOTE, "reviewer": "Ada"},
                       headers={"X-Lagdesk-Token": TOKEN})
    assert saved.status_code == 200

    review = f"{server.url}/series/{quote(SEED_ID, safe='/')}"
    page.goto(review)
    assert page.url.startswith(f"{server.url}/login")
    page.fill("input[name=token]", TOKEN)
    page.click("form.stacked button[type=submit]")
    page.wait_for_url(review)

    assert page.evaluate("window.__lagdeskInjected === undefined")
    assert NOTE in page.inner_text("body")  # the markup is shown, as characters

    page.fill("#decision textarea[name=note]", "second look")
    page.fill("#decision input[name=reviewer]", "Bo")
    page.click("#decision button[value=park]")
    page.wait_for_load_state()
    notes = [note for sid, _, note in stored_history(seeded_db) if sid == SEED_ID]
    assert notes == [NOTE, "second look"]
