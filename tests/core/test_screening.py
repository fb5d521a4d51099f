"""Candidate screening keeps the engine's answers, and the fits that decide a ranking are optima.

On a seeded sample of the accuracy batch (tests/core/accuracy_batch.py: 21 processes, one path
each at n = 200) the engine runs with and without screening (``EngineOptions.screening``):

* the suggestion and its confidence are the same, with fewer full fits;
* an order screened out, fitted in full afterwards, trails the leader's rank score by more
  than :data:`app.core.identify.SCREEN_MARGIN`, which is what screening it out assumed;
* the two leading candidates reach the log-likelihood statsmodels' default ``ARIMA.fit``
  reaches on the same order, trend and series (reference library), within 0.01.
"""

from __future__ import annotations

import warnings

import pandas as pd
import pytest
from accuracy_batch import accuracy_batch
from statsmodels.tsa.arima.model import ARIMA
from threadpoolctl import threadpool_limits

from app.core.fitting import fit_candidate
from app.core.identify import SCREEN_MARGIN, EngineOptions, Identification, identify_series
from app.core.ranking import criterion_value
from app.core.transform import apply_transform

SAMPLE_N = 200
LOGLIK_TOLERANCE = 0.01
LEADING = 2


@pytest.fixture(scope="module")
def pairs() -> list[tuple[Identification, Identification]]:
    with threadpool_limits(1):
        return [
            (identify_series(pd.Series(s.values), s.name), identify_series(pd.Series(s.values), s.name, EngineOptions(screening=False)))
            for s in accuracy_batch(SAMPLE_N, 1)
        ]


def _labels(result: Identification) -> list[str]:
    return [c.model.label() for c in result.candidates]


def test_screening_keeps_the_suggestion_and_its_confidence(pairs):
    for screened, full in pairs:
        assert screened.suggested.model == full.suggested.model, screened.prepared.series_id
        assert screened.confidence.level == full.confidence.level, screened.prepared.series_id


def test_screening_saves_full_fits_and_lists_what_it_left_out(pairs):
    screened_fits = sum(len(s.candidates) for s, _ in pairs)
    full_fits = sum(len(f.candidates) for _, f in pairs)
    assert screened_fits < 0.8 * full_fits
    for screened, _ in pairs:
        assert not {m.label() for m in screened.screened_out} & set(_labels(screened))
        assert screened.to_analysis().screened_out == tuple(screened.screened_out)


def test_screened_out_orders_trail_the_leader_by_more_than_the_margin(pairs):
    checked = 0
    with threadpool_limits(1):
        for screened, _ in pairs:
            lead = screened.suggested
            y = apply_transform(screened.prepared.values, screened.transform)
            for model in screened.screened_out:
                if model.differencing_key() != lead.model.differencing_key():
                    continue  # criteria compare only models of the same differencing
                gap = criterion_value(fit_candidate(y, model), screened.criterion) - criterion_value(lead, screened.criterion)
                assert gap > SCREEN_MARGIN, (screened.prepared.series_id, model.label(), gap)
                checked += 1
    assert checked > 0


def test_leading_fits_reach_the_statsmodels_optimum(pairs):
    with threadpool_limits(1), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for screened, _ in pairs:
            y = apply_transform(screened.prepared.values, screened.transform)
            for fit in screened.candidates[:LEADING]:
                reference = ARIMA(y, order=fit.model.order, trend=fit.model.trend).fit()
                assert fit.loglik >= reference.llf - LOGLIK_TOLERANCE, (screened.prepared.series_id, fit.model.label())
