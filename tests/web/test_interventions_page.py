"""The review page and the API show the outliers and level shifts the engine estimated, on the
demo's spiked and shifted sensor channels (their defects are written in demo_data/truth.csv)."""

from __future__ import annotations

import csv
import json
import re
from pathlib import Path
from urllib.parse import quote

import pytest
from fastapi.testclient import TestClient
from web_client import TEST_HOSTS, with_csrf
from web_portfolio import build_database, demo_subset_csv

from app.config import Settings
from app.web.main import create_app

SPIKED = "polarquay/anteroom/temp-c"
SHIFTED = "polarquay/chiller-4/humidity-pct"
TRUTH = Path(__file__).resolve().parents[2] / "demo_data" / "truth.csv"


def _defect_date(series_id: str) -> str:
    """The date the generator wrote into the series' defect note (``... on 2025-03-04.``)."""
    with TRUTH.open(newline="") as handle:
        row = next(r for r in csv.DictReader(handle) if r["series_id"] == series_id)
    return re.search(r"\d{4}-\d{2}-\d{2}", json.dumps(row)).group(0)


@pytest.fixture(scope="module")
def client(tmp_path_factory):
    folder = tmp_path_factory.mktemp("interventions")
    build_database(folder / "demo.db", demo_subset_csv(folder / "demo.csv", [SPIKED, SHIFTED]))
    settings = Settings(db_path=folder / "demo.db", analysis_workers=1, allowed_hosts=TEST_HOSTS)
    with TestClient(create_app(settings)) as test_client:
        yield with_csrf(test_client)


@pytest.mark.parametrize(("series_id", "kind"), [(SPIKED, "additive"), (SHIFTED, "level_shift")])
def test_the_api_carries_the_intervention_at_the_defect(client, series_id, kind):
    body = client.get(f"/api/series/{quote(series_id, safe='/')}").json()
    found = body["analysis"]["interventions"] if "analysis" in body else body["interventions"]
    assert (kind, _defect_date(series_id)) in [(i["kind"], i["timestamp"]) for i in found]
    assert all(set(i) == {"position", "timestamp", "kind", "size", "t_stat"} for i in found)


def test_the_series_chart_marks_each_intervention_and_lists_it_in_its_numbers(client):
    html = client.get(f"/series/{quote(SHIFTED, safe='/')}").text
    figure = json.loads(re.search(r'id="chart-series" data-figure=\'([^\']*)\'', html).group(1).replace("&#39;", "'"))
    marks = next(trace for trace in figure["data"] if trace.get("name") == "interventions")
    when = _defect_date(SHIFTED)
    assert marks["x"] == [when] and marks["marker"]["symbol"] == ["diamond"]
    assert "level shift" in marks["text"][0]
    assert [shape["x0"] for shape in figure["layout"]["shapes"]] == [when]  # where the shift starts
    assert re.search(rf"<td>{when}</td><td>[^<]+</td><td>level shift</td>", html)
