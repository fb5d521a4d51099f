"""The JSON API against a real database built by the real store and engine."""

from __future__ import annotations

import subprocess
import sys
import time
from contextlib import contextmanager
from urllib.parse import quote

import numpy as np
import pandas as pd
import pytest
from fastapi.testclient import TestClient
from statsmodels.tsa.arima.model import ARIMA
from threadpoolctl import threadpool_limits
from web_client import TEST_HOSTS, with_csrf
from web_portfolio import (
    AWKWARD_ID,
    CONSTANT_ID,
    ODD_ID,
    deltas_by_hand,
    q_only_pairs,
    store_log_drift_suggestion,
    synthetic_series,
    write_long_csv,
)

from app.config import Settings
from app.core.analysis import Analysis
from app.core.vocabulary import Confidence, Flag
from app.jobs.analyze import LOCK_SUFFIX
from app.store.runs import finish_run, record_progress, start_run
from app.store.series import load_series
from app.store.verdicts import get_verdict, verdict_history
from app.web.main import create_app

SERIES = "plant-a/line-1/ar1"


def url(series_id: str, suffix: str = "") -> str:
    return f"/api/series/{quote(series_id, safe='/')}{suffix}"


def all_ids(client, **params) -> list[str]:
    body = client.get("/api/series", params={**params, "limit": 500}).json()
    return [item["series_id"] for item in body["items"]]


# --- listing -----------------------------------------------------------------------------------

def test_series_list_total_counts_whole_filter(client, results):
    body = client.get("/api/series", params={"limit": 2}).json()
    assert body["total"] == len(results)
    assert len(body["items"]) == 2
    item = body["items"][0]
    assert {"series_id", "status", "confidence", "suggested", "flags"} <= set(item)
    assert set(item["suggested"]) == {"order", "seasonal_order", "transform", "trend", "interventions"}
    assert set(item["chosen"]) == {"order", "seasonal_order"}


def test_series_list_pages_cover_every_series_once(client, results):
    seen = []
    for offset in range(0, len(results), 2):
        seen += [i["series_id"] for i in client.get("/api/series", params={"limit": 2, "offset": offset}).json()["items"]]
    assert sorted(seen) == sorted(results)
    assert CONSTANT_ID not in seen  # rejected by the import: nothing to model


def test_series_list_filters_by_confidence_as_the_engine_scored(client, results):
    for level in ("firm", "tentative", "weak"):
        expected = sorted(sid for sid, r in results.items() if r.confidence == level)
        body = client.get("/api/series", params={"confidence": level, "limit": 500}).json()
        assert body["total"] == len(expected)
        assert sorted(i["series_id"] for i in body["items"]) == expected


def test_series_list_filters_by_flag_and_search(client, results):
    flagged = {sid for sid, r in results.items() if Flag.TOO_SHORT in r.flags}
    assert flagged == {AWKWARD_ID}  # 25 points: below the recommended 30
    assert set(all_ids(client, flag="too_short")) == flagged
    assert set(all_ids(client, q="PLANT-B")) == {"plant-b/walk", "plant-b/ar2", "plant-b/ma1-long"}


def test_series_list_filters_by_id_prefix(client, results):
    assert set(all_ids(client, prefix="plant-a/")) == {"plant-a/line-1/ar1", "plant-a/line-2/ma1"}
    assert set(all_ids(client, prefix="plant-")) == {sid for sid in results if sid.startswith("plant-")}
    assert all_ids(client, prefix="shop 7/") == [AWKWARD_ID]
    # the start of the id only, letter case and all, and no wildcards
    assert all_ids(client, prefix="line") == [] and set(all_ids(client, q="line")) == {"plant-a/line-1/ar1", "plant-a/line-2/ma1"}
    assert all_ids(client, prefix="PLANT-A/") == []
    assert all_ids(client, prefix="plant_") == [] and all_ids(client, prefix="%") == []
    # combined with the other filters, and counted over every page
    client.post(url("plant-b/ar2", "/verdict"), json={"status": "parked", "reviewer": "Ada", "version": 0})
    body = client.get("/api/series", params={"prefix": "plant-", "status": "pending", "limit": 1}).json()
    pending = [sid for sid in results if sid.startswith("plant-") and sid != "plant-b/ar2"]
    assert body["total"] == len(pending) == 5 and len(body["items"]) == 1
    assert all_ids(client, prefix="plant-", status="parked") == ["plant-b/ar2"]


def test_series_list_suggestions_match_the_engine(client, results):
    for item in client.get("/api/series", params={"limit": 500}).json()["items"]:
        result = results[item["series_id"]]
        suggested = result.suggested.order
        assert item["suggested"] == {"order": list(suggested.order), "seasonal_order": list(suggested.seasonal_order),
                                     "transform": result.transform.to_json(), "trend": suggested.trend,
                                     "interventions": [i.to_dict() for i in result.interventions]}
        assert item["status"] == "pending"
        assert item["main_reason"] == results[item["series_id"]].confidence_reasons[0]


def test_series_list_items_carry_the_transform_term_and_interventions_of_the_suggestion(client, db, results):
    stored = store_log_drift_suggestion(db, results[SERIES])
    [item] = client.get("/api/series", params={"q": SERIES}).json()["items"]
    assert item["suggested"] == {"order": [0, 1, 1], "seasonal_order": [0, 0, 0, 0], "transform": "log", "trend": "t",
                                 "interventions": [i.to_dict() for i in stored.interventions]}
    assert item["suggested"]["interventions"][0]["kind"] == "level_shift"
    described = client.get("/openapi.json").json()["components"]["schemas"]["SuggestedModel"]["properties"]
    assert {"order", "seasonal_order", "transform", "trend", "interventions"} <= set(described)


def test_series_list_bad_filter_is_422(client):
    response = client.get("/api/series", params={"status": "maybe"})
    assert response.status_code == 422
    assert "maybe" in response.json()["detail"]


def test_series_list_limit_is_capped(db_path):
    settings = Settings(db_path=db_path, page_size=2, max_page_size=3, allowed_hosts=TEST_HOSTS)
    with TestClient(create_app(settings)) as client:
        assert client.get("/api/series").json()["limit"] == 2
        assert client.get("/api/series", params={"limit": 100}).json()["limit"] == 3


# --- one series --------------------------------------------------------------------------------

def test_series_detail_has_analysis_verdict_and_history(client, results):
    body = client.get(url(SERIES)).json()
    stored = results[SERIES]
    as_json = stored.to_dict()
    for key in ("suggested", "candidates", "acf", "pacf", "differencing", "flags", "confidence"):
        assert body[key] == as_json[key]
    assert Analysis.from_dict(body) == stored  # the JSON reads back as the engine's analysis
    assert body["analysis_state"] == "current"
    assert body["verdict"]["status"] == "pending" and body["verdict"]["version"] == 0
    assert body["history"] == []


def test_series_detail_unknown_is_404(client):
    response = client.get(url("no/such/series"))
    assert response.status_code == 404
    assert "no/such/series" in response.json()["detail"]


def test_series_detail_delta_aicc_is_against_the_best_of_the_same_differencing(client, results):
    """Each candidate's ``delta_aicc`` is its AICc less the smallest AICc among the candidates
    with the same d, D and s: criteria of differently differenced data are not comparable."""
    for sid in results:
        candidates = client.get(url(sid)).json()["candidates"]
        expected = deltas_by_hand([(c["aicc"], c["order"], c["seasonal_order"]) for c in candidates])
        for c, delta in zip(candidates, expected):
            assert c["delta_aicc"] == (pytest.approx(delta, abs=1e-9) if delta is not None else None), (sid, c["label"])
        # each group's best is at zero, every other candidate above it
        assert min(d for d in expected if d is not None) == 0.0
    # Seasonal candidates that differ only in Q are compared with every candidate of the same
    # d, D and s (s counting only when D = 1), not among themselves: the stored seasonal series
    # has such pairs with D = 1.
    seasonal = {sid: pairs for sid, r in results.items() if (pairs := q_only_pairs(r))}
    assert any(high.order.D == 1 for pairs in seasonal.values() for _, high in pairs)
    above_best = []
    for sid, pairs in seasonal.items():
        by_label = {c["label"]: c for c in client.get(url(sid)).json()["candidates"]}
        for low, high in pairs:
            shown_low, shown_high = by_label[low.label], by_label[high.label]
            assert shown_high["delta_aicc"] - shown_low["delta_aicc"] == pytest.approx(shown_high["aicc"] - shown_low["aicc"])
            same = [c["aicc"] for c in by_label.values()
                    if (c["order"][1], c["seasonal_order"][1], c["seasonal_order"][3] * c["seasonal_order"][1])
                    == (high.order.d, high.order.D, high.order.s * high.order.D)]
            assert shown_high["delta_aicc"] == pytest.approx(shown_high["aicc"] - min(same))
            above_best.append(shown_high["delta_aicc"] > 0)
    assert any(above_best), "some pair's larger order is not the best of its group, so its delta is not trivially 0"


def test_series_ids_with_slashes_and_route_words_resolve(client, db):
    assert client.get(url(ODD_ID)).json()["series_id"] == ODD_ID
    assert client.get(url(AWKWARD_ID)).json()["series_id"] == AWKWARD_ID
    response = client.post(url(ODD_ID, "/verdict"), json={"status": "parked", "version": 0, "reviewer": "Ada"})
    assert response.status_code == 200
    assert get_verdict(db, ODD_ID)["status"] == "parked"


# --- verdicts ----------------------------------------------------------------------------------

def test_verdict_approve_takes_the_suggestion_and_records_history(client, db, results):
    response = client.post(url(SERIES, "/verdict"), json={"status": "approved", "note": "clean", "reviewer": "Ada", "version": 0})
    assert response.status_code == 200
    verdict = response.json()
    assert verdict["status"] == "approved" and verdict["version"] == 1
    assert verdict["order"] == list(results[SERIES].suggested.order.order)
    assert get_verdict(db, SERIES) == verdict
    history = verdict_history(db, SERIES)
    assert [(h["status"], h["reviewer"], h["note"]) for h in history] == [("approved", "Ada", "clean")]
    assert client.get(url(SERIES)).json()["history"][0]["status"] == "approved"


def test_verdict_override_with_custom_order(client, db):
    body = {"status": "overridden", "order": [2, 0, 1], "seasonal_order": [0, 0, 0, 0], "reviewer": "Bo", "version": 0}
    response = client.post(url(SERIES, "/verdict"), json=body)
    assert response.status_code == 200
    assert get_verdict(db, SERIES)["order"] == [2, 0, 1]
    assert all_ids(client, status="overridden") == [SERIES]


def test_verdict_stale_version_is_409_with_current_verdict(client, db):
    first = client.post(url(SERIES, "/verdict"), json={"status": "approved", "reviewer": "Ada", "version": 0})
    assert first.status_code == 200
    stale = client.post(url(SERIES, "/verdict"), json={"status": "parked", "reviewer": "Bo", "version": 0})
    assert stale.status_code == 409
    assert stale.json()["verdict"] == first.json()
    assert get_verdict(db, SERIES)["status"] == "approved"
    assert len(verdict_history(db, SERIES)) == 1


def test_verdict_unknown_series_is_404(client):
    response = client.post(url("no/such", "/verdict"), json={"status": "parked", "version": 0, "reviewer": "Ann"})
    assert response.status_code == 404


@pytest.mark.parametrize(
    ("series_id", "order", "seasonal", "words"),
    [
        (SERIES, [-1, 0, 0], [0, 0, 0, 0], "p = -1"),
        (SERIES, [1, 3, 0], [0, 0, 0, 0], "d = 3"),
        (SERIES, [1, 0, 0], [1, 0, 0, 1], "s = 1"),
        (SERIES, [1, 0, 0], [1, 0, 0, 0], "seasonal period"),
        (AWKWARD_ID, [10, 0, 10], [0, 0, 0, 0], "needs at least"),
    ],
)
def test_verdict_impossible_order_is_422_with_message(client, db, series_id, order, seasonal, words):
    body = {"status": "overridden", "order": order, "seasonal_order": seasonal, "reviewer": "Ada", "version": 0}
    response = client.post(url(series_id, "/verdict"), json=body)
    assert response.status_code == 422
    assert words in response.json()["detail"]
    assert get_verdict(db, series_id)["status"] == "pending"


def test_verdict_malformed_body_is_422(client):
    assert client.post(url(SERIES, "/verdict"), json={"status": "overridden", "order": [1, 0], "version": 0}).status_code == 422
    assert client.post(url(SERIES, "/verdict"), json={"status": "maybe", "version": 0}).status_code == 422
    assert client.post(url(SERIES, "/verdict"), json={"status": "parked"}).status_code == 422


@pytest.mark.parametrize("version", ["1e400", "NaN", "Infinity", "-Infinity"])
def test_verdict_with_a_number_json_cannot_hold_is_422_not_500(client, version):
    # Python's JSON reader takes these; the answer echoing them back must still be valid JSON.
    body = f'{{"status": "parked", "version": {version}, "reviewer": "x", "note": "n"}}'
    response = client.post(f"/api/series/{SERIES}/verdict", content=body, headers={"content-type": "application/json"})
    assert response.status_code == 422
    assert response.json()["detail"][0]["loc"] == ["body", "version"]


def test_a_page_with_a_parameter_out_of_range_answers_with_the_error_page(client):
    response = client.get("/", params={"offset": "-1"})
    assert response.status_code == 422 and response.headers["content-type"].startswith("text/html")
    assert "offset: Input should be greater than or equal to 0" in response.text


def test_verdict_approved_must_be_the_suggestion(client, results):
    p, d, q = results[SERIES].suggested.order.order
    other = [p + 1, d, q]
    response = client.post(url(SERIES, "/verdict"), json={"status": "approved", "order": other, "version": 0, "reviewer": "Ada"})
    assert response.status_code == 422
    assert "overridden" in response.json()["detail"]


def test_verdict_override_needs_an_order(client):
    response = client.post(url(SERIES, "/verdict"), json={"status": "overridden", "version": 0, "reviewer": "Ada"})
    assert response.status_code == 422


def test_verdict_pending_reopens_a_decided_series(client, db, results):
    approved = client.post(url(SERIES, "/verdict"), json={"status": "approved", "reviewer": "Ada", "version": 0}).json()
    assert approved["status"] == "approved" and approved["order"] == list(results[SERIES].suggested.order.order)
    assert SERIES not in all_ids(client, status="pending")
    response = client.post(url(SERIES, "/verdict"), json={"status": "pending", "note": "look again", "reviewer": "Bo", "version": 1})
    assert response.status_code == 200
    reopened = response.json()
    assert (reopened["status"], reopened["order"], reopened["seasonal_order"], reopened["version"]) == ("pending", None, None, 2)
    assert get_verdict(db, SERIES) == reopened
    assert SERIES in all_ids(client, status="pending")
    history = client.get(url(SERIES)).json()["history"]
    assert [(h["from_status"], h["status"], h["reviewer"], h["note"]) for h in history] == [
        ("pending", "approved", "Ada", ""), ("approved", "pending", "Bo", "look again")]
    assert history[0]["order"] == approved["order"]
    assert history == verdict_history(db, SERIES)
    # reopening is a decision like any other: a stale version is refused
    stale = client.post(url(SERIES, "/verdict"), json={"status": "pending", "reviewer": "Cy", "version": 1})
    assert stale.status_code == 409 and stale.json()["verdict"] == reopened


# --- fitting a custom order --------------------------------------------------------------------

def test_fit_matches_statsmodels_on_the_same_data(client, db, results):
    """A custom fit is statsmodels' exact-likelihood ARIMA on the stored values (reference library)."""
    stored = results[ODD_ID]
    assert stored.transform.kind == "none"  # white noise around zero: a log or Box-Cox is impossible
    same_d = [c for c in stored.candidates if c.order.differencing_key() == (0, 0, 0)]
    response = client.post(url(ODD_ID, "/fit"), json={"order": [2, 0, 2]})
    assert response.status_code == 200
    fit = response.json()
    values = load_series(db, ODD_ID).to_numpy()
    with threadpool_limits(limits=1):
        # Enough iterations for statsmodels to reach its optimum (its default of 50 can stop short).
        model = ARIMA(values, order=(2, 0, 2), trend=fit["trend"])
        reference = model.fit(method_kwargs={"maxiter": 1000})
        # An ARMA(2,2) of white noise has several optima: statsmodels' likelihood at our
        # estimates must be ours, and no lower than at the optimum it finds itself.
        ours = model.filter(np.array([p["value"] for p in fit["params"]]))
    assert fit["aicc"] == pytest.approx(ours.aicc, rel=1e-6)
    assert fit["bic"] == pytest.approx(ours.bic, rel=1e-6)
    assert fit["aicc"] <= reference.aicc + 1e-6
    assert fit["delta_aicc"] == pytest.approx(fit["aicc"] - min(c.aicc for c in same_d))
    assert len(fit["residual_acf"]["lags"]) == len(fit["residual_acf"]["values"]) > 0
    # statsmodels names the time-trend coefficient x1; Lagdesk calls it drift.
    assert [p["name"] for p in fit["params"]] == [{"x1": "drift"}.get(n, n) for n in reference.param_names]


def test_fit_of_the_suggestion_reproduces_the_stored_statistics(client, results):
    stored = results[SERIES]
    suggested = stored.suggested
    fit = client.post(url(SERIES, "/fit"), json={"order": list(suggested.order.order),
                                                 "seasonal_order": list(suggested.order.seasonal_order)}).json()
    assert fit["aicc"] == pytest.approx(suggested.aicc, rel=1e-6)
    assert fit["delta_aicc"] == pytest.approx(suggested.aicc - min(
        c.aicc for c in stored.candidates if c.order.differencing_key() == suggested.order.differencing_key()), abs=1e-6)
    assert fit["delta_aicc"] == pytest.approx(suggested.delta_aicc, abs=1e-6)


def test_fit_bad_order_is_422_and_unknown_is_404(client):
    response = client.post(url(SERIES, "/fit"), json={"order": [11, 0, 0]})
    assert response.status_code == 422
    assert "p = 11" in response.json()["detail"]
    assert client.post(url("no/such", "/fit"), json={"order": [1, 0, 0]}).status_code == 404


# --- portfolio, bulk approval, imports, runs ---------------------------------------------------

def test_portfolio_counts(client, results):
    body = client.get("/api/portfolio").json()
    assert body["series"] == len(results)
    assert body["counts"]["confidence"] == {
        level: sum(r.confidence == level for r in results.values()) for level in ("weak", "tentative", "firm")
    }
    assert body["verdicts"]["pending"] == len(results)


def test_bulk_approval_approves_pending_firm_series_in_the_filter(client, db, results):
    firm = sorted(sid for sid, r in results.items() if r.confidence == Confidence.FIRM)
    assert firm, "the synthetic portfolio should hold firm series"
    response = client.post("/api/approve-firm", params={"q": "plant-a"}, json={"reviewer": "Ada"})
    in_filter = [sid for sid in firm if "plant-a" in sid]
    assert sorted(response.json()["approved"]) == in_filter
    for sid in in_filter:
        verdict = get_verdict(db, sid)
        assert verdict["status"] == "approved" and verdict["order"] == list(results[sid].suggested.order.order)
    again = client.post("/api/approve-firm", json={"reviewer": "Ada"}).json()
    assert sorted(again["approved"]) == [sid for sid in firm if "plant-a" not in sid]
    assert client.post("/api/approve-firm", json={"reviewer": " "}).status_code == 422


def test_bulk_approval_keeps_to_the_id_prefix(client, db, results):
    firm = sorted(sid for sid, r in results.items() if r.confidence == Confidence.FIRM)
    inside = [sid for sid in firm if sid.startswith("plant-b/")]
    outside = [sid for sid in firm if not sid.startswith("plant-b/")]
    assert inside and outside, "the synthetic portfolio should hold firm series inside and outside plant-b/"
    response = client.post("/api/approve-firm", params={"prefix": "plant-b/"}, json={"reviewer": "Ada"})
    assert response.status_code == 200
    assert sorted(response.json()["approved"]) == inside and response.json()["count"] == len(inside)
    for sid in inside:
        verdict = get_verdict(db, sid)
        assert verdict["status"] == "approved" and verdict["order"] == list(results[sid].suggested.order.order)
    assert all(get_verdict(db, sid)["status"] == "pending" for sid in outside)
    # a prefix the ids only contain, not start with, approves nothing
    assert client.post("/api/approve-firm", params={"prefix": "line"}, json={"reviewer": "Ada"}).json() == {"bulk_id": None, "count": 0, "approved": []}
    assert all(get_verdict(db, sid)["status"] == "pending" for sid in outside)


def test_groups_count_each_id_prefix_at_a_depth(client, results):
    body = client.get("/api/groups", params={"depth": 1}).json()
    tops = {sid.split("/")[0] + "/" for sid in results}
    assert [g["prefix"] for g in body] == sorted(tops)
    for group in body:
        inside = [r for sid, r in results.items() if sid.startswith(group["prefix"])]
        assert group["total"] == group["pending"] == len(inside)
        for level in ("weak", "tentative", "firm"):
            assert group[level] == sum(r.confidence == level for r in inside)
        assert group["decided"] == group["parked"] == group["recheck"] == 0
    client.post(url("plant-a/line-1/ar1", "/verdict"), json={"status": "approved", "reviewer": "Ada", "version": 0})
    plant_a = client.get("/api/groups", params={"depth": 2, "prefix": "plant-a/"}).json()
    assert [(g["prefix"], g["decided"], g["pending"]) for g in plant_a] == [("plant-a/line-1/", 1, 0), ("plant-a/line-2/", 0, 1)]
    deep = client.get("/api/groups", params={"depth": 2, "prefix": "plant-b/"}).json()
    assert [g["prefix"] for g in deep] == ["plant-b/ar2", "plant-b/ma1-long", "plant-b/walk"]  # ids with no more parts are their own group
    assert client.get("/api/groups", params={"depth": 0}).status_code == 422


def test_park_a_selection_or_a_filter_with_one_note(client, db, results):
    client.post(url("plant-a/line-1/ar1", "/verdict"), json={"status": "approved", "reviewer": "Ada", "version": 0})
    body = client.post("/api/park", json={"series_ids": ["plant-a/line-1/ar1", "plant-a/line-2/ma1"],
                                           "reviewer": "Ada", "note": "wait for the new line"}).json()
    assert body == {"count": 1, "parked": ["plant-a/line-2/ma1"]}  # the approved one is left alone
    assert get_verdict(db, "plant-a/line-2/ma1")["note"] == "wait for the new line"
    group = client.post("/api/park", params={"prefix": "plant-b/"}, json={"reviewer": "Ada", "note": "plant closed"}).json()
    assert sorted(group["parked"]) == sorted(sid for sid in results if sid.startswith("plant-b/"))
    assert all(get_verdict(db, sid)["status"] == "pending" for sid in results if not sid.startswith("plant-"))
    assert client.post("/api/park", json={"series_ids": ["x"], "reviewer": "Ada", "note": ""}).status_code == 422
    assert client.post("/api/park", json={"series_ids": ["no/such"], "reviewer": "Ada", "note": "n"}).status_code == 404
    assert client.post("/api/park", json={"series_ids": [], "reviewer": " ", "note": "n"}).status_code == 422


def test_import_upload_reports_added_and_rejected(client, tmp_path):
    rng = np.random.default_rng(5)
    csv_path = write_long_csv(tmp_path / "more.csv", {"new/one": rng.normal(size=40), "new/flat": np.ones(30)})
    with csv_path.open("rb") as handle:
        response = client.post("/api/imports", files={"file": ("more.csv", handle, "text/csv")}, data={"layout": "long"})
    assert response.status_code == 200
    report = response.json()
    assert report["added"] == ["new/one"]
    assert [r["series_id"] for r in report["rejected"]] == ["new/flat"]
    assert "constant" in report["rejected"][0]["message"]
    assert client.get(url("new/one")).json()["analysis_state"] == "missing"


def test_import_wide_layout_with_named_time_column(client, tmp_path):
    rng = np.random.default_rng(6)
    frame = pd.DataFrame({"when": pd.date_range("2024-01-01", periods=40, freq="D").strftime("%Y-%m-%d"),
                          "w/a": rng.normal(size=40), "w/b": rng.normal(size=40)})
    frame.to_csv(tmp_path / "wide.csv", index=False)
    with (tmp_path / "wide.csv").open("rb") as handle:
        response = client.post("/api/imports", files={"file": ("wide.csv", handle)}, data={"layout": "wide", "time_col": "when"})
    assert sorted(response.json()["added"]) == ["w/a", "w/b"]


def test_import_unusable_file_is_400_and_oversize_413(client, db_path, tmp_path):
    bad = tmp_path / "bad.csv"
    bad.write_text("name,value\nx,1\n")
    with bad.open("rb") as handle:
        response = client.post("/api/imports", files={"file": ("bad.csv", handle)}, data={"layout": "long"})
    assert response.status_code == 400
    assert "bad.csv" in response.json()["detail"]
    small = Settings(db_path=db_path, max_upload_bytes=64, allowed_hosts=TEST_HOSTS)
    big = write_long_csv(tmp_path / "big.csv", {"big/one": np.arange(40.0)})
    with TestClient(create_app(small)) as limited, big.open("rb") as handle:
        response = with_csrf(limited).post("/api/imports", files={"file": ("big.csv", handle)}, data={"layout": "long"})
    assert response.status_code == 413
    assert "upload limit" in response.json()["detail"]


@contextmanager
def run_lock_held_elsewhere(db_path):
    """The database's run lock held by another process, as a run going on there holds it."""
    lock_path = f"{db_path.resolve()}{LOCK_SUFFIX}"
    holder = subprocess.Popen(
        [sys.executable, "-c", "import fcntl, os, sys; fd = os.open(sys.argv[1], os.O_RDWR | os.O_CREAT); "
         "fcntl.lockf(fd, fcntl.LOCK_EX); print('locked', flush=True); sys.stdin.read()", lock_path],
        stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True,
    )
    try:
        assert holder.stdout.readline().strip() == "locked"
        yield
    finally:
        holder.stdin.close()
        holder.wait(timeout=30)


def test_runs_list_detail_latest_and_unknown(client, db, db_path):
    assert client.get("/api/runs").json() == []
    assert client.get("/api/runs/latest").json() is None
    with run_lock_held_elsewhere(db_path):
        run_id = start_run(db, {"workers": 1}, total=6, engine_version="test")
        record_progress(db, run_id, done=4, failed=1)
        running = client.get(f"/api/runs/{run_id}").json()
        assert (running["state"], running["done"], running["failed"], running["total"]) == ("running", 4, 1, 6)
        finish_run(db, run_id, "finished")
    assert client.get("/api/runs/latest").json()["state"] == "finished"
    assert [r["run_id"] for r in client.get("/api/runs").json()] == [run_id]
    assert client.get("/api/runs/999").status_code == 404


def wait_for_run(client, run_id: int) -> dict:
    """Poll the run until it is no longer running (bounded; asserts nothing about time)."""
    for _ in range(600):
        run = client.get(f"/api/runs/{run_id}").json()
        if run["state"] != "running":
            return run
        time.sleep(0.1)
    raise AssertionError(f"run {run_id} still running: {run}")


def test_run_started_from_the_api_analyses_new_series(client, tmp_path):
    rng = np.random.default_rng(8)
    csv_path = write_long_csv(tmp_path / "late.csv", {"late/arrival": rng.normal(size=60)})
    with csv_path.open("rb") as handle:
        client.post("/api/imports", files={"file": ("late.csv", handle)}, data={"layout": "long"})
    response = client.post("/api/runs")
    assert response.status_code == 202
    run = wait_for_run(client, response.json()["run_id"])
    # The new series, and the one whose stored analysis an earlier engine made (the fixture's
    # add_stored_seasonal_analysis): a run brings it up to date as well.
    assert (run["state"], run["total"], run["done"], run["failed"]) == ("finished", 2, 2, 0)
    assert client.get("/api/portfolio").json()["earlier_engine"] == 0
    detail = client.get(url("late/arrival")).json()
    assert detail["analysis_state"] == "current" and detail["confidence"] in ("firm", "tentative", "weak")


def test_openapi_schema_lists_the_routes(client):
    paths = client.get("/openapi.json").json()["paths"]
    for path in ("/api/series", "/api/series/{series_id}", "/api/series/{series_id}/verdict", "/api/series/{series_id}/fit",
                 "/api/portfolio", "/api/imports", "/api/runs", "/api/runs/{run_id}"):
        assert path in paths, path


def test_synthetic_portfolio_is_what_the_fixture_wrote(results):
    # Guards the other tests' premises: every good series analysed, the constant one rejected,
    # and the one series stored with an earlier engine's analysis.
    assert set(results) == set(synthetic_series()) - {CONSTANT_ID} | {"shop-1/flour"}


def test_a_verdict_without_a_reviewer_or_with_a_boolean_version_is_refused_and_nothing_saved(client, db):
    before = get_verdict(db, SERIES)
    for body in ({"status": "approved", "version": 0}, {"status": "approved", "version": 0, "reviewer": "\u202e\x00\x1b "},
                 {"status": "approved", "version": True, "reviewer": "Ada"}):
        assert client.post(url(SERIES, "/verdict"), json=body).status_code == 422, body
    assert get_verdict(db, SERIES) == before


def test_concurrent_overrides_of_one_series_fit_once_and_the_rest_are_stale(client, db, monkeypatch):
    # A save that fits an order takes the series' computation slot and checks its version again
    # inside it: 42 concurrent overrides at one version had each fitted before being refused
    # (a server attack froze the pages for 73 s). Now one fits; the others wait and get 409.
    import threading

    import app.review.decisions as decisions

    fits, real = [], decisions.fit_and_keep

    def counted(*args, **kwargs):
        fits.append(1)
        time.sleep(0.3)  # long enough for the other saves to queue for the slot
        return real(*args, **kwargs)

    monkeypatch.setattr(decisions, "fit_and_keep", counted)
    body = {"status": "overridden", "order": [3, 0, 2], "version": 0, "reviewer": "Ada", "note": "n", "confirm": True}
    codes: list[int] = []
    threads = [threading.Thread(target=lambda: codes.append(client.post(url(SERIES, "/verdict"), json=body).status_code))
               for _ in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert sorted(codes) == [200, 409, 409, 409] and len(fits) == 1
    assert get_verdict(db, SERIES)["version"] == 1


def test_exports_are_built_one_at_a_time(client, monkeypatch):
    # An export refits each decided order whose data changed and keeps the refit; four built
    # side by side each refitted them all (about 22 s each, a server attack). One at a time, an
    # export that waits finds the refits kept. Counted here: how many builds overlap.
    import threading

    import app.web.deps as deps

    running, most, guard = [0], [0], threading.Lock()
    real = deps.build_orders_document

    def counted(*args, **kwargs):
        with guard:
            running[0] += 1
            most[0] = max(most[0], running[0])
        time.sleep(0.2)
        try:
            return real(*args, **kwargs)
        finally:
            with guard:
                running[0] -= 1

    monkeypatch.setattr(deps, "build_orders_document", counted)
    paths = ["/api/orders", "/export/lagdesk-orders.json", "/api/orders", "/export/lagdesk-orders.csv"]
    codes: list[int] = []
    threads = [threading.Thread(target=lambda p=p: codes.append(client.get(p).status_code)) for p in paths]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert codes == [200] * 4 and most[0] == 1
