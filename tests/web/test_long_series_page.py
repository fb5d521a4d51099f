"""The review page states the long-series rule when it applied (app.core.identify: a long series
is searched on its most recent points and its best candidates refitted on the whole series).
The rule's limits are lowered so that a 400-point series falls under it in a second."""

from __future__ import annotations

import json
import re
from urllib.parse import quote

import numpy as np
import pandas as pd
import pytest
from fastapi.testclient import TestClient
from web_client import TEST_HOSTS, with_csrf
from web_portfolio import build_database

from app.config import Settings
from app.core import identify
from app.web.main import create_app

SERIES = "dock/door-count"


@pytest.fixture(scope="module")
def page(tmp_path_factory):
    folder = tmp_path_factory.mktemp("long")
    rng = np.random.default_rng(7)
    values = 40 + np.convolve(rng.standard_normal(420), [1.0, 0.5], mode="valid")[:400]
    days = pd.date_range("2022-03-01", periods=400, freq="D").strftime("%Y-%m-%d")
    csv = folder / "long.csv"
    pd.DataFrame({"series_id": SERIES, "timestamp": days, "value": values}).to_csv(csv, index=False)
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(identify, "LONG_SERIES", 300)
        patch.setattr(identify, "SEARCH_WINDOW", 200)
        build_database(folder / "long.db", csv)
    settings = Settings(db_path=folder / "long.db", analysis_workers=1, allowed_hosts=TEST_HOSTS)
    with TestClient(create_app(settings)) as client:
        yield with_csrf(client).get(f"/series/{quote(SERIES, safe='/')}").text


def test_the_review_page_says_the_search_used_the_recent_points(page):
    notes = re.search(r"<div[^>]*data-notes>(.*?)</div>", page, re.S)
    assert notes and "Long series (400 points, more than 300)" in notes.group(1)
    assert "most recent 200 points (from 2022-09-17)" in notes.group(1)


def test_the_series_chart_shows_the_whole_series(page):
    figure = json.loads(re.search(r'id="chart-series" data-figure=\'([^\']*)\'', page).group(1).replace("&#39;", "'"))
    assert len(figure["data"][0]["x"]) == 400 and figure["data"][0]["x"][0].startswith("2022-03-01")
