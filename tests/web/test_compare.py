"""Candidates side by side: ``GET /api/series/{id}/compare`` and the review page's comparison.

A comparison is the single-order forecast check (``GET /api/series/{id}/backtest``, itself
app.review.forecast_check.backtest_series, whose MASE and coverage tests/core/test_backtest.py
checks against Hyndman & Koehler 2006) run for each order: its numbers must equal that check's,
computed afresh. The candidate table's MASE column shows the checks this process ran on the
current data (app.review.forecast_check.RecentChecks).
"""

from __future__ import annotations

import math
from urllib.parse import quote

import pandas as pd
import pytest
from web_portfolio import write_long_csv

import app.review.forecast_check as forecast_check
from app.core.ranking import PATTERN_SOURCES
from app.core.stationarity import LEVEL_NAMES, SEASONAL_LEVEL_NAMES
from app.review.forecast_check import REMEMBERED_CHECKS, RecentChecks, check_key
from app.store.series import load_series
from app.web.forecast import readable_stamps
from app.web.review import ON_WORDS, SOURCE_WORDS
from app.web.templating import number, percent

SERIES = "plant-a/line-1/ar1"
SCORES = ("mase", "naive_mase", "coverage", "by_horizon", "horizon", "origins", "m", "label", "order", "seasonal_order")


def compare_url(series_id: str = SERIES, page: bool = False) -> str:
    return f"{'' if page else '/api'}/series/{quote(series_id, safe='/')}/compare"


def order_text(values) -> str:
    return ",".join(str(v) for v in values)


@pytest.fixture
def fresh_memory(monkeypatch) -> RecentChecks:
    """No check remembered: every check of the test is computed."""
    memory = RecentChecks(REMEMBERED_CHECKS)
    monkeypatch.setattr(forecast_check, "RECENT_CHECKS", memory)
    return memory


@pytest.fixture
def two_candidates(results):
    return results[SERIES].candidates[:2]


def test_compare_numbers_equal_each_single_forecast_check(client, two_candidates, monkeypatch):
    monkeypatch.setattr(forecast_check, "RECENT_CHECKS", RecentChecks(REMEMBERED_CHECKS))
    params = {"order": [order_text(c.order.order) for c in two_candidates],
              "seasonal_order": [order_text(c.order.seasonal_order) for c in two_candidates]}
    response = client.get(compare_url(), params=params)
    assert response.status_code == 200
    body = response.json()
    assert body["series_id"] == SERIES and len(body["checks"]) == 2
    for check, candidate in zip(body["checks"], two_candidates):
        # a new memory: the single check is computed again, not read back from the comparison
        monkeypatch.setattr(forecast_check, "RECENT_CHECKS", RecentChecks(REMEMBERED_CHECKS))
        single = client.get(f"/api/series/{SERIES}/backtest", params={
            "order": order_text(candidate.order.order), "seasonal_order": order_text(candidate.order.seasonal_order)}).json()
        assert {k: check[k] for k in SCORES} == {k: single[k] for k in SCORES}
        assert check["plot"] == single["plot"] and check["trend"] == candidate.order.trend
        assert 0 < check["mase"] < math.inf and set(check["coverage"]) == {"80", "95"}


def test_compare_takes_horizon_and_origins_for_every_order(client, fresh_memory):
    body = client.get(compare_url(), params={"order": ["1,0,0", "0,0,1"], "horizon": 4, "origins": 3}).json()
    assert [(c["order"], c["horizon"], c["origins"], len(c["by_horizon"])) for c in body["checks"]] == [
        ([1, 0, 0], 4, 3, 4), ([0, 0, 1], 4, 3, 4)]


@pytest.mark.parametrize(("params", "words"), [
    ({"order": ["1,0,0"]}, "2 or 3 orders, not 1"),
    ({"order": ["1,0,0", "0,0,1", "1,0,1", "2,0,0"]}, "2 or 3 orders, not 4"),
    ({"order": ["1,0,0", "1,0,0"]}, "must differ"),
    ({"order": ["1,0,0", "0,0,1"], "seasonal_order": ["0,0,0,0"]}, "for every order or for none"),
    ({"order": ["1,x,0", "0,0,1"]}, "order must be 3 comma-separated whole numbers"),
    # Written in the digits 0-9 alone: int() reads a fullwidth two and 1_0, and isdigit() passes
    # a superscript two that int() then refuses (it was a 500).
    ({"order": ["1,\uff12,0", "0,0,1"]}, "order must be 3 comma-separated whole numbers"),
    ({"order": ["1_0,0,0", "0,0,1"]}, "order must be 3 comma-separated whole numbers"),
    ({"order": ["6,0,0", "0,0,1"]}, "engine's search limits"),
    ({"order": ["1,0,0", "0,0,1"], "horizon": 31}, "horizon (31) must be between 1 and 30"),
])
def test_compare_refuses_what_it_cannot_take_with_422(client, params, words):
    response = client.get(compare_url(), params=params)
    assert response.status_code == 422
    assert words in str(response.json()["detail"])


def test_a_candidate_written_in_other_digits_is_refused_not_an_error(client):
    page = client.get(compare_url(page=True), params={"candidate": ["1", "\u00b2"], "fragment": "true"})
    assert page.status_code == 422 and "is not one of the" in page.text


def test_compare_of_an_unknown_series_is_404_and_of_a_busy_one_429(client):
    assert client.get(compare_url("no/such"), params={"order": ["1,0,0", "0,0,1"]}).status_code == 404
    with client.app.state.series_slots.hold(SERIES):
        busy = client.get(compare_url(), params={"order": ["1,0,0", "0,0,1"]})
        assert busy.status_code == 429 and "already busy" in busy.json()["detail"]
        page = client.get(compare_url(page=True), params={"candidate": ["1", "2"], "fragment": "true"})
        assert page.status_code == 429 and "already busy" in page.text


def test_comparison_fragment_shows_the_api_numbers_and_one_chart(client, two_candidates, fresh_memory):
    fragment = client.get(compare_url(page=True), params={"candidate": ["1", "2"], "fragment": "true"})
    assert fragment.status_code == 200 and "<html" not in fragment.text
    assert 'id="chart-forecast-comparison"' in fragment.text
    body = client.get(compare_url(), params={
        "order": [order_text(c.order.order) for c in two_candidates],
        "seasonal_order": [order_text(c.order.seasonal_order) for c in two_candidates]}).json()
    for check, candidate in zip(body["checks"], two_candidates):
        key = f"{order_text(candidate.order.order)};{order_text(candidate.order.seasonal_order)}"
        assert f'data-compared="{key}" data-mase="{number(check["mase"], 3)}"' in fragment.text
        for level in ("80", "95"):
            assert f'data-compared-coverage="{level}">{percent(check["coverage"][level])}<' in fragment.text
    page = client.get(compare_url(page=True), params={"candidate": ["1", "2"]})
    assert page.status_code == 200 and "<html" in page.text and "Forecast comparison of" in page.text


def test_comparison_of_a_candidate_the_series_lacks_is_refused(client, results):
    count = len(results[SERIES].candidates)
    fragment = client.get(compare_url(page=True), params={"candidate": ["1", str(count + 1)], "fragment": "true"})
    assert fragment.status_code == 422 and "data-fit-error" in fragment.text
    assert f"not one of the {count} candidates" in fragment.text


def mase_cell(page: str, candidate) -> str:
    key = f"{order_text(candidate.order.order)};{order_text(candidate.order.seasonal_order)}"
    start = page.index(f'data-mase-for="{key}">') + len(f'data-mase-for="{key}">')
    return page[start:page.index("<", start)]


def test_candidate_table_shows_the_mase_once_checked_until_the_data_change(client, db, two_candidates, fresh_memory, tmp_path):
    first, second = two_candidates
    page = client.get(f"/series/{SERIES}").text
    assert mase_cell(page, first) == mase_cell(page, second) == ""
    check = client.get(f"/api/series/{SERIES}/backtest", params={
        "order": order_text(first.order.order), "seasonal_order": order_text(first.order.seasonal_order)}).json()
    page = client.get(f"/series/{SERIES}").text
    assert mase_cell(page, first) == number(check["mase"], 3) and mase_cell(page, second) == ""
    # One more observation: a new fingerprint, and a check of the old data no longer applies.
    values = load_series(db, SERIES)
    csv_path = write_long_csv(tmp_path / "more.csv", {SERIES: [*values.to_numpy(), float(values.iloc[-1])]})
    with csv_path.open("rb") as handle:
        assert client.post("/api/imports", files={"file": ("more.csv", handle, "text/csv")}, data={"layout": "long"}).status_code == 200
    assert mase_cell(client.get(f"/series/{SERIES}").text, first) == ""


def test_recent_checks_drop_the_least_recently_used():
    memory = RecentChecks(2)
    keys = [("s", f"data-{i}", None, '"none"', None, None) for i in range(3)]
    memory.put(keys[0], {"mase": 0.0})
    memory.put(keys[1], {"mase": 1.0})
    assert memory.get(keys[0]) == {"mase": 0.0}  # now the most recent
    memory.put(keys[2], {"mase": 2.0})
    assert memory.get(keys[1]) is None and memory.get(keys[0]) == {"mase": 0.0} and memory.get(keys[2]) == {"mase": 2.0}


def test_a_check_is_filed_under_the_data_the_model_and_the_settings(results):
    model = results[SERIES].suggested.order
    transform = results[SERIES].transform
    key = check_key(SERIES, "abc", model, transform)
    assert key == check_key(SERIES, "abc", model, transform)
    assert len({key, check_key(SERIES, "abd", model, transform), check_key(SERIES, "abc", model, transform, horizon=4),
                check_key(SERIES, "abc", model, transform, origins=3)}) == 4


def test_every_source_the_engine_writes_has_words(client, results):
    codes = {code for analysis in results.values() for c in analysis.candidates for code in c.source}
    assert codes and codes <= set(SOURCE_WORDS)
    assert PATTERN_SOURCES <= set(SOURCE_WORDS)
    page = client.get(f"/series/{SERIES}").text
    for code in results[SERIES].candidates[0].source:
        assert SOURCE_WORDS[code] in page


def test_candidate_table_shows_the_rank_score_that_orders_it(client, results):
    page = client.get(f"/series/{SERIES}").text
    assert ">Rank score</th>" in page
    for candidate in results[SERIES].candidates:
        assert f'<td class="num">{number(candidate.rank_score, 1)}</td>' in page


def test_every_series_a_differencing_test_runs_on_has_words():
    # A seasonally differenced series is named as such on the page, not as the series as observed.
    assert set(LEVEL_NAMES + SEASONAL_LEVEL_NAMES) <= set(ON_WORDS)
    assert ON_WORDS["seasonal difference"] == "the seasonal difference"


def test_forecast_table_dates_have_no_midnight_time_and_hours_keep_theirs():
    # app.core.backtest writes dates with str(Timestamp) ("2025-01-01 00:00:00") and steps as numbers.
    monthly = [str(t) for t in pd.date_range("2025-01-01", periods=3, freq="MS")]
    hourly = [str(t) for t in pd.date_range("2025-01-01 22:00", periods=3, freq="h")]
    assert readable_stamps(monthly) == ["2025-01-01", "2025-02-01", "2025-03-01"]
    assert readable_stamps(hourly) == ["2025-01-01 22:00", "2025-01-01 23:00", "2025-01-02 00:00"]
    assert readable_stamps([41, 42]) == ["41", "42"]
