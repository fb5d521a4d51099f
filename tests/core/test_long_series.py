"""The long-series rule of app.core.identify: a series longer than ``LONG_SERIES`` points is
searched on its most recent ``SEARCH_WINDOW`` points and its best candidates are refitted on the
whole series.

The rule's limits are lowered here (400 points searched on the last 200) so that the checks run
in seconds; the rule does not depend on their values. Sources: statsmodels ``ARIMA`` (reference
library) for the whole-series fits; the additive outlier is found by the procedure of Chen & Liu
(1993) that tests/core/test_interventions.py checks.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest
from statsmodels.tsa.arima.model import ARIMA
from statsmodels.tsa.arima_process import ArmaProcess

from app.core import identify
from app.core.fitting import difference
from app.core.identify import identify_series
from app.core.interventions import adjusted
from app.core.prepare import prepare_series
from app.core.transform import apply_transform
from app.core.vocabulary import InterventionKind

N, LONG, WINDOW = 400, 300, 200
SPIKE_AT, SPIKE = 350, 8.0


def _ar1_with_spike() -> pd.Series:
    """AR(1), phi = 0.6, unit innovations, mean 50, n = 400 days; an additive outlier of 8 at day 350."""
    rng = np.random.default_rng(20261204)
    y = 50 + ArmaProcess([1, -0.6], [1]).generate_sample(N, distrvs=rng.standard_normal, burnin=200)
    y[SPIKE_AT] += SPIKE
    return pd.Series(y, index=pd.date_range("2020-01-01", periods=N, freq="D"))


@pytest.fixture(scope="module")
def long_rule():
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(identify, "LONG_SERIES", LONG)
        patch.setattr(identify, "SEARCH_WINDOW", WINDOW)
        series = _ar1_with_spike()
        yield series, identify_series(series, "dock-sensor", identify.EngineOptions(period=None))


def test_the_search_reads_the_recent_stretch_and_says_so(long_rule):
    _, found = long_rule
    analysis = found.to_analysis()
    best = found.suggested.model
    assert analysis.n == N and analysis.start == "2020-01-01 00:00:00"
    assert len(analysis.identified_on) == WINDOW - best.lost_to_differencing
    assert analysis.identified_label.endswith(f"last {WINDOW} points")
    note = analysis.data_notes[0]
    assert note.startswith(f"Long series ({N} points, more than {LONG})") and f"most recent {WINDOW} points" in note
    assert "refitted on the whole series" in note
    # The transforms were weighed on the stretch, under the leader of the first search (the
    # interventions found later may lead to another d), and the words number its points in the
    # whole series.
    weighed = next(w for w in analysis.transform.explanation if "log-likelihoods of the original data" in w)
    lost = int(re.match(r"Under ARIMA\(\d+,(\d+),\d+\),", weighed).group(1))  # non-seasonal here
    assert f"observations {N - WINDOW + 1 + lost}-{N})" in weighed


def test_an_outlier_in_the_stretch_is_placed_in_the_whole_series(long_rule):
    series, found = long_rule
    spikes = [i for i in found.interventions if i.kind is InterventionKind.ADDITIVE]
    assert [i.position for i in spikes] == [SPIKE_AT]
    assert spikes[0].timestamp == "2020-12-16"
    assert series.index[SPIKE_AT] == pd.Timestamp(spikes[0].timestamp)


def test_the_candidates_are_fitted_on_the_whole_series_at_the_statsmodels_optimum(long_rule):
    # Every ranked candidate is a fit of the whole series (the outlier taken out at its size):
    # its residuals span the whole differenced series and its maximised log-likelihood is the
    # one statsmodels ARIMA reaches on the same data (within 0.01, the engine's tolerance).
    series, found = long_rule
    y = adjusted(apply_transform(series.to_numpy(), found.transform), found.interventions)
    assert 1 <= len(found.candidates) <= identify.REFITTED
    for fit in found.candidates:
        model = fit.model
        assert fit.residuals.size == difference(y, model).size == N - model.lost_to_differencing
        reference = ARIMA(y, order=model.order, seasonal_order=model.seasonal_order, trend=model.trend).fit()
        assert fit.loglik == pytest.approx(reference.llf, abs=0.01) or fit.loglik > reference.llf


def test_a_series_at_the_limit_is_identified_whole(monkeypatch):
    monkeypatch.setattr(identify, "LONG_SERIES", N)
    monkeypatch.setattr(identify, "SEARCH_WINDOW", WINDOW)
    found = identify_series(_ar1_with_spike(), "dock-sensor", identify.EngineOptions(period=None))
    assert not any(note.startswith("Long series") for note in found.data_notes)
    assert len(found.identified_on) == N - found.suggested.model.lost_to_differencing


def test_the_recent_stretch_starts_on_an_observed_point_and_counts_its_own_gaps():
    values = pd.Series(np.sin(np.arange(60.0)), index=pd.date_range("2021-01-01", periods=60, freq="D"))
    values.iloc[[5, 38, 39, 45, 46, 47, 48, 49]] = np.nan  # a gap of 2 where the stretch would start, a long one after
    prepared = prepare_series(values, "s")
    recent, start = prepared.recent(22)
    assert start == 40 and recent.n == 20 and recent.index[0] == pd.Timestamp("2021-02-10")
    assert (recent.gaps_filled, recent.long_gaps) == (5, 1) and (prepared.gaps_filled, prepared.long_gaps) == (8, 1)
    assert np.array_equal(recent.values, prepared.values[40:], equal_nan=True)


def test_a_value_below_zero_before_the_stretch_rules_out_a_transform(monkeypatch):
    # The transform chosen on the recent stretch is applied to the whole series, so a value
    # <= 0 in the older part rules out the log and Box-Cox as one in the stretch does (the
    # stretch alone would take the log here: multiplicative noise, positive recent values).
    monkeypatch.setattr(identify, "LONG_SERIES", LONG)
    monkeypatch.setattr(identify, "SEARCH_WINDOW", WINDOW)
    rng = np.random.default_rng(35)
    y = 100 * np.exp(np.cumsum(0.2 * rng.standard_normal(N)))
    series = pd.Series(y, index=pd.date_range("2020-01-01", periods=N, freq="D"))
    positive = identify_series(series, "positive", identify.EngineOptions(period=None))
    series.iloc[5] = -1.0
    found = identify_series(series, "one below zero", identify.EngineOptions(period=None))
    assert positive.transform.kind == "log", positive.transform.explanation
    assert found.transform.kind == "none"
    assert "The series has values <= 0 (smallest -1): no log or Box-Cox transform." in found.transform.explanation
