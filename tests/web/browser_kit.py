"""What the browser tests share: the Chromium they drive, the demo series their server holds,
and small helpers for the pages.

Uses Debian's ``chromium`` (``apt-get install -y chromium``) driven by Playwright with
``executable_path`` set, since ``playwright install`` cannot download browsers here. When the
browser is missing the tests are skipped with a message, except under CI (``$CI`` set), where
that is a failure. The fixtures (``demo_db``, ``live_server``, ``browser``, ``page``) live in
``conftest.py`` and use these.
"""

from __future__ import annotations

import os
from pathlib import Path
from urllib.parse import quote, urlsplit

import httpx
import pytest

CHROMIUM = Path("/usr/bin/chromium")
CHROMIUM_ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
                 "--disable-component-update", "--no-first-run"]
ARTIFACTS = Path(__file__).resolve().parents[2] / "test-artifacts"
DEMO_IDS = [
    "polarquay/freezer-3/temp-c",
    "polarquay/freezer-5/temp-c",
    "hearthloaf/riverside/sourdough",
    "hearthloaf/chain/sugar-kg",
    "hearthloaf/station-row/coffee-cake",
    "polarquay/chiller-4/temp-c",
]


def playwright_entry():
    """The Playwright entry point, or skip/fail (under CI) when the browser cannot run."""
    problem = None
    try:
        from playwright.sync_api import sync_playwright
    except ImportError:
        problem = "Playwright for Python is not installed (pip install playwright)"
    if problem is None and not CHROMIUM.exists():
        problem = f"no browser at {CHROMIUM} (apt-get install -y chromium)"
    if problem:
        if os.environ.get("CI"):
            pytest.fail(f"browser tests cannot run under CI: {problem}")
        pytest.skip(f"browser tests skipped: {problem}")
    return sync_playwright


def api(live_server: str, path: str) -> dict:
    return httpx.get(live_server + path).json()


def series_url(live_server: str, series_id: str) -> str:
    return f"{live_server}/series/{quote(series_id, safe='/')}"


def set_reviewer(page, live_server: str, name: str = "Browser Test") -> None:
    page.goto(live_server + "/")
    page.fill("#reviewer-name", name)
    page.click(".whoami button")
    page.wait_for_load_state()


def assert_served_locally(page, live_server: str) -> None:
    """Every request the page made went to the dashboard itself (it works offline), and no
    script failed."""
    host = urlsplit(live_server).netloc
    assert all(urlsplit(u).netloc == host for u in page.requests), page.requests
    assert not page.errors
