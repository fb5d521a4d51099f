"""The review page in a planner's words: the sampling frequency in plain English, dates without a
midnight time, a KPSS p-value clipped by statsmodels read as the bound it is, and the comparisons
of the scales labelled, their repeated lines said once.

Data: the invented demo series ``hearthloaf/chain/flour-kg`` (monthly, identified on the log scale
after two comparisons of the scales), analysed by the engine here.
"""

from __future__ import annotations

import html
import re
from dataclasses import replace
from urllib.parse import quote

import pandas as pd
import pytest
from fastapi.testclient import TestClient
from web_client import TEST_HOSTS
from web_portfolio import build_database, demo_subset_csv

from app.config import Settings
from app.core.analysis import Analysis, UnitRootTest
from app.web import review
from app.web.main import create_app
from app.web.review import COMPARISON_START, span_words, transform_lines

FLOUR = "hearthloaf/chain/flour-kg"


@pytest.fixture(scope="module")
def flour(tmp_path_factory) -> tuple[Settings, Analysis]:
    folder = tmp_path_factory.mktemp("review-words")
    results = build_database(folder / "flour.db", demo_subset_csv(folder / "flour.csv", [FLOUR]))
    return Settings(db_path=folder / "flour.db", analysis_workers=1, allowed_hosts=TEST_HOSTS), results[FLOUR]


@pytest.fixture(scope="module")
def flour_page(flour) -> str:
    with TestClient(create_app(flour[0])) as client:
        response = client.get(f"/series/{quote(FLOUR, safe='/')}")
    assert response.status_code == 200
    return html.unescape(response.text)


def test_the_heading_names_the_frequency_in_words_and_the_span_in_dates(flour_page, flour):
    analysis = flour[1]
    assert (analysis.freq, analysis.start, analysis.end) == ("MS", "2010-01-01 00:00:00", "2024-12-01 00:00:00")
    assert "180 points · monthly · 2010-01-01 → 2024-12-01 ·" in flour_page
    assert "Seasonal period 12 from the sampling frequency: monthly." in flour_page
    assert "(MS)" not in flour_page and "00:00:00" not in flour_page


def test_an_hourly_span_keeps_its_midnight_time(flour):
    hours = pd.date_range("2024-12-11", periods=504, freq="h")
    hourly = replace(flour[1], freq="h", start=str(hours[0]), end=str(hours[-1]))
    assert span_words(hourly, hours) == ("2024-12-11 00:00", "2024-12-31 23:00")


def test_a_kpss_p_value_at_the_end_of_its_table_reads_as_a_bound(flour_page, flour):
    kpss = next(t for t in flour[1].differencing.tests if t.name == "KPSS")
    assert kpss.p_value == 0.1 and not kpss.rejects  # statsmodels' highest tabulated p-value: clipped
    row = re.search(r"<tr><td>KPSS .*?</tr>", flour_page).group(0)
    assert '<td class="num">> 0.10</td>' in row and "0.100" not in row
    rows = review.test_rows((UnitRootTest("KPSS", "c", "levels", 0.9, 0.01, 4, True, "stationary"),
                             UnitRootTest("ADF", "c", "levels", -1.0, 0.1, 4, False, "unit root"),
                             UnitRootTest("ADF", "c", "levels", float("nan"), float("nan"), 0, False, "unit root")))
    assert [r["p_text"] for r in rows] == ["< 0.01", "0.100", "—"]


def test_the_comparisons_of_the_scales_are_labelled_and_guerreros_lambda_said_once(flour_page, flour):
    explanation = flour[1].transform.explanation
    openings = [line for line in explanation if line.startswith(COMPARISON_START)]
    assert len(openings) == 2 and openings[0] == openings[1]  # the engine repeats the line before its second comparison
    story = flour_page[flour_page.index("<h3>How it got there</h3>"):flour_page.index("<h3>Differencing tests</h3>")]
    items = re.findall(r"<li>(.*?)</li>", story, re.S)
    labelled = [item for item in items if item.startswith("<strong>")]
    assert [re.match(r"<strong>(.*?)</strong>", item).group(1) for item in labelled] == ["Comparison 1 of 2:", "Comparison 2 of 2:"]
    assert labelled[0] == f"<strong>Comparison 1 of 2:</strong> {openings[0]}"
    assert labelled[1].startswith("<strong>Comparison 2 of 2:</strong> Under ARIMA(")
    assert story.count(openings[0]) == 1
    assert len(items) == len(explanation) - 1 + len(flour[1].differencing.explanation)


def test_a_changed_lambda_is_said_again_in_its_comparison():
    lines = ["Guerrero's lambda 0.47 rounds to 0.5.", "Under A, first ...", "The search starts on the log scale.",
             "Guerrero's lambda 0.47 rounds to 0.5.", "Under B, second ...",
             "With the interventions found on the log scale taken out, the transforms were weighed again:",
             "Guerrero's lambda 1.77 rounds to 1.8, weighed as well.", "Under B, third ..."]
    assert transform_lines(lines) == [
        {"label": "Comparison 1 of 3", "text": lines[0]}, {"label": "", "text": lines[1]}, {"label": "", "text": lines[2]},
        {"label": "Comparison 2 of 3", "text": lines[4]}, {"label": "", "text": lines[5]},
        {"label": "Comparison 3 of 3", "text": lines[6]}, {"label": "", "text": lines[7]},
    ]
    one = ["The series has values <= 0 (smallest -1): no log or Box-Cox transform."]
    assert transform_lines(one) == [{"label": "", "text": one[0]}]
