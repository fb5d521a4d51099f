"""The decision form and the bulk-approval pages without a browser: reopen, "not an ARIMA series",
the gated approve, the confirmation of an order failing Ljung-Box, the custom model's transform and
constant, and the undo of a bulk approval from its page and from the queue."""

from __future__ import annotations

import re
from dataclasses import replace
from urllib.parse import quote

from app.core.vocabulary import Confidence
from app.store.analyses import load_analysis, save_analysis
from app.store.series import series_fingerprint
from app.store.verdicts import get_verdict, verdict_history

SERIES = "plant-a/line-1/ar1"
WALK = "plant-b/walk"


def page(series_id: str, suffix: str = "") -> str:
    return f"/series/{quote(series_id, safe='/')}{suffix}"


def decision(version: int = 0, **fields) -> dict:
    return {"version": str(version), "reviewer": "Ada", "note": "", **fields}


def test_a_decided_series_offers_reopen_and_it_goes_back_to_pending(client, db):
    assert 'value="reopen"' not in client.get(page(SERIES)).text  # pending: nothing to reopen
    client.post(page(SERIES, "/verdict"), data=decision(action="approve"), follow_redirects=False)
    assert 'value="reopen"' in client.get(page(SERIES)).text
    done = client.post(page(SERIES, "/verdict"), data=decision(version=1, action="reopen", note="look again"),
                       follow_redirects=False)
    assert done.status_code == 303
    assert get_verdict(db, SERIES)["status"] == "pending"
    assert [h["status"] for h in verdict_history(db, SERIES)] == ["approved", "pending"]


def test_not_an_arima_series_is_recorded_from_the_page(client, db):
    done = client.post(page(WALK, "/verdict"), data=decision(action="not_arima", note="route to Croston"),
                       follow_redirects=False)
    assert done.status_code == 303
    verdict = get_verdict(db, WALK)
    assert (verdict["status"], verdict["note"]) == ("not_arima", "route to Croston")
    shown = client.get(page(WALK)).text
    assert "status-not_arima" in shown and "Recorded as not an ARIMA series" in shown


def test_approving_after_the_data_changed_asks_for_confirmation_on_the_page(client, db):
    save_analysis(db, SERIES, "an earlier fingerprint", load_analysis(db, SERIES), None)  # the data changed since
    refused = client.post(page(SERIES, "/verdict"), data=decision(action="approve"))
    assert refused.status_code == 422 and "the data changed after the analysis" in refused.text and "data-confirm" in refused.text
    assert get_verdict(db, SERIES)["status"] == "pending"
    done = client.post(page(SERIES, "/verdict"), data=decision(action="approve", confirm="true"), follow_redirects=False)
    assert done.status_code == 303 and get_verdict(db, SERIES)["status"] == "approved"


def test_a_risky_suggestion_says_why_and_needs_a_note(client, db):
    analysis = load_analysis(db, SERIES)
    risky = replace(analysis, candidates=(replace(analysis.suggested, ljung_box_p=0.002), *analysis.candidates[1:]))
    save_analysis(db, SERIES, series_fingerprint(db, SERIES), risky, None)
    shown = client.get(page(SERIES)).text
    assert re.search(r'data-key-approve data-needs-note>\s*Approve ARIMA\([^<]*— needs a note', shown)
    assert "Needs a note saying why: its residuals fail the Ljung-Box test at 1% (p = 0.002)." in shown
    refused = client.post(page(SERIES, "/verdict"), data=decision(action="approve"))
    assert refused.status_code == 422 and "needs a note saying why" in refused.text
    assert get_verdict(db, SERIES)["status"] == "pending"
    done = client.post(page(SERIES, "/verdict"), data=decision(action="approve", note="seen; the season is short"),
                       follow_redirects=False)
    assert done.status_code == 303 and get_verdict(db, SERIES)["status"] == "approved"


def test_saving_a_custom_order_that_fails_ljung_box_asks_for_confirmation(client, db):
    custom = decision(action="save", choice="custom", p="0", d="0", q="0", transform="", constant="")
    refused = client.post(page(WALK, "/verdict"), data=custom)
    assert refused.status_code == 422
    assert "confirm to save it anyway" in refused.text and 'name="confirm"' in refused.text
    assert "data-candidate-detail=\"custom\"" in refused.text  # the fit is shown again beside the tick
    assert get_verdict(db, WALK)["status"] == "pending"
    done = client.post(page(WALK, "/verdict"), data={**custom, "confirm": "true"}, follow_redirects=False)
    assert done.status_code == 303 and get_verdict(db, WALK)["order"] == [0, 0, 0]


def test_the_fit_of_a_custom_order_that_fails_ljung_box_offers_the_confirmation_with_it(client):
    fit = decision(action="fit", choice="custom", p="0", d="0", q="0", fragment="true")
    shown = client.post(page(WALK, "/fit"), data=fit).text
    assert 'data-confirm' in shown and 'name="confirm" value="true" form="decision"' in shown
    passing = client.post(page(WALK, "/fit"), data={**fit, "d": "1"}).text  # the random walk's own order
    assert "data-confirm" not in passing


def test_the_custom_model_takes_a_transform_and_constant_and_keeps_them_on_the_page(client, db):
    fields = decision(action="save", choice="custom", p="1", d="1", q="0", transform="box_cox", lam="0.5", constant="yes")
    fitted = client.post(page(WALK, "/fit"), data={**fields, "action": "fit", "fragment": "true"})
    assert fitted.status_code == 200 and "drift" in fitted.text
    done = client.post(page(WALK, "/verdict"), data=fields, follow_redirects=False)
    assert done.status_code == 303
    verdict = get_verdict(db, WALK)
    assert (verdict["status"], verdict["transform"], verdict["trend"]) == ("overridden", {"box_cox": 0.5}, "t")
    shown = client.get(page(WALK)).text
    assert '<option value="box_cox" selected>' in shown and 'name="lam" value="0.5"' in shown
    assert '<option value="yes" selected>' in shown and "with a drift" in shown
    bad = client.post(page(WALK, "/verdict"), data={**fields, "lam": "half", "version": "1"})
    assert bad.status_code == 422 and "Box-Cox needs a lambda" in bad.text


def test_the_bulk_approval_page_undoes_it_and_the_queue_offers_the_undo_meanwhile(client, db, results):
    firm = sorted(sid for sid, r in results.items() if r.confidence == Confidence.FIRM)
    done = client.post("/approve-firm", data={"expected": str(len(firm)), "reviewer": "Ada"}, follow_redirects=False)
    shown = client.get(done.headers["location"]).text
    assert f"Approved {len(firm)} firm suggestion" in shown and "Undo this bulk approval" in shown
    queue = client.get("/").text
    assert "data-undo-banner" in queue and f"approved {len(firm)} series" in queue
    bulk_id = int(done.headers["location"].split("/")[2])
    undone = client.post(f"/bulk/{bulk_id}/undo", data={"reviewer": "Ada"}, follow_redirects=False)
    assert undone.status_code == 303 and f"reopened={len(firm)}" in undone.headers["location"]
    assert all(get_verdict(db, sid)["status"] == "pending" for sid in firm)
    queue = client.get(undone.headers["location"]).text
    assert f"Reopened {len(firm)} series" in queue and "data-undo-banner" not in queue
    again = client.post(f"/bulk/{bulk_id}/undo", data={"reviewer": "Ada"})
    assert again.status_code == 409 and "undone already" in again.text
