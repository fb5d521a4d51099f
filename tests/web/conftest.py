"""Fixtures for the web tests: one analysed portfolio database, copied fresh for each test."""

from __future__ import annotations

import shutil

import pytest
from fastapi.testclient import TestClient
from web_client import TEST_HOSTS, with_csrf
from web_portfolio import add_stored_seasonal_analysis, build_database, synthetic_series, write_long_csv

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
