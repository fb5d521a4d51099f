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


def _detail(client, series_id: str) -> dict:
    return client.get(f"/api/series/{quote(series_id, safe='/')}").json()


def _suggested(body: dict) -> tuple[list[int], list[int]]:
    leader = body["candidates"][0]
    return leader["order"], leader["seasonal_order"]


def test_a_fit_without_the_level_shift_shows_what_it_did(client):
    body = _detail(client, SHIFTED)
    order, seasonal = _suggested(body)
    url = f"/api/series/{quote(SHIFTED, safe='/')}/fit"
    kept = client.post(url, json={"order": order, "seasonal_order": seasonal, "interventions": [
        {"timestamp": i["timestamp"], "kind": i["kind"]} for i in body["interventions"]]}).json()
    assert kept["interventions_chosen"] is False  # the analysis' own: its sizes, its criteria
    assert kept["loglik"] == pytest.approx(body["candidates"][0]["loglik"], abs=1e-6)
    dropped = client.post(url, json={"order": order, "seasonal_order": seasonal, "interventions": []}).json()
    assert dropped["interventions_chosen"] is True and dropped["interventions"] == []
    assert dropped["delta_aicc"] is None  # another series than the candidates': criteria do not compare
    # The shift left in: the stationary model's residuals carry it, so they are wider (1.3 times the variance here).
    sigma2 = {name: {p["name"]: p["value"] for p in fit["params"]}["sigma2"] for name, fit in (("kept", kept), ("dropped", dropped))}
    assert sigma2["dropped"] > 1.2 * sigma2["kept"]


def test_another_order_sizes_the_analysis_interventions_anew(client):
    body = _detail(client, SHIFTED)
    url = f"/api/series/{quote(SHIFTED, safe='/')}/fit"
    # A random walk absorbs most of a level shift: the shift sized under it is far less clear
    # than under the analysis' stationary leader (its t there: well above 10).
    walk = client.post(url, json={"order": [0, 1, 1], "seasonal_order": [0, 0, 0, 0]}).json()
    assert walk["interventions_chosen"] is True
    (shift,) = walk["interventions"]
    (own,) = body["interventions"]
    assert shift["timestamp"] == own["timestamp"] and abs(shift["t_stat"]) < abs(own["t_stat"]) / 2


def test_an_added_intervention_is_sized_with_the_order_and_a_wrong_time_is_named(client):
    body = _detail(client, SPIKED)
    order, seasonal = _suggested(body)
    url = f"/api/series/{quote(SPIKED, safe='/')}/fit"
    spike = _defect_date(SPIKED)
    added = client.post(url, json={"order": order, "seasonal_order": seasonal, "interventions": [
        {"timestamp": spike, "kind": "additive"}, {"timestamp": "2024-06-03", "kind": "level_shift"}]}).json()
    by_time = {i["timestamp"]: i for i in added["interventions"]}
    assert set(by_time) == {spike, "2024-06-03"}
    assert by_time[spike]["t_stat"] > 5  # the dock-door spike is clear
    assert abs(by_time["2024-06-03"]["t_stat"]) < 3  # no shift there in the data
    wrong = client.post(url, json={"order": order, "seasonal_order": seasonal,
                                   "interventions": [{"timestamp": "1999-01-01", "kind": "additive"}]})
    assert wrong.status_code == 422
    assert SPIKED in wrong.json()["detail"] and "'1999-01-01' is not a time of this series" in wrong.json()["detail"]


def test_a_verdict_keeps_the_reviewers_interventions_and_the_export_hands_them_on(client):
    body = _detail(client, SHIFTED)
    order, seasonal = _suggested(body)
    url = f"/api/series/{quote(SHIFTED, safe='/')}/verdict"
    own = [{"timestamp": i["timestamp"], "kind": i["kind"]} for i in body["interventions"]]
    changed = [*own, {"timestamp": "2024-12-20", "kind": "additive"}]
    approving = client.post(url, json={"status": "approved", "order": order, "seasonal_order": seasonal,
                                       "interventions": changed, "reviewer": "ann", "version": body["verdict"]["version"]})
    assert approving.status_code == 422 and "to change them, override instead" in approving.json()["detail"]
    saved = client.post(url, json={"status": "overridden", "order": order, "seasonal_order": seasonal, "confirm": True,
                                   "interventions": changed, "reviewer": "ann", "version": body["verdict"]["version"]})
    assert saved.status_code == 200, saved.text
    stored = saved.json()["interventions"]
    assert [(i["timestamp"], i["kind"]) for i in stored] == [(c["timestamp"], c["kind"]) for c in changed]
    record = next(o for o in client.get("/api/orders").json()["orders"] if o["series_id"] == SHIFTED)
    # The export spells each time as last_timestamp is spelt (ISO 8601), the page as a reader writes it.
    assert [(i["timestamp"], i["kind"]) for i in record["interventions"]] == [
        (f'{c["timestamp"]}T00:00:00', c["kind"]) for c in changed]
    assert [i["size"] for i in record["interventions"]] == pytest.approx([i["size"] for i in stored])
    assert record["parameters"] is not None
    history = _detail(client, SHIFTED)["history"]
    assert history[-1]["interventions"] == stored
    page = client.get(f"/series/{quote(SHIFTED, safe='/')}").text
    chosen_words = f"interventions: level shift at {_defect_date(SHIFTED)}; additive outlier at 2024-12-20"
    assert page.count(chosen_words) == 2  # the current verdict and its history entry


def test_the_review_page_offers_the_interventions_and_both_correlograms(client):
    html = client.get(f"/series/{quote(SHIFTED, safe='/')}").text
    when = _defect_date(SHIFTED)
    assert re.search(rf'name="interventions" value="{when}\|level_shift" checked', html)
    assert 'name="add_at"' in html and 'name="interventions_shown" value="true"' in html
    assert 'id="chart-acf-observed"' in html and 'data-correlogram-view="observed" hidden' in html
    assert "As observed" in html


def _suggestion_without_interventions(client) -> dict:
    """The decision form fitting the suggested order of the shifted channel as a custom model,
    with every intervention unticked."""
    order, seasonal = _suggested(_detail(client, SHIFTED))
    return {"action": "fit", "choice": "custom", "p": order[0], "d": order[1], "q": order[2], "P": seasonal[0],
            "D": seasonal[1], "Q": seasonal[2], "s": seasonal[3], "interventions_shown": "true", "fragment": "true"}


def test_the_form_fits_a_custom_model_without_the_interventions_in_place(client):
    form = _suggestion_without_interventions(client)
    html = client.post(f"/series/{quote(SHIFTED, safe='/')}/fit", data=form).text
    assert "No interventions taken out." in html
    # Adding back exactly the analysis' own shift is the analysis' model again, with its sizes.
    form["add_at"], form["add_kind"] = _defect_date(SHIFTED), "level_shift"
    html = client.post(f"/series/{quote(SHIFTED, safe='/')}/fit", data=form).text
    assert "(the analysis' own, at the sizes it estimated)" in html and f"<td>{_defect_date(SHIFTED)}</td>" in html
    form["add_kind"] = "temporary_change"
    html = client.post(f"/series/{quote(SHIFTED, safe='/')}/fit", data=form).text
    assert "sized jointly with this order" in html and "<td>temporary change</td>" in html


def test_the_forecast_check_takes_the_interventions_out_as_the_hand_off_does(client):
    check = client.get(f"/api/series/{quote(SHIFTED, safe='/')}/backtest").json()
    assert any(f"level shift at {_defect_date(SHIFTED)}" in note for note in check["notes"])


def test_the_forecast_check_of_a_custom_fit_uses_its_interventions(client):
    form = _suggestion_without_interventions(client)
    html = client.post(f"/series/{quote(SHIFTED, safe='/')}/fit", data=form).text
    link = re.search(r'href="([^"]*forecast-check[^"]*)" data-forecast-check', html).group(1).replace("&amp;", "&")
    assert "interventions_shown=true" in link
    dropped = client.get(link + "&fragment=true").text
    kept = client.get(link.replace("&interventions_shown=true", "") + "&fragment=true").text
    when = _defect_date(SHIFTED)
    assert f"level shift at {when}" not in dropped and f"level shift at {when}" in kept
