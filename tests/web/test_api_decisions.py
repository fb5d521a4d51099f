"""The JSON API of deciding: reopening, the reviewer's transform and constant, the gated approval,
the confirmation of an order failing Ljung-Box, "not an ARIMA series", and the undo of a bulk
approval. Against the synthetic web portfolio (tests/web/web_portfolio.py), analysed by the real
engine; fits are checked against statsmodels' ``ARIMA`` and ``acorr_ljungbox`` on the same data.
"""

from __future__ import annotations

from dataclasses import replace
from urllib.parse import quote

import numpy as np
import pytest
from fastapi.testclient import TestClient
from scipy.special import boxcox
from statsmodels.stats.diagnostic import acorr_ljungbox
from statsmodels.tsa.arima.model import ARIMA
from web_portfolio import ODD_ID

from app.core.vocabulary import Confidence
from app.review.export import SCHEMA_VERSION
from app.store.analyses import load_analysis, save_analysis
from app.store.series import load_series, series_fingerprint
from app.store.verdicts import get_verdict, verdict_history
from app.web.main import create_app

WALK = "plant-b/walk"  # 50 + a random walk: positive, and far from white noise around a mean
AR1 = "plant-a/line-1/ar1"


def url(series_id: str, suffix: str = "") -> str:
    return f"/api/series/{quote(series_id, safe='/')}{suffix}"


def values(db, series_id: str) -> np.ndarray:
    return load_series(db, series_id).to_numpy(dtype=float)


def verdict(client, series_id: str, **body):
    return client.post(url(series_id, "/verdict"), json={"reviewer": "Ada", "version": 0, **body})


def test_a_stale_version_is_refused_before_anything_is_fitted(client, monkeypatch):
    # Four overrides sent at once all fitted their order (30 s each on a long series) before
    # three were refused for their version: the version is checked first now.
    def no_fit(*args, **kwargs):
        raise AssertionError("fitted for a stale version")

    monkeypatch.setattr("app.review.decisions.load_prepared", no_fit)
    stale = verdict(client, WALK, status="overridden", order=[2, 1, 0], version=7)
    assert stale.status_code == 409 and stale.json()["verdict"]["version"] == 0


def test_pending_reopens_a_decided_series_and_the_history_keeps_both(client):
    approved = verdict(client, AR1, status="approved", note="clean AR(1)")
    assert approved.status_code == 200
    reopened = verdict(client, AR1, status="pending", version=approved.json()["version"])
    assert reopened.status_code == 200
    assert (reopened.json()["status"], reopened.json()["order"]) == ("pending", None)
    history = client.get(url(AR1)).json()["history"]
    assert [(h["from_status"], h["status"]) for h in history] == [("pending", "approved"), ("approved", "pending")]


def test_an_override_carries_the_reviewers_transform_and_constant_to_the_export(client, db):
    saved = verdict(client, WALK, status="overridden", order=[1, 1, 0], transform={"box_cox": 0.5}, include_constant=True,
                    note="drift on the square-root scale")
    assert saved.status_code == 200, saved.text
    body = saved.json()
    assert (body["transform"], body["trend"], body["include_constant"]) == ({"box_cox": 0.5}, "t", True)
    record = next(o for o in client.get("/api/orders").json()["orders"] if o["series_id"] == WALK)
    assert (record["transform"], record["include_constant"], record["p"], record["d"]) == ({"box_cox": 0.5}, True, 1, 1)
    # The same model fitted by statsmodels on the same scale: ARIMA with a time trend in levels
    # (statsmodels calls the drift x1).
    reference = ARIMA(boxcox(values(db, WALK), 0.5), order=(1, 1, 0), trend="t").fit()
    assert record["parameters"]["ar.L1"] == pytest.approx(reference.params[reference.param_names.index("ar.L1")], abs=2e-3)
    assert record["parameters"]["drift"] == pytest.approx(reference.params[reference.param_names.index("x1")], abs=2e-3)


def test_the_fit_on_the_spot_uses_the_transform_and_constant(client, db):
    response = client.post(url(WALK, "/fit"), json={"order": [0, 1, 1], "transform": "log", "include_constant": False})
    assert response.status_code == 200, response.text
    fit = response.json()
    assert fit["trend"] == "n" and [p["name"] for p in fit["params"]] == ["ma.L1", "sigma2"]
    reference = ARIMA(np.log(values(db, WALK)), order=(0, 1, 1)).fit()
    assert fit["loglik"] == pytest.approx(reference.llf, rel=1e-5)


def test_a_log_transform_of_a_series_with_values_below_zero_is_422_naming_it(client):
    for path, body in ((url(ODD_ID, "/verdict"), {"status": "overridden", "order": [1, 0, 0], "transform": "log",
                                                   "reviewer": "Ada", "version": 0}),
                       (url(ODD_ID, "/fit"), {"order": [1, 0, 0], "transform": {"box_cox": 0.5}})):
        response = client.post(path, json=body)
        assert response.status_code == 422
        assert ODD_ID in response.json()["detail"] and "strictly positive" in response.json()["detail"]
    assert verdict(client, ODD_ID, status="overridden", order=[1, 0, 0], transform="sqrt").status_code == 422


def test_approving_a_suggestion_that_did_not_converge_needs_a_note(client, db):
    analysis = load_analysis(db, AR1)
    risky = replace(analysis, candidates=(replace(analysis.suggested, converged=False), *analysis.candidates[1:]))
    save_analysis(db, AR1, series_fingerprint(db, AR1), risky, None)
    refused = verdict(client, AR1, status="approved")
    assert refused.status_code == 422
    assert "needs a note" in refused.json()["detail"] and "did not converge" in refused.json()["detail"]
    assert get_verdict(db, AR1)["status"] == "pending"
    assert verdict(client, AR1, status="approved", note="the optimum is flat; AR(1) is plain").status_code == 200


def test_an_override_failing_ljung_box_at_1_percent_needs_confirm(client, db):
    # White noise around a mean for a random walk: statsmodels' Ljung-Box on that model's residuals.
    reference = ARIMA(values(db, WALK), order=(0, 0, 0), trend="c").fit()
    assert acorr_ljungbox(reference.resid, lags=[10], return_df=True)["lb_pvalue"].iloc[0] < 0.01
    refused = verdict(client, WALK, status="overridden", order=[0, 0, 0])
    assert refused.status_code == 422 and "confirm" in refused.json()["detail"]
    assert get_verdict(db, WALK)["version"] == 0
    saved = verdict(client, WALK, status="overridden", order=[0, 0, 0], confirm=True, note="a baseline")
    assert saved.status_code == 200 and saved.json()["order"] == [0, 0, 0]


def test_not_an_arima_series_is_decided_and_listed_apart_in_the_export(client, results):
    saved = verdict(client, ODD_ID, status="not_arima", note="mostly zeros in real life")
    assert saved.status_code == 200
    assert (saved.json()["status"], saved.json()["order"]) == ("not_arima", None)
    pending = [i["series_id"] for i in client.get("/api/series", params={"status": "pending", "limit": 500}).json()["items"]]
    assert ODD_ID not in pending and len(pending) == len(results) - 1
    assert [i["series_id"] for i in client.get("/api/series", params={"status": "not_arima"}).json()["items"]] == [ODD_ID]
    odd_group = next(g for g in client.get("/api/groups").json() if g["prefix"] == "odd/")
    assert (odd_group["decided"], odd_group["pending"]) == (1, 0)
    document = client.get("/api/orders").json()
    assert document["version"] == SCHEMA_VERSION
    assert document["not_arima"] == [{"series_id": ODD_ID, "reviewer": "Ada", "decided_at": saved.json()["decided_at"],
                                      "note": "mostly zeros in real life"}]
    assert ODD_ID not in [o["series_id"] for o in document["orders"]] and "not_arima" not in document["left_out"]


def firm_ids(results) -> list[str]:
    return sorted(sid for sid, r in results.items() if r.confidence == Confidence.FIRM)


def test_a_bulk_approval_is_undone_in_one_step_and_the_history_keeps_both(client, db, results):
    verdict(client, AR1, status="parked", note="later")  # not firm-pending: outside the batch
    done = client.post("/api/approve-firm", json={"reviewer": "Ada", "note": "firm ones"}).json()
    assert done["approved"] == [sid for sid in firm_ids(results) if sid != AR1] and done["bulk_id"] >= 1
    record = client.get(f"/api/bulk/{done['bulk_id']}").json()
    assert record["undoable"] and record["changed"] == [] and sorted(record["approved"]) == sorted(done["approved"])
    undone = client.post(f"/api/bulk/{done['bulk_id']}/undo", json={"reviewer": "Bo"})
    assert undone.status_code == 200
    assert sorted(undone.json()["reopened"]) == sorted(done["approved"])
    for sid in done["approved"]:
        assert get_verdict(db, sid)["status"] == "pending"
        assert [(h["status"], h["reviewer"]) for h in verdict_history(db, sid)] == [("approved", "Ada"), ("pending", "Bo")]
    assert get_verdict(db, AR1)["status"] == "parked"
    again = client.post(f"/api/bulk/{done['bulk_id']}/undo", json={"reviewer": "Bo"})
    assert again.status_code == 409 and "undone already" in again.json()["detail"]


def test_undo_is_refused_with_409_naming_a_series_changed_since(client, db, results):
    done = client.post("/api/approve-firm", json={"reviewer": "Ada"}).json()
    assert done["count"] >= 1, "the synthetic portfolio should hold a firm series"
    moved = done["approved"][0]
    current = get_verdict(db, moved)["version"]
    assert verdict(client, moved, status="pending", version=current).status_code == 200
    refused = client.post(f"/api/bulk/{done['bulk_id']}/undo", json={"reviewer": "Bo"})
    assert refused.status_code == 409 and repr(moved) in refused.json()["detail"]
    assert all(get_verdict(db, sid)["status"] == "approved" for sid in done["approved"] if sid != moved)
    assert client.get(f"/api/bulk/{done['bulk_id']}").json()["changed"] == [moved]
    assert client.post(f"/api/bulk/{done['bulk_id']}/undo", json={"reviewer": " "}).status_code == 422
    assert client.post("/api/bulk/999/undo", json={"reviewer": "Bo"}).status_code == 404
    assert client.get("/api/bulk/999").status_code == 404


def test_the_undo_needs_the_csrf_header_like_every_post(settings):
    with TestClient(create_app(settings)) as bare:
        refused = bare.post("/api/bulk/1/undo", json={"reviewer": "Bo"})
    assert refused.status_code == 403 and "x-csrf-token" in refused.json()["detail"].lower()
