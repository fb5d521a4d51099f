"""The hand-off on the web: the orders document at /api/orders and as a download from the queue,
and the forecast check (JSON at /api/series/{id}/backtest, in place on the review page).

The document is checked against the JSON Schema shipped in schemas/ and against what
``lagdesk export`` builds from the same database (app.review.export, itself checked against the
store and statsmodels in tests/jobs/test_export.py); the forecast check against
app.review.forecast_check.backtest_series, whose MASE and coverage are checked against Hyndman &
Koehler (2006) in tests/core/test_backtest.py.
"""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path
from urllib.parse import quote

import jsonschema
import pytest

import app
from app.review.export import build_orders_document
from app.review.forecast_check import backtest_series
from app.store.orders import ORDER_FIELDS

SCHEMA = json.loads((Path(app.__file__).resolve().parent.parent / "schemas" / "lagdesk-orders.schema.json").read_text())
SERIES = "plant-a/line-1/ar1"


def approve(client, series_id: str) -> dict:
    response = client.post(f"/api/series/{quote(series_id, safe='/')}/verdict",
                           json={"status": "approved", "note": "ok", "reviewer": "Ada", "version": 0})
    assert response.status_code == 200
    return response.json()


def without_time(document: dict) -> dict:
    return {k: v for k, v in document.items() if k != "generated_at"}


def test_orders_document_is_the_export_and_validates(client, db, results):
    verdict = approve(client, SERIES)
    document = client.get("/api/orders").json()
    jsonschema.validate(document, SCHEMA)
    assert without_time(document) == without_time(build_orders_document(db))
    [order] = document["orders"]
    assert (order["series_id"], order["decision"], [order["p"], order["d"], order["q"]]) == (SERIES, "approved", verdict["order"])
    assert document["left_out"]["pending"] == len(results) - 1


def test_orders_status_filter_and_bad_status(client):
    approve(client, SERIES)
    assert client.get("/api/orders", params={"status": "overridden"}).json()["orders"] == []
    response = client.get("/api/orders", params={"status": "pending"})
    assert response.status_code == 422 and "pending" in response.json()["detail"]


@pytest.mark.parametrize("fmt", ["json", "csv"])
def test_queue_offers_the_download_once_something_is_decided(client, fmt):
    assert "Download orders" not in client.get("/").text
    approve(client, SERIES)
    page = client.get("/").text
    assert f'href="/export/lagdesk-orders.{fmt}"' in page
    response = client.get(f"/export/lagdesk-orders.{fmt}")
    assert response.status_code == 200
    assert response.headers["content-disposition"] == f'attachment; filename="lagdesk-orders.{fmt}"'
    if fmt == "json":
        jsonschema.validate(response.json(), SCHEMA)
    else:
        rows = list(csv.reader(io.StringIO(response.text)))
        assert rows[0] == list(ORDER_FIELDS) and [r[0] for r in rows[1:]] == [SERIES]


def test_backtest_defaults_to_the_suggested_order(client, db, results):
    body = client.get(f"/api/series/{SERIES}/backtest").json()
    suggested = results[SERIES].suggested.order
    assert (body["order"], body["seasonal_order"]) == (list(suggested.order), list(suggested.seasonal_order))
    direct = backtest_series(db, SERIES, list(suggested.order), list(suggested.seasonal_order))
    assert (body["mase"], body["naive_mase"], body["coverage"]) == (direct["mase"], direct["naive_mase"], direct["coverage"])
    assert set(body["plot"]) == {"history", "holdout", "ahead"}


def test_backtest_of_a_chosen_order_and_its_errors(client):
    body = client.get(f"/api/series/{SERIES}/backtest", params={"order": "0,1,1", "horizon": 4, "origins": 3}).json()
    assert (body["order"], body["horizon"], body["origins"]) == ([0, 1, 1], 4, 3)
    assert len(body["by_horizon"]) == 4
    bad = client.get(f"/api/series/{SERIES}/backtest", params={"order": "1,x,0"})
    assert bad.status_code == 422 and "order must be 3 comma-separated whole numbers" in bad.json()["detail"]
    assert client.get("/api/series/no/such/backtest").status_code == 404


def test_review_page_links_each_candidate_to_its_forecast_check(client, results):
    page = client.get(f"/series/{SERIES}").text
    suggested = results[SERIES].suggested.order
    query = f"order={','.join(map(str, suggested.order))}&amp;seasonal={','.join(map(str, suggested.seasonal_order))}"
    assert f'href="/series/{SERIES}/forecast-check?{query}" data-forecast-check' in page


def test_forecast_check_fragment_and_page_show_the_figures(client, db):
    direct = backtest_series(db, SERIES, [1, 0, 0], [0, 0, 0, 0])
    fragment = client.get(f"/series/{SERIES}/forecast-check", params={"order": "1,0,0", "fragment": "true"})
    assert fragment.status_code == 200 and "<html" not in fragment.text
    assert f"{direct['mase']:.3f}" in fragment.text and f"{direct['naive_mase']:.3f}" in fragment.text
    assert 'id="chart-forecast-check"' in fragment.text
    page = client.get(f"/series/{SERIES}/forecast-check", params={"order": "1,0,0"})
    assert page.status_code == 200 and "<html" in page.text and "Forecast check of" in page.text
    error = client.get(f"/series/{SERIES}/forecast-check", params={"order": "1,0,0", "seasonal": "1,0,0,1", "fragment": "true"})
    assert error.status_code == 422 and "data-fit-error" in error.text
