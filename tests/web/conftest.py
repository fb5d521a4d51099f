"""Fixtures for the web tests: one analysed portfolio database, copied fresh for each test; and,
for the browser tests, a live server on a few demo series and the Chromium that drives it."""

from __future__ import annotations

import shutil
import socket
import threading
from pathlib import Path

import pytest
import uvicorn
from browser_kit import CHROMIUM, CHROMIUM_ARGS, DEMO_IDS, playwright_entry
from fastapi.testclient import TestClient
from web_client import TEST_HOSTS, with_csrf
from web_portfolio import add_stored_seasonal_analysis, build_database, demo_subset_csv, synthetic_series, write_long_csv

from app.config import Settings
from app.core.analysis import Analysis
from app.store.database import open_database
from app.web.main import create_app


@pytest.fixture(scope="session")
def analysed(tmp_path_factory):
    """``(db_path, results)``: the synthetic portfolio imported and analysed once per session."""
    folder = tmp_path_factory.mktemp("web-portfolio")
    csv_path = write_long_csv(folder / "portfolio.csv", synthetic_series())
    db_path = folder / "portfolio.db"
    results = build_database(db_path, csv_path)
    series_id, stored = add_stored_seasonal_analysis(db_path, folder)
    return db_path, {**results, series_id: stored}


@pytest.fixture
def results(analysed) -> dict[str, Analysis]:
    """The engine's analysis of each analysed series, as the fixture computed it."""
    return analysed[1]


@pytest.fixture
def db_path(analysed, tmp_path):
    """A private copy of the analysed database (tests write verdicts into it)."""
    target = tmp_path / "lagdesk.db"
    shutil.copy(analysed[0], target)
    return target


@pytest.fixture
def settings(db_path) -> Settings:
    return Settings(db_path=db_path, page_size=4, analysis_workers=1, allowed_hosts=TEST_HOSTS)


@pytest.fixture
def client(settings):
    with TestClient(create_app(settings)) as test_client:
        yield with_csrf(test_client)


@pytest.fixture
def db(db_path):
    """A second connection to the test's database, to check what the app stored."""
    connection = open_database(db_path)
    yield connection
    connection.close()


# --- browser tests ---------------------------------------------------------------------------

@pytest.fixture(scope="module")
def demo_db(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("browser")
    build_database(folder / "demo.db", demo_subset_csv(folder / "demo.csv", DEMO_IDS))
    return folder / "demo.db"


@pytest.fixture(scope="module")
def live_server(demo_db):
    """The dashboard served by uvicorn in a thread on a free loopback port; yields its base URL."""
    sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
    sock.bind(("127.0.0.1", 0))
    port = sock.getsockname()[1]
    settings = Settings(db_path=demo_db, port=port)
    server = uvicorn.Server(uvicorn.Config(create_app(settings), log_level="warning"))
    thread = threading.Thread(target=server.run, kwargs={"sockets": [sock]}, daemon=True)
    thread.start()
    base = f"http://127.0.0.1:{port}"
    for _ in range(200):
        if server.started:
            break
        threading.Event().wait(0.05)
    yield base
    server.should_exit = True
    thread.join()
    sock.close()


@pytest.fixture(scope="module")
def browser():
    sync_playwright = playwright_entry()
    with sync_playwright() as p:
        chromium = p.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS)
        yield chromium
        chromium.close()


@pytest.fixture
def page(browser, live_server):
    """A fresh page that records every request it makes and every script error."""
    context = browser.new_context(viewport={"width": 1440, "height": 900})
    tab = context.new_page()
    tab.requests, tab.errors = [], []
    tab.on("request", lambda request: tab.requests.append(request.url))
    tab.on("pageerror", lambda error: tab.errors.append(str(error)))
    yield tab
    context.close()
