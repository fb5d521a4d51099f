"""The typed analysis result: orders, candidates, the JSON round trip, and analyses stored before
the schema had a version."""

from __future__ import annotations

import json
import math
from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from statsmodels.tsa.arima_process import ArmaProcess

from app.core.analysis import SCHEMA_VERSION, Analysis, aicc_deltas
from app.core.errors import OrderError
from app.core.identify import identify_series
from app.core.order import Order, validate_order
from app.core.vocabulary import Confidence

RESULTS = Path(__file__).parent / "results"


@pytest.fixture(scope="module")
def analysis_v1() -> dict:
    """An analysis stored before schema versions (written by results/make_analysis_v1.py)."""
    return json.loads((RESULTS / "analysis_v1.json").read_text())


@pytest.fixture(scope="module")
def analysis() -> Analysis:
    rng = np.random.default_rng(7)
    values = ArmaProcess([1, -0.6]).generate_sample(150, burnin=100, distrvs=rng.standard_normal)
    return identify_series(pd.Series(values), "ar1").to_analysis()


def test_order_label_names_seasonal_terms_only_when_there_are_some():
    assert Order(1, 1, 1, 0, 1, 1, 12).label() == "ARIMA(1,1,1)(0,1,1)12"
    assert Order(2, 0, 0).label() == "ARIMA(2,0,0)"
    # A period without seasonal terms is no seasonal model: it is dropped, not printed.
    assert Order.of((1, 0, 0), (0, 0, 0, 12)) == Order(1, 0, 0)


@pytest.mark.parametrize("text", ["ARIMA(0,1,1)(0,1,1)12", "ARIMA(3,0,2)", "ARIMA(1,0,0)(2,0,0)7"])
def test_order_label_reads_back(text):
    assert Order.from_label(text).label() == text


def test_order_from_label_refuses_other_text():
    with pytest.raises(OrderError, match="not an order label"):
        Order.from_label("AR(1)")


def test_differencing_key_counts_the_period_only_with_seasonal_differencing():
    assert Order(1, 1, 0, 0, 1, 1, 12).differencing_key() == (1, 1, 12)
    assert Order(1, 1, 0, 0, 1, 2, 12).differencing_key() == (1, 1, 12)
    assert Order(1, 0, 0, 1, 0, 0, 12).differencing_key() == Order(2, 0, 1).differencing_key() == (0, 0, 0)
    assert Order(1, 1, 0).differencing_key() != Order(1, 0, 0).differencing_key()


def test_contains_means_the_same_differencing_and_more_coefficients():
    assert Order(2, 1, 1).contains(Order(1, 1, 0))
    assert Order(1, 0, 0, 1, 0, 1, 12).contains(Order(1, 0, 0))
    assert not Order(1, 1, 0).contains(Order(1, 1, 0))
    assert not Order(2, 1, 1).contains(Order(1, 0, 0))


def test_order_json_round_trip():
    order = Order(1, 1, 2, 0, 1, 1, 12, trend="t")
    assert Order.from_json(json.loads(json.dumps(order.to_json()))) == order


@pytest.mark.parametrize("order, seasonal, words", [
    ((1, 3, 0), None, "d = 3 is outside 0..2"),
    ((1, 0, 0), (1, 0, 0, 1), "s = 1 must be 0"),
    ((1, 0, 0), (1, 0, 0, 0), "needs a seasonal period"),
    ((1.5, 0, 0), None, "whole numbers"),
])
def test_validate_order_names_the_bad_value(order, seasonal, words):
    with pytest.raises(OrderError, match=words.replace("(", r"\(").replace(")", r"\)")):
        validate_order(order, seasonal)


def test_analysis_json_round_trip_is_exact(analysis):
    text = json.dumps(analysis.to_dict(), allow_nan=False)
    again = Analysis.from_dict(json.loads(text))
    assert again == analysis
    assert json.loads(text)["schema_version"] == SCHEMA_VERSION


def test_analysis_reads_a_result_stored_before_schema_versions(analysis_v1):
    analysis = Analysis.from_dict(analysis_v1)
    assert analysis.series_id == "shop-1/flour"
    assert analysis.suggested.order == Order(0, 1, 1, 0, 1, 1, 12, trend="n")
    assert analysis.confidence in set(Confidence)
    assert [c.label for c in analysis.candidates] == [c["label"] for c in analysis_v1["candidates"]]
    # Version 1 kept the screened-out orders as labels; they come back as orders.
    assert [o.label() for o in analysis.screened_out] == analysis_v1["screened_out"]
    assert analysis.d == analysis_v1["d"] and analysis.D == analysis_v1["D"] and analysis.period == analysis_v1["period"]
    # Written again, it is a current-version analysis that reads back unchanged.
    assert Analysis.from_dict(json.loads(json.dumps(analysis.to_dict()))) == analysis


def test_delta_aicc_compares_seasonal_candidates_that_differ_only_in_q(analysis_v1):
    # Criteria compare models of the same differenced series (Burnham & Anderson 2002, §2.6;
    # the likelihood of a differenced model is that of the differences): the reference is the
    # smallest AICc among candidates with the same d, D and s, whatever P and Q.
    analysis = Analysis.from_dict(analysis_v1)
    by_label = {c.label: c for c in analysis.candidates}
    same = [c["aicc"] for c in analysis_v1["candidates"] if c["order"][1] == 1 and c["seasonal_order"][1] == 1]
    q2 = by_label["ARIMA(0,1,1)(0,1,2)12"]
    assert q2.delta_aicc == pytest.approx(q2.aicc - min(same), abs=1e-12)
    assert q2.delta_aicc > 0  # not 0.0, as when Q was part of the group
    other_d = [c["aicc"] for c in analysis_v1["candidates"] if c["order"][1] == 0]
    assert by_label["ARIMA(1,0,0)(0,1,1)12"].delta_aicc == pytest.approx(
        by_label["ARIMA(1,0,0)(0,1,1)12"].aicc - min(other_d), abs=1e-12)
    assert min(d for d in aicc_deltas(analysis.candidates) if d is not None) == 0.0


def test_model_for_takes_the_term_of_the_order_or_of_its_differencing(analysis_v1):
    base = Analysis.from_dict(analysis_v1)
    first, second = base.candidates[:2]
    analysis = replace(base, candidates=(replace(first, order=Order(1, 1, 0, trend="t")),
                                         replace(second, order=Order(2, 0, 0, trend="ct"))))
    model, match = analysis.model_for([1, 1, 0], [0, 0, 0, 0])
    assert (model.trend, match) == ("t", analysis.candidates[0])
    assert analysis.model_for([0, 1, 2], [0, 0, 0, 0]) == (validate_order((0, 1, 2), trend="t"), None)
    assert analysis.model_for([1, 0, 1], None)[0].trend == "ct"
    # No candidate with this differencing: the default term (none once differenced).
    assert analysis.model_for([0, 1, 1], [0, 1, 1, 12])[0].trend == "n"


def test_model_for_gives_a_custom_order_the_term_of_its_differencing(analysis_v1):
    analysis = Analysis.from_dict(analysis_v1)
    model, candidate = analysis.model_for((0, 1, 1), (0, 1, 1, 12))
    assert candidate is analysis.suggested and model == analysis.suggested.order
    custom, none = analysis.model_for((3, 1, 3), (0, 1, 1, 12))
    assert none is None and custom.trend == analysis.suggested.order.trend


def test_infinite_criteria_survive_json(analysis):
    data = analysis.to_dict()
    data["candidates"][0]["aicc"] = None  # JSON has no infinity: an impossible AICc is written as null
    assert math.isinf(Analysis.from_dict(data).suggested.aicc)
