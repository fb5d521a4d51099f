"""The HTML pages, through the same app the server runs, without JavaScript (plain forms)."""

from __future__ import annotations

import html
import json
import re
from urllib.parse import quote

import numpy as np
import pytest
from fastapi.testclient import TestClient
from web_client import TEST_HOSTS
from web_portfolio import AWKWARD_ID, ODD_ID, deltas_by_hand, q_only_pairs, store_log_drift_suggestion, write_long_csv

from app.config import Settings
from app.core.vocabulary import FLAG_WORDS, SAFETY_CAUTION, Confidence, Flag
from app.store.runs import finish_run, start_run
from app.store.verdicts import get_verdict, mark_recheck, set_verdict, verdict_history
from app.web.charts import PLOTLY_JS
from app.web.deps import REVIEWER_COOKIE
from app.web.main import create_app
from app.web.queue import model_terms
from app.web.templating import number

SERIES = "plant-a/line-1/ar1"
FIGURE = re.compile(r"""id="chart-([\w-]+)" data-figure='([^']*)'""")
CANDIDATE_ROW = re.compile(r'<tr data-candidate="(\w+)"[^>]*>(.*?)</tr>', re.S)
PLAIN_NUMBER_CELL = re.compile(r'<td class="num">([^<]*)</td>')
DETAIL_DELTA = re.compile(r'data-candidate-detail="(\w+)".*?<dt>ΔAICc</dt><dd>([^<]*)</dd>', re.S)


def page(series_id: str, suffix: str = "") -> str:
    return f"/series/{quote(series_id, safe='/')}{suffix}"


def figures(text: str) -> dict[str, dict]:
    """The plotly figures a page hands to the browser, by chart id."""
    return {chart_id: json.loads(html.unescape(data)) for chart_id, data in FIGURE.findall(text)}


def decision(version: int = 0, **fields) -> dict:
    return {"version": str(version), "reviewer": "Ada", "note": "", **fields}


# --- queue -------------------------------------------------------------------------------------

def test_queue_lists_a_page_of_series_with_counts(client, results):
    response = client.get("/")
    assert response.status_code == 200
    text = response.text
    assert "Review queue" in text
    assert f"1–4 of {len(results)}" in text  # page_size 4 in the test settings
    assert text.count("<svg class=\"spark\"") == 4
    assert 'rel="next"' in text


def test_queue_second_page_and_filter(client, results):
    second = client.get("/", params={"offset": 4}).text
    assert f"5–{min(8, len(results))} of {len(results)}" in second  # page_size 4
    weak = sorted(sid for sid, r in results.items() if r.confidence == Confidence.WEAK)
    text = client.get("/", params={"confidence": "weak"}).text
    rows = re.findall(r'data-series-id="([^"]+)"', text)
    assert sorted(html.unescape(r) for r in rows) == weak


def test_queue_bad_filter_is_a_422_page(client):
    response = client.get("/", params={"status": "maybe"})
    assert response.status_code == 422
    assert "text/html" in response.headers["content-type"] and "maybe" in response.text


def test_queue_sorts_by_length(client, results):
    text = client.get("/", params={"sort": "n", "descending": "1"}).text
    rows = [html.unescape(r) for r in re.findall(r'data-series-id="([^"]+)"', text)]
    lengths = [results[r].n for r in rows]
    assert lengths == sorted(lengths, reverse=True)


def test_queue_keeps_an_id_prefix_when_filtering_again(client):
    text = client.get("/", params={"prefix": "plant-a/"}).text
    rows = sorted(html.unescape(r) for r in re.findall(r'data-series-id="([^"]+)"', text))
    assert rows == ["plant-a/line-1/ar1", "plant-a/line-2/ma1"]
    assert re.search(r'<input name="prefix" value="plant-a/"', text)  # the filter form sends it again
    assert "prefix=plant-a%2F" in text  # and the sort and count links keep it


def test_queue_page_size_is_chosen_and_kept_in_the_links(client, results):
    text = client.get("/", params={"limit": 2, "sort": "n"}).text
    assert len(re.findall(r"data-series-id=", text)) == 2
    assert f"1–2 of {len(results)}" in text
    sizes = re.search(r"<select name=\"limit\" data-page-size>(.*?)</select>", text, re.S).group(1)
    assert re.findall(r'<option value="(\d+)"', sizes) == ["2", "50", "200", "1000"]
    assert re.search(r'<option value="2"\s*selected>', sizes)
    next_link = re.search(r'rel="next" href="\?([^"]+)"', text).group(1)
    assert html.unescape(next_link) == "sort=n&offset=2&limit=2"
    assert 'sort=series_id&amp;limit=2' in text  # a sort link keeps the page size
    assert '<input type="hidden" name="limit" value="2">' in text  # and so does the filter form


def test_queue_default_page_size_is_left_out_of_the_links(client):
    text = client.get("/").text
    assert "limit=" not in text
    assert Settings(db_path="x.db").max_page_size >= 1000


def test_queue_jumps_to_a_page_and_past_the_end_to_the_last(client, results):
    ranked = [item["series_id"] for item in client.get("/api/series", params={"limit": 100}).json()["items"]]
    second = client.get("/", params={"limit": 2, "page": 2}).text
    assert [html.unescape(r) for r in re.findall(r'data-series-id="([^"]+)"', second)] == ranked[2:4]
    assert re.search(r'name="page" value="2" min="1" max="(\d+)"', second).group(1) == str(-(-len(results) // 2))
    last = client.get("/", params={"limit": 2, "page": 999}).text
    last_rows = [html.unescape(r) for r in re.findall(r'data-series-id="([^"]+)"', last)]
    assert last_rows == ranked[(len(ranked) - 1) // 2 * 2:]
    assert client.get("/", params={"page": 0}).status_code == 422


def test_queue_page_size_is_capped_by_the_settings(db_path):
    settings = Settings(db_path=db_path, page_size=2, max_page_size=3, allowed_hosts=TEST_HOSTS)
    with TestClient(create_app(settings)) as capped:
        text = capped.get("/", params={"limit": 1000}).text
    assert len(re.findall(r"data-series-id=", text)) == 3


def test_a_group_counts_every_state_and_says_the_confidences_are_of_the_pending(client, db, results):
    ids = sorted(sid for sid in results if sid.startswith("plant-b/"))  # walk, ar2, ma1-long
    suggested = results[ids[0]].suggested.order
    set_verdict(db, ids[0], status="approved", order=list(suggested.order), seasonal_order=list(suggested.seasonal_order),
                reviewer="Bo", version=0)
    mark_recheck(db, ids[0], "new data")
    set_verdict(db, ids[1], status="parked", order=None, seasonal_order=None, reviewer="Bo", version=0)
    top = client.get("/").text
    line = re.search(r'<li data-group="plant-b/">.*?<span class="group-counts">(.*?)</span>\s*</li>', top, re.S).group(1)
    words = re.sub(r"<[^>]+>", "", line)
    pending = len(ids) - 2
    assert words.startswith(f"{len(ids)} · 1 recheck · {pending} pending (") and words.endswith(") · 1 parked")
    levels = re.findall(r"(\d+) (weak|tentative|firm)", words)
    assert sum(int(k) for k, _ in levels) == pending


def test_queue_picks_a_group_by_prefix_with_counts_and_a_breadcrumb(client, results):
    top = client.get("/").text
    groups = dict(re.findall(r'<li data-group="([^"]+)"><a href="\?([^"]+)">', top))
    assert set(groups) == {sid.split("/")[0] + "/" for sid in results}
    assert html.unescape(groups["plant-a/"]) == "prefix=plant-a%2F"
    inside = client.get("/", params={"prefix": "plant-a/"}).text
    assert set(re.findall(r'<li data-group="([^"]+)">', inside)) == {"plant-a/line-1/", "plant-a/line-2/"}
    assert '<span aria-current="location">plant-a/</span>' in inside
    deeper = client.get("/", params={"prefix": "plant-a/line-1/", "status": "pending"}).text
    crumbs = re.search(r'<ol class="crumbs">(.*?)</ol>', deeper, re.S).group(1)
    assert [html.unescape(h) for h in re.findall(r'href="\?([^"]*)"', crumbs)] == ["status=pending", "status=pending&prefix=plant-a%2F"]
    assert 'data-group=' not in deeper  # the series of line-1 have no further parts
    firm_b = [sid for sid, r in results.items() if sid.startswith("plant-b/") and r.confidence == Confidence.FIRM]
    assert firm_b, "plant-b/ should hold a firm series"
    inside_b = client.get("/", params={"prefix": "plant-b/"}).text
    assert f"Approve {len(firm_b)} firm suggestion" in inside_b
    assert "approve-firm?prefix=plant-b%2F" in inside_b  # the bulk approval keeps to the group
    # The summary counts the group too, so its numbers agree with the list and the bulk button.
    in_b = [sid for sid in results if sid.startswith("plant-b/")]
    assert re.search(rf'Reviewed in plant-b/</span>\s*<span class="stat-value">0 <span class="muted">of {len(in_b)}</span>', inside_b)
    firm_tile = re.search(r'stat-label"><span class="conf conf-firm".*?<span class="stat-value">(\d+)</span>', inside_b, re.S)
    assert firm_tile and int(firm_tile.group(1)) == len(firm_b)


def test_queue_parks_ticked_rows_with_one_note(client, db, results):
    text = client.get("/").text
    assert re.search(r'<input type="checkbox" name="series" value="[^"]+" form="park-form"', text)
    chosen = ["plant-a/line-1/ar1", "plant-b/walk"]
    done = client.post("/park", data={"scope": "selected", "series": chosen, "note": "ask the plant", "reviewer": "Ada"},
                       follow_redirects=False)
    assert done.status_code == 303 and done.headers["location"] == "/?parked=2"
    assert "Parked 2 series." in client.get(done.headers["location"]).text
    assert [get_verdict(db, sid)["status"] for sid in chosen] == ["parked", "parked"]
    assert client.post("/park", data={"scope": "selected", "note": "n", "reviewer": "Ada"}).status_code == 422


def test_queue_parks_every_waiting_series_of_a_group(client, db, results):
    inside = sorted(sid for sid in results if sid.startswith("plant-a/"))
    text = client.get("/", params={"prefix": "plant-a/"}).text
    assert f"every waiting series of this group and filter ({len(inside)})" in text
    stale = client.post("/park?prefix=plant-a%2F", data={"scope": "filter", "expected": "9", "note": "n", "reviewer": "Ada"})
    assert stale.status_code == 422 and all(get_verdict(db, sid)["status"] == "pending" for sid in inside)
    done = client.post("/park?prefix=plant-a%2F", data={"scope": "filter", "expected": str(len(inside)), "note": "line stopped",
                                                         "reviewer": "Ada"}, follow_redirects=False)
    assert done.headers["location"] == f"/?prefix=plant-a%2F&parked={len(inside)}"
    assert all(get_verdict(db, sid)["note"] == "line stopped" for sid in inside)
    assert all(get_verdict(db, sid)["status"] == "pending" for sid in results if sid not in inside)


def test_every_flag_the_engine_writes_has_words(client):
    assert set(FLAG_WORDS) == set(Flag)


def test_flag_filter_offers_the_flags_present_by_their_words_with_counts(client, results):
    present = {str(f) for r in results.values() for f in r.flags}
    text = client.get("/").text
    options = dict(re.findall(r'<option value="([a-z_]+)"\s*>([^<]*) \(\d+\)</option>', text))
    assert set(options) == present and present
    assert all(html.unescape(words) == FLAG_WORDS[flag] for flag, words in options.items())
    near = sum("near_unit_root" in r.flags for r in results.values())
    assert f"{html.escape(FLAG_WORDS[Flag.NEAR_UNIT_ROOT])} ({near})</option>" in text
    chosen = client.get("/", params={"flag": "near_unit_root"}).text
    assert re.search(r'<option value="near_unit_root"\s*selected>', chosen)


def test_queue_row_says_the_main_reason_in_words(client, results):
    doubtful = {sid: r for sid, r in results.items() if r.confidence != Confidence.FIRM}
    assert any(r.confidence_reasons[0].startswith("flag: ") for r in doubtful.values())
    assert any(not r.confidence_reasons[0].startswith("flag: ") for r in doubtful.values())
    for sid, r in doubtful.items():
        text = client.get("/", params={"q": sid}).text
        reason = r.confidence_reasons[0]
        words = FLAG_WORDS[reason.removeprefix("flag: ")] if reason.startswith("flag: ") else reason
        assert f'<span class="reason">{html.escape(words)}</span>' in text, sid
        assert "flag: " not in text
    firm = next(sid for sid, r in results.items() if r.confidence == Confidence.FIRM)
    assert 'class="reason"' not in client.get("/", params={"q": firm}).text


def test_queue_row_names_the_transform_term_and_interventions_of_the_suggestion(client, db, results):
    store_log_drift_suggestion(db, results[SERIES])
    text = client.get("/", params={"q": SERIES}).text
    cell = re.search(r'<td class="order">(.*?)</td>', text, re.S).group(1)
    assert cell.split()[0] == "ARIMA(0,1,1)"
    assert '<span class="model-terms" data-model-terms>log, with a drift, 1 level shift</span>' in cell
    # what an analysis stored before interventions were listed did not record is said to be unknown
    db.execute("UPDATE analyses SET interventions = NULL WHERE series_id = ?", [SERIES])
    assert "data-model-terms>log, with a drift, interventions unknown<" in client.get("/", params={"q": SERIES}).text


def test_queue_row_of_a_plain_suggestion_adds_no_line(client, results):
    plain = [sid for sid, r in results.items() if r.transform.kind == "none" and r.suggested.order.trend == "n"
             and not r.interventions]
    assert plain
    assert "data-model-terms" not in client.get("/", params={"q": plain[0]}).text


@pytest.mark.parametrize("transform, trend, interventions, words", [
    ("none", "n", [], ""),
    ("log", "t", [], "log, with a drift"),
    ({"box_cox": 0.5}, "c", ["additive", "level_shift", "additive"], "Box-Cox (lambda 0.5), with a mean, 2 additive outliers, 1 level shift"),
    ("none", "ct", ["temporary_change"], "with a mean and a linear trend, 1 temporary change"),
    (None, None, None, "transform unknown, term unknown, interventions unknown"),
])
def test_model_terms_word_the_suggestion_beyond_its_orders(transform, trend, interventions, words):
    listed = None if interventions is None else [{"timestamp": str(i), "kind": kind} for i, kind in enumerate(interventions)]
    suggested = {"order": [1, 1, 0], "seasonal_order": [0, 0, 0, 0], "transform": transform, "trend": trend,
                 "interventions": listed}
    assert model_terms(suggested) == words
    assert model_terms(dict.fromkeys(suggested)) == ""  # no suggestion, no words


def test_help_overlay_says_how_flags_weigh_in_the_queue_order(client):
    text = client.get("/").text
    help_text = text[text.index('id="help"'):]
    most = re.search(r"<strong>most[^<]*</strong>:([^<]*)</li>", help_text).group(1)
    least = re.search(r"<strong>least[^<]*</strong>:([^<]*)</li>", help_text).group(1)
    assert "residual autocorrelation" in most and "no convergence" in most
    assert "transformed" in least


def test_queue_escapes_series_ids(client):
    text = client.get("/", params={"q": "shop"}).text
    assert "rolls <b>" not in text
    assert "bread &amp; rolls &lt;b&gt;" in text
    assert quote(AWKWARD_ID, safe="/") in text  # the link is percent-encoded


def test_queue_offers_bulk_approval_of_firm_series(client, results):
    firm = sum(r.confidence == Confidence.FIRM for r in results.values())
    text = client.get("/").text
    assert f"Approve {firm} firm suggestion" in text
    assert "btn-primary bulk" not in client.get("/", params={"status": "approved"}).text


# --- review page -------------------------------------------------------------------------------

def test_review_page_shows_charts_with_stored_lag_counts(client, results):
    response = client.get(page(SERIES))
    assert response.status_code == 200
    found = figures(response.text)
    stored = results[SERIES]
    for name, correlation in (("acf", stored.acf), ("pacf", stored.pacf)):
        bars = [t for t in found[name]["data"] if t["type"] == "bar"]
        assert len(bars) == 1 and len(bars[0]["x"]) == len(correlation.lags)
        band = [t for t in found[name]["data"] if t.get("fill") == "toself"]
        assert len(band) == 1
        assert max(band[0]["y"]) == pytest.approx(max(correlation.band))
    assert len(found["series"]["data"][0]["y"]) == stored.n
    assert stored.d == 0 and stored.transform.kind == "none"
    assert "identified" not in found  # identified on the series itself: no second chart


def test_review_page_says_when_an_earlier_engine_made_the_analysis(client, db):
    assert "data-earlier-engine" not in client.get(page(SERIES)).text
    db.execute("UPDATE analysis_results SET result = json_set(result, '$.engine_version', '0.1.0') WHERE series_id = ?", [SERIES])
    db.conn.commit()
    shown = client.get(page(SERIES)).text
    assert "data-earlier-engine" in shown and "An earlier engine (0.1.0) made this analysis" in shown


def test_review_page_draws_the_transformed_or_differenced_series(client, results):
    changed = [sid for sid, r in results.items() if r.d or r.D or r.transform.kind != "none"]
    assert changed, "the synthetic portfolio should hold a differenced or transformed series"
    for sid in changed:
        found = figures(client.get(page(sid)).text)
        assert found["identified"]["data"][0]["y"] == pytest.approx(results[sid].identified_on)
    # the suggested candidate's residual ACF and residuals are drawn for the selected panel
    assert "resid-acf-1" in found and "resid-1" in found


def test_review_page_tables_hold_the_chart_numbers(client, results):
    text = client.get(page(SERIES)).text
    stored = results[SERIES]
    assert f"Numbers ({len(stored.acf.lags)} rows)" in text
    first_lag = f"<td>1</td><td>{stored.acf.values[0]:.3f}</td><td>{stored.acf.band[0]:.3f}</td>"
    assert first_lag in text


def test_review_page_lists_candidates_and_tests_in_words(client, results):
    text = client.get(page(SERIES)).text
    stored = results[SERIES]
    assert text.count('data-candidate="') == len(stored.candidates)
    assert text.count("tag-suggested") >= 1
    for test in stored.differencing.tests:
        assert test.name in text
    for line in stored.differencing.explanation:
        assert html.escape(line) in text
    assert "suggestions are statistical" in text


def test_review_page_shows_each_candidates_delta_aicc_within_its_differencing(client, results):
    """ΔAICc in the table and in each detail panel is AICc less the best AICc of the same d, D
    and s, so a seasonal candidate that loses to a non-seasonal one of the same d is not 0."""
    seasonal = [sid for sid, r in results.items() if q_only_pairs(r)]
    assert seasonal, "the synthetic portfolio should hold a series with seasonal candidates differing only in Q"
    above_best = []
    for sid in seasonal:
        stored = results[sid]
        text = client.get(page(sid)).text
        expected = deltas_by_hand([(c.aicc, c.order.order, c.order.seasonal_order) for c in stored.candidates])
        shown_rows = {key: PLAIN_NUMBER_CELL.findall(row) for key, row in CANDIDATE_ROW.findall(text)}
        shown_details = dict(DETAIL_DELTA.findall(text))
        for rank, (c, delta) in enumerate(zip(stored.candidates, expected), start=1):
            aicc_cell, delta_cell = shown_rows[str(rank)][:2]
            assert aicc_cell == number(c.aicc, 1)
            assert (delta_cell, shown_details[str(rank)]) == (number(delta, 1), number(delta, 2)), (sid, c.label)
        for _, high in q_only_pairs(stored):
            rank = stored.candidates.index(high) + 1
            above_best.append(float(shown_details[str(rank)]) > 0)
    assert any(above_best), "some pair's larger order is not the best of its group, so its delta is not trivially 0"


def test_review_page_names_the_orders_screening_left_out(client, results):
    screened = {series_id: [o.label() + o.term_words() for o in r.screened_out] for series_id, r in results.items() if r.screened_out}
    assert screened, "the synthetic portfolio should have at least one series with a screened-out order"
    for series_id, labels in screened.items():
        text = html.unescape(client.get(page(series_id)).text)
        assert f"Also considered, not fitted in full: {', '.join(labels)}." in text
    quiet = next(series_id for series_id, r in results.items() if not r.screened_out and r.candidates)
    assert "data-screened-out" not in client.get(page(quiet)).text



def test_every_order_on_the_review_page_names_its_deterministic_term(client, results):
    # Two candidates of the same orders differ only by a mean, drift or trend: the suggestion, the
    # candidate table and the approve button name it, as the screened-out list does.
    termed = {series_id: r for series_id, r in results.items() if r.candidates and r.suggested.order.trend != "n"}
    assert termed, "the synthetic portfolio should have a suggestion with a mean, drift or trend"
    for series_id, r in termed.items():
        text = html.unescape(client.get(page(series_id)).text)
        full = r.suggested.order.label() + r.suggested.order.term_words()
        assert f'<strong class="order-big">{full}</strong>' in text
        assert f"Approve {full}" in text
        for c in r.candidates:
            assert f'class="order">{c.order.label() + c.order.term_words()}</label>' in text

def test_review_page_unknown_is_404(client):
    response = client.get(page("no/such/series"))
    assert response.status_code == 404
    assert "no/such/series" in html.unescape(response.text)


def test_review_page_selected_candidate_without_javascript(client, results):
    text = client.get(page(SERIES), params={"candidate": "3"}).text
    assert 'data-candidate-detail="3" >' in text or 'data-candidate-detail="3">' in text
    assert re.search(r'data-candidate-detail="1"\s+hidden', text)


def test_review_prev_next_follow_the_filter(client):
    text = client.get(page("plant-b/walk"), params={"q": "plant"}).text
    assert 'rel="next"' in text or 'rel="prev"' in text
    for link in re.findall(r'rel="(?:next|prev)" data-key-\w+ href="([^"]+)"', text):
        assert "q=plant" in html.unescape(link)


# --- decisions through the form ----------------------------------------------------------------

def test_form_approve_saves_redirects_to_next_and_remembers_reviewer(client, db, results):
    response = client.post(page(SERIES, "/verdict"), data=decision(action="approve", note="looks clean"), follow_redirects=False)
    assert response.status_code == 303
    assert f"saved={quote(SERIES, safe='')}" in response.headers["location"]
    assert response.cookies.get(REVIEWER_COOKIE) == "Ada"
    verdict = get_verdict(db, SERIES)
    assert (verdict["status"], verdict["order"], verdict["reviewer"], verdict["note"]) == (
        "approved", list(results[SERIES].suggested.order.order), "Ada", "looks clean")
    follow = client.get(response.headers["location"])
    assert "Saved the verdict of" in follow.text


def test_any_unicode_reviewer_name_is_saved_and_remembered_without_control_characters(client, db):
    # A cookie holds Latin-1 alone: the name is percent-encoded in it, not refused with a 500
    # after the verdict was saved. Escape sequences and direction marks are dropped.
    name = "Łukasz 名前\u202e\x1b[0m"
    response = client.post(page(SERIES, "/verdict"), data=decision(action="approve", reviewer=name, note="ok\u202e\nline two"),
                           follow_redirects=False)
    assert response.status_code == 303
    verdict = get_verdict(db, SERIES)
    assert (verdict["reviewer"], verdict["note"]) == ("Łukasz 名前[0m", "ok\nline two")
    assert 'value="Łukasz 名前[0m"' in client.get(page(SERIES)).text


def test_after_a_save_the_page_moves_to_the_next_series_awaiting_a_decision(client, db, results):
    ordered = sorted(results)  # the list sorted by series id, as the filter below asks
    first, decided, awaiting = ordered[:3]
    set_verdict(db, decided, status="approved", order=list(results[decided].suggested.order.order),
                seasonal_order=list(results[decided].suggested.order.seasonal_order), reviewer="Bo", version=0)
    response = client.post(page(first, "/verdict") + "?sort=series_id", data=decision(action="approve"), follow_redirects=False)
    assert response.status_code == 303
    assert response.headers["location"].split("?")[0] == page(awaiting)  # not the decided series between them


def test_form_pick_another_candidate_is_an_override(client, db, results):
    second = results[SERIES].candidates[1]
    response = client.post(page(SERIES, "/verdict"), data=decision(action="save", choice="2"), follow_redirects=False)
    assert response.status_code == 303
    verdict = get_verdict(db, SERIES)
    assert verdict["status"] == "overridden" and verdict["order"] == list(second.order.order)
    history = client.get(page(SERIES)).text
    assert "overridden" in history and "Ada" in history


def test_form_custom_order_fit_then_save(client, db):
    fields = decision(action="fit", choice="custom", p="2", d="0", q="2", P="0", D="0", Q="0", s="0")
    fitted = client.post(page(SERIES, "/fit"), data=fields)
    assert fitted.status_code == 200
    assert "custom fit" in fitted.text and "ARIMA(2,0,2)" in fitted.text
    assert 'data-candidate-detail="custom"' in fitted.text
    assert get_verdict(db, SERIES)["status"] == "pending"  # fitting saves nothing
    saved = client.post(page(SERIES, "/verdict"), data={**fields, "action": "save", "note": "two cycles"}, follow_redirects=False)
    assert saved.status_code == 303
    verdict = get_verdict(db, SERIES)
    assert (verdict["status"], verdict["order"], verdict["note"]) == ("overridden", [2, 0, 2], "two cycles")


def test_fit_fragment_is_a_partial(client):
    fields = decision(action="fit", choice="custom", p="1", d="0", q="1", fragment="true")
    response = client.post(page(SERIES, "/fit"), data=fields)
    assert response.status_code == 200
    assert "<html" not in response.text and 'data-candidate-detail="custom"' in response.text
    bad = client.post(page(SERIES, "/fit"), data={**fields, "p": "x"})
    assert bad.status_code == 422 and "whole number" in bad.text and "<html" not in bad.text


def test_a_note_belongs_to_its_own_decision(client, db, results):
    client.post(page(SERIES, "/verdict"), data=decision(action="save", choice="2", note="peak season"), follow_redirects=False)
    shown = client.get(page(SERIES)).text
    assert "Note with it: peak season" in shown
    assert re.search(r'<textarea name="note"[^>]*>\s*</textarea>', shown)  # the note box starts empty
    client.post(page(SERIES, "/verdict"), data=decision(version=1, action="approve"), follow_redirects=False)
    verdict = get_verdict(db, SERIES)
    assert verdict["status"] == "approved" and verdict["note"] in ("", None)
    assert [h["note"] for h in verdict_history(db, SERIES)][-2:] in (["peak season", ""], ["peak season", None])


def test_form_bad_custom_order_is_422_and_keeps_input(client, db):
    fields = decision(action="save", choice="custom", p="12", d="0", q="0", note="typed note")
    response = client.post(page(SERIES, "/verdict"), data=fields)
    assert response.status_code == 422
    assert "p = 12 is outside 0..10" in response.text
    assert "typed note" in response.text and 'value="12"' in response.text
    assert get_verdict(db, SERIES)["status"] == "pending"


def test_form_stale_version_is_409_and_shows_current(client, db):
    client.post(page(SERIES, "/verdict"), data=decision(action="park"))
    response = client.post(page(SERIES, "/verdict"), data=decision(version=0, action="approve"))
    assert response.status_code == 409
    assert "reload and decide again" in response.text
    assert get_verdict(db, SERIES)["status"] == "parked"
    assert len(verdict_history(db, SERIES)) == 1


def test_form_needs_a_reviewer_name(client, db):
    response = client.post(page(SERIES, "/verdict"), data={**decision(action="approve"), "reviewer": "  "})
    assert response.status_code == 422
    assert "Give your name" in response.text
    assert get_verdict(db, SERIES)["status"] == "pending"


def test_form_unknown_series_is_404(client):
    assert client.post(page("no/such", "/verdict"), data=decision(action="approve")).status_code == 404
    assert client.post(page("no/such", "/fit"), data=decision(action="fit", p="1", d="0", q="0")).status_code == 404


def test_form_routes_accept_ids_ending_in_route_words(client, db):
    response = client.post(page(ODD_ID, "/verdict"), data=decision(action="park"), follow_redirects=False)
    assert response.status_code == 303
    assert get_verdict(db, ODD_ID)["status"] == "parked"


def test_reviewer_cookie_prefills_the_forms(client):
    response = client.post("/reviewer", data={"name": "Grace  Hopper", "back": page(SERIES)}, follow_redirects=False)
    assert response.status_code == 303 and response.headers["location"] == page(SERIES)
    text = client.get(page(SERIES)).text
    assert 'name="reviewer" value="Grace Hopper"' in text
    assert client.post("/reviewer", data={"name": "x", "back": "//elsewhere.example"}, follow_redirects=False).headers["location"] == "/"


# --- bulk approval -----------------------------------------------------------------------------

def test_bulk_approval_confirms_the_count_then_approves(client, db, results):
    firm = sorted(sid for sid, r in results.items() if r.confidence == Confidence.FIRM)
    confirm = client.get("/approve-firm")
    assert f"Approve {len(firm)} firm suggestion" in confirm.text
    stale = client.post("/approve-firm", data={"expected": str(len(firm) + 1), "reviewer": "Ada"})
    assert stale.status_code == 409
    assert all(get_verdict(db, sid)["status"] == "pending" for sid in firm)
    done = client.post("/approve-firm", data={"expected": str(len(firm)), "reviewer": "Ada"}, follow_redirects=False)
    assert done.status_code == 303 and done.headers["location"].startswith("/bulk/")  # the approval, with its undo
    assert all(get_verdict(db, sid)["status"] == "approved" for sid in firm)
    assert f"Approved {len(firm)} firm suggestion" in client.get(done.headers["location"]).text


def test_bulk_approval_lists_the_whole_model_each_series_would_get(client, db, results):
    store_log_drift_suggestion(db, results[SERIES], confidence=Confidence.FIRM, flags=(), confidence_reasons=())
    text = client.get("/approve-firm").text
    item = re.search(rf'<li data-preview="{re.escape(SERIES)}">(.*?)</li>', text, re.S).group(1)
    assert item.startswith(f"{SERIES}: ARIMA(0,1,1)")
    assert "(log, with a drift, 1 level shift)" in item


def test_bulk_approval_beyond_its_preview_links_to_the_queue_of_every_series_it_takes(client, monkeypatch, results):
    # Found by a new user: "... and 29 more" with no way to see their models before approving.
    import app.web.routes.pages as pages

    firm = [sid for sid, r in results.items() if r.confidence == Confidence.FIRM]
    monkeypatch.setattr(pages, "BULK_PREVIEW", 1)
    assert len(firm) > 1, "precondition: more firm series than the preview shows"
    text = client.get("/approve-firm").text
    link = re.search(r'<a href="([^"]+)" data-all-firm>(\d+) more in the queue</a>', text)
    assert link and int(link.group(2)) == len(firm) - 1
    assert "status=pending" in link.group(1) and "confidence=firm" in link.group(1)
    assert "The first 1 are listed below" in text


# --- upload and runs ---------------------------------------------------------------------------

def test_upload_page_imports_and_reports(client, tmp_path):
    assert client.get("/upload").status_code == 200
    csv_path = write_long_csv(tmp_path / "extra.csv", {"extra/one": np.random.default_rng(1).normal(size=40)})
    with csv_path.open("rb") as handle:
        response = client.post("/upload", files={"file": ("extra.csv", handle, "text/csv")}, data={"layout": "long"})
    assert response.status_code == 200
    assert "extra.csv: 1 added, 0 updated, 0 unchanged, 0 rejected" in response.text
    assert "Start the analysis" in response.text


def test_upload_report_shows_rejected_ids_escaped_and_each_reason_once(client, tmp_path):
    # A rejected id with a direction override and an escape had reached the page raw (a server
    # attack), and the Reason cell repeated the series and line its own columns show.
    hostile = "shop\u202eevil\x1b"
    rows = ["series_id,timestamp,value", "short,2020-01-01,1"]
    rows += [f"{hostile},2020-{m:02d}-01,{m}" for m in range(1, 13)]
    path = tmp_path / "odd.csv"
    path.write_text("\n".join(rows) + "\n", encoding="utf-8")
    with path.open("rb") as handle:
        text = client.post("/upload", files={"file": ("odd.csv", handle, "text/csv")}, data={"layout": "long"}).text
    assert "\u202e" not in text and "\x1b" not in text
    assert "shop\\u202eevil\\x1b" in text
    cells = re.findall(r"<tr><td>([^<]*)</td><td class=\"num\">[^<]*</td><td>([^<]*)</td></tr>", text)
    reasons = dict(cells)
    assert reasons["short"] == "has 1 observation; at least 12 are needed to identify a model"
    assert not any(html.unescape(r).startswith(("series ", "line ")) for r in reasons.values()), reasons
    queue = client.get("/").text
    assert "\u202e" not in queue and "shop\\u202eevil\\x1b" in queue


@pytest.mark.parametrize(("sent", "shown"), [
    ("..", "upload.csv"),
    ("x" * 300 + ".csv", "x" * 251 + ".csv"),  # 255 bytes, the limit of a file name
    ("é" * 130 + ".csv", "é" * 125 + ".csv"),  # 2 bytes each: 254 bytes
    ("\u202ereport.csv", "report.csv"),
])
def test_any_upload_name_is_imported_under_a_name_a_file_system_takes(client, tmp_path, sent, shown):
    csv_path = write_long_csv(tmp_path / "extra.csv", {"extra/one": np.random.default_rng(1).normal(size=40)})
    with csv_path.open("rb") as handle:
        response = client.post("/upload", files={"file": (sent, handle, "text/csv")}, data={"layout": "long"})
    assert response.status_code == 200
    assert f"{shown}: 1 added" in response.text


def test_upload_unusable_file_shows_the_reason(client, tmp_path):
    bad = tmp_path / "bad.csv"
    bad.write_text("a,b\n1,2\n")
    with bad.open("rb") as handle:
        response = client.post("/upload", files={"file": ("bad.csv", handle)}, data={"layout": "long"})
    assert response.status_code == 400
    assert "bad.csv" in response.text and "message-error" in response.text


def test_start_analysis_button_redirects_to_the_run(client):
    response = client.post("/runs", follow_redirects=False)
    assert response.status_code == 303
    run_id = int(response.headers["location"].rsplit("/", 1)[1])
    progress = client.get(response.headers["location"])
    assert f"Analysis run {run_id}" in progress.text and "data-run-progress" in progress.text


def test_runs_pages(client, db):
    assert "No analysis has run yet" in client.get("/runs").text
    run_id = start_run(db, {}, total=3, engine_version="test")
    listing = client.get("/runs").text
    assert f'/runs/{run_id}"' in listing
    progress = client.get(f"/runs/{run_id}")
    assert progress.status_code == 200 and f"/api/runs/{run_id}" in progress.text
    assert client.get("/runs/999").status_code == 404


def test_a_finished_run_lists_the_decided_orders_it_sent_back(client, db, results):
    # The command line listed them at the end of `analyze`; the run page said only "finished 1
    # of 1" (a new-user trial), and kept saying results "appear as they land" once finished.
    run_id = start_run(db, {}, total=1, engine_version="test")
    sid = sorted(results)[0]
    suggested = results[sid].suggested.order
    set_verdict(db, sid, status="approved", order=list(suggested.order), seasonal_order=list(suggested.seasonal_order),
                reviewer="Bo", version=0)
    mark_recheck(db, sid, "the data changed (now 130 points to 2025-10-01): the residuals fail the Ljung-Box test")
    finish_run(db, run_id, "finished")
    page = client.get(f"/runs/{run_id}").text
    assert "1 decided order sent back for a re-check" in page and "the residuals fail the Ljung-Box test" in page
    assert "as they land" not in page and "?status=recheck" in page


# --- assets ------------------------------------------------------------------------------------

def test_plotly_is_served_from_the_installed_package(client):
    response = client.get("/vendor/plotly.min.js")
    assert response.status_code == 200
    assert response.content == PLOTLY_JS.read_bytes()


def test_pages_load_nothing_from_other_hosts(client):
    for path in ("/", page(SERIES), "/upload", "/runs", "/approve-firm"):
        text = client.get(path).text
        assert not re.findall(r"""(?:src|href)=["'](?:https?:)?//""", text), path
    assert client.get("/static/lagdesk.css").status_code == 200
    assert client.get("/static/js/review.js").status_code == 200


@pytest.mark.parametrize("path", ["/", "/api/series", "/export/lagdesk-orders.csv", "/vendor/plotly.min.js", f"/series/{SERIES}"])
def test_head_answers_where_get_does_with_its_headers_and_no_body(client, path):
    # RFC 9110, §9.3.2: HEAD is GET without the content (monitors and link checkers ask it).
    got, head = client.get(path), client.head(path)
    assert (head.status_code, head.content) == (got.status_code, b"")
    assert head.headers["content-type"] == got.headers["content-type"]
    assert client.head("/no-such-page").status_code == 404


@pytest.mark.parametrize("path", ["/", f"/series/{SERIES}", "/approve-firm", "/upload"])
def test_every_page_keeps_the_safety_caution(client, path):
    assert f"Caution: {SAFETY_CAUTION}" in re.sub(r"<[^>]+>", "", html.unescape(client.get(path).text))


@pytest.mark.parametrize("path", [f"/series/{SERIES}", "/approve-firm?prefix=plant-b%2F"])
def test_the_caution_stands_beside_every_decision_form_not_only_in_the_footer(client, path):
    # A reviewer approving a sensor channel reads the form, not the footer 3,000 px below it.
    text = client.get(path).text
    form = text.index('<form id="decision"') if "/series/" in path else text.index('name="expected"')
    caution = text.find("data-caution")
    assert 0 < caution < form


def test_the_page_words_a_series_id_may_not_end_in_are_the_pages_served_after_one():
    # An id ending in one of them (edge/compare) was stored but could not be opened: its URL
    # was that of a page of the series before it (an attack on the server found it). The GET
    # routes after a series id, read from the route modules' decorators.
    from pathlib import Path

    from app.core.series_ids import PAGE_WORDS

    routes = Path(__file__).resolve().parents[2] / "app" / "web" / "routes"
    served = {word for module in routes.glob("*.py")
              for word in re.findall(r'@router\.get\("[^"]*\{series_id:path\}/([^"/]+)"', module.read_text())}
    assert served == PAGE_WORDS
