"""Outliers and level shifts (app.core.interventions) against their definitions, statsmodels and
a published example; the detection figures by kind and size on seeded simulations (slow)."""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from accuracy_batch import simulate
from scipy.stats import norm
from scipy.stats import t as t_distribution
from statsmodels.tsa.arima_process import arma2ar
from statsmodels.tsa.statespace.sarimax import SARIMAX

from app.core.fitting import fit_candidate
from app.core.identify import identify_series
from app.core.interventions import (
    _Terms,
    detect_interventions,
    detection_threshold,
    effect_column,
    effect_statistics,
    estimate_jointly,
    identifiable,
    pi_weights,
    residual_response,
    sized_interventions,
)
from app.core.order import Order
from app.core.seasonality import SEASONAL_STRENGTH_THRESHOLD, choose_seasonal_differencing
from app.core.vocabulary import Flag, InterventionKind


def _ar1(rng: np.random.Generator, n: int, phi: float = 0.6) -> np.ndarray:
    return simulate((1, 0, 0), [phi], [], n, rng)


def test_effect_columns_follow_the_definitions():
    # Chen & Liu (1993), §2: AO xi = 1, LS xi = 1/(1 - B), TC xi = 1/(1 - delta B), delta = 0.7.
    assert effect_column(InterventionKind.ADDITIVE, 3, 6).tolist() == [0, 0, 0, 1, 0, 0]
    assert effect_column(InterventionKind.LEVEL_SHIFT, 3, 6).tolist() == [0, 0, 0, 1, 1, 1]
    np.testing.assert_allclose(effect_column(InterventionKind.TEMPORARY_CHANGE, 3, 6), [0, 0, 0, 1, 0.7, 0.49])


def test_pi_weights_with_differencing_match_statsmodels():
    # pi(B) = phi(B) (1 - B) / theta(B): statsmodels' arma2ar of the expanded AR polynomial.
    rng = np.random.default_rng(3)
    y = simulate((1, 1, 1), [0.5], [0.4], 300, rng)
    model = Order.of((1, 1, 1))
    estimate = fit_candidate(y, model).estimate
    expected = arma2ar(np.convolve(estimate.ar_polynomial, [1.0, -1.0]), estimate.ma_polynomial, lags=40)
    np.testing.assert_allclose(pi_weights(estimate, model, 40), expected, atol=1e-12)


def test_statistics_are_least_squares_at_every_start():
    # omega(k) regresses the residuals from k on the response (Chen & Liu 1993, eq. 2.x); with a
    # deterministic column it is the coefficient of the multiple regression (Frisch-Waugh-Lovell).
    rng = np.random.default_rng(5)
    e = rng.standard_normal(60)
    x = residual_response(InterventionKind.LEVEL_SHIFT, 0.6 ** np.arange(60))
    plain = effect_statistics(e, x, scale=1.0)
    for k in (0, 17, 59):
        column = np.r_[np.zeros(k), x[:60 - k]]
        assert plain.size[k] == pytest.approx(column @ e / (column @ column))
        assert plain.tau[k] == pytest.approx(plain.size[k] * np.sqrt(column @ column))
    z = np.full((60, 1), 0.4)
    partialled = effect_statistics(e, x, 1.0, _Terms(z, np.linalg.pinv(z.T @ z)))
    for k in (1, 30, 58):
        column = np.r_[np.zeros(k), x[:60 - k]]
        both = np.linalg.lstsq(np.column_stack([column, z[:, 0]]), e, rcond=None)[0]
        assert partialled.size[k] == pytest.approx(both[0])


def test_threshold_is_the_bonferroni_bound_over_three_kinds():
    # Phi^-1(1 - 0.05 / (2 * 3n)) (Dunn 1961), in the 3.0-4.0 range Chen & Liu (1993, §4) studied.
    for n in (60, 200, 1000):
        assert detection_threshold(n) == pytest.approx(norm.isf(0.05 / (6 * n)))
        # Stage II's: the same tail of Student's t, the variance being estimated (scipy's t).
        assert detection_threshold(n, n - 10) == pytest.approx(t_distribution.isf(0.05 / (6 * n), n - 10))


def test_clean_short_series_keep_no_more_interventions_than_the_family_level():
    # Gaussian IMA(1,1) series of 40 points (theta = -0.5) under their own order: at most the
    # family level of 5% keep an intervention, within twice the simulation's standard error
    # (seeded, 200 series: 0.08). Measured when stage II took Student's t: 4.0%, against 6.5%
    # with the Gaussian bound (the engine, which also searches other orders: 10% against 12.5%).
    rng = np.random.default_rng(41)
    model = Order.of((0, 1, 1))
    kept = 0
    for _ in range(200):
        e = rng.normal(size=41)
        y = np.cumsum(e[1:] - 0.5 * e[:-1])
        kept += bool(detect_interventions(y, model, fit_candidate(y, model).estimate, pd.RangeIndex(40)))
    assert kept <= 16


def test_joint_size_matches_statsmodels_with_the_same_regressor():
    # Stage II is maximum likelihood with the intervention as a regression column: the same
    # model in statsmodels' SARIMAX with the column as exog gives the same estimate.
    rng = np.random.default_rng(11)
    y = _ar1(rng, 160) + 10.0
    y[90:] += 5.0
    model = Order.of((1, 0, 0), None, "c")
    index = pd.RangeIndex(160)
    found = detect_interventions(y, model, fit_candidate(y, model).estimate, index)
    assert [(i.kind, i.position) for i in found] == [(InterventionKind.LEVEL_SHIFT, 90)]
    reference = SARIMAX(y, exog=effect_column(InterventionKind.LEVEL_SHIFT, 90, 160), order=(1, 0, 0), trend="c").fit(disp=False)
    assert found[0].size == pytest.approx(reference.params[1], rel=0.02)
    again = estimate_jointly(y, model, found, np.zeros(0), index)
    assert again[0].size == pytest.approx(found[0].size, rel=1e-6)


def test_a_spike_is_found_where_it_is_and_the_order_survives():
    rng = np.random.default_rng(21)
    y = _ar1(rng, 150)
    y[70] += 6.0
    found = identify_series(pd.Series(y, index=pd.date_range("2024-01-01", periods=150, freq="D")), "spike")
    analysis = found.to_analysis()
    assert [(i.kind, i.timestamp) for i in analysis.interventions] == [(InterventionKind.ADDITIVE, "2024-03-11")]
    assert analysis.interventions[0].size == pytest.approx(6.0, abs=1.5)
    assert analysis.suggested.order.order == (1, 0, 0)
    assert Flag.OUTLIERS in analysis.flags and analysis.confidence != "firm"
    assert any("additive outlier at 2024-03-11" in note for note in analysis.data_notes)



@pytest.mark.parametrize("position", [120, 200])
def test_a_spike_in_a_seasonal_series_does_not_take_its_seasonal_difference(position):
    # Monthly Mauna Loa CO2 (statsmodels' co2 data, the last 20 years) has a seasonal strength of
    # 0.985; one spike of +30 ppm brings the strength of the series as observed to about 0.5,
    # below the 0.64 rule, and the season was lost (D = 0) although the spike was found. With
    # the spike taken out the seasonal difference is decided again (Chen & Liu 1993 adjust the
    # series before identifying it again), and the suggestion is that of the clean series.
    weekly = sm.datasets.co2.load_pandas().data["co2"]
    clean = weekly.resample("MS").mean().ffill().iloc[-240:]
    spiked = clean.copy()
    spiked.iloc[position] += 30.0
    expected = identify_series(clean, "co2").to_analysis()
    assert choose_seasonal_differencing(spiked.to_numpy(), 12).D == 0  # the series as observed hides its season
    found = identify_series(spiked, "co2")
    assert found.seasonal.differencing is not None and found.seasonal.differencing.strength > SEASONAL_STRENGTH_THRESHOLD
    analysis = found.to_analysis()
    assert [(i.kind, i.timestamp) for i in analysis.interventions] == [(InterventionKind.ADDITIVE, str(spiked.index[position].date()))]
    assert analysis.suggested.order == expected.suggested.order and analysis.suggested.order.seasonal_order[1] == 1

@pytest.mark.parametrize("position", [0, 5, 12])
def test_a_spike_in_the_points_the_differencing_uses_up_is_found_where_it_is(position):
    # Under a seasonal difference an outlier in the first season reaches the differences only
    # a season later (w_{T+s} = y_{T+s} - y_T). Chen & Liu's trace pi(B) xi(B) I(T) (1993, §2)
    # is defined for every T of the sample; searched from the first difference on, the spike
    # was read as an outlier of the opposite sign a season after it. Monthly Mauna Loa CO2
    # (statsmodels' co2 data, the last 20 years) under the airline model, a spike of +3 ppm.
    weekly = sm.datasets.co2.load_pandas().data["co2"]
    spiked = weekly.resample("MS").mean().ffill().iloc[-240:]
    spiked.iloc[position] += 3.0
    y, model = spiked.to_numpy(), Order.of((0, 1, 1), (0, 1, 1, 12))
    found = detect_interventions(y, model, fit_candidate(y, model).estimate, spiked.index)
    assert [(i.kind, i.position) for i in found] == [(InterventionKind.ADDITIVE, position)]
    assert found[0].size == pytest.approx(3.0, abs=0.5)


def test_the_size_reported_is_that_of_the_joint_fit_whose_t_it_is_shown_with():
    # A shift sized under the stationary alternative (d = 0) and reported beside the t of the
    # joint fit under the differenced leader: "size +1.70, t +5.56" where that fit's size was
    # +4.44 (a review found 40% of such sizes more than a standard error off). IMA(1,1) with a
    # shift of 4 innovation SDs at 60 of 120 points, seeded; each size within half an SE of a
    # joint fit of the reported set under the suggested order (Chen & Liu 1993, §3).
    rng = np.random.default_rng(59)
    checked = 0
    for _ in range(12):
        e = rng.normal(size=121)
        y = np.cumsum(e[1:] - 0.5 * e[:-1]) + 4.0 * effect_column(InterventionKind.LEVEL_SHIFT, 60, 120)
        found = identify_series(pd.Series(y), "ima")
        if not found.interventions:
            continue
        joint = sized_interventions(y, found.suggested.model, [(i.position, i.kind) for i in found.interventions], pd.RangeIndex(120))
        for shown, fitted in zip(found.interventions, joint):
            assert shown.t_stat == pytest.approx(fitted.t_stat, rel=1e-3, abs=0.05)
            assert abs(shown.size - fitted.size) <= 0.5 * abs(fitted.size / fitted.t_stat)
            checked += 1
    assert checked >= 6


def test_the_nile_level_shift_is_found():
    # The Nile's annual flow at Aswan, 1871-1970, dropped around 1898-1899 (Cobb 1978; Balke 1993
    # dates the shift in 1899). The tests disagree on d; the shift is found under the stationary
    # alternative and the series identified again without it is white noise around two levels.
    data = sm.datasets.nile.load_pandas().data
    y = pd.Series(data["volume"].to_numpy(dtype=float), index=pd.date_range("1871", periods=len(data), freq="YS"))
    found = identify_series(y, "nile")
    analysis = found.to_analysis()
    shifts = [i for i in analysis.interventions if i.kind is InterventionKind.LEVEL_SHIFT]
    assert [i.timestamp[:4] for i in shifts] == ["1899"]
    assert shifts[0].size < -150  # a drop of about a quarter of the flow (Cobb 1978)
    assert analysis.suggested.order.d == 0
    assert Flag.LEVEL_SHIFT in analysis.flags
    # The transforms were weighed under the leader before the shift was found (ARIMA(0,1,1));
    # the words must not leave the reviewer thinking they were weighed under the suggestion.
    assert "Under ARIMA(0,1,1)" in " ".join(found.transform.explanation)
    assert found.transform.explanation[-1].startswith("These comparisons were made before the interventions were sought")
    assert "the leader is ARIMA(0,0,0) with a mean" in found.transform.explanation[-1]


def test_a_clean_series_has_none():
    rng = np.random.default_rng(2)
    y = _ar1(rng, 200)
    model = Order.of((1, 0, 0), None, "c")
    assert detect_interventions(y, model, fit_candidate(y, model).estimate, pd.RangeIndex(200)) == []


@pytest.mark.slow
def test_detection_rates_by_kind_and_size():
    """Seeded AR(1) series (phi = 0.6, n = 200) through the whole engine. Bars: a 5 sigma AO found
    at its exact time in >= 90%, a 4 sigma LS within one step in >= 80%, at most 10% of clean
    series with any detection, and the order recovered on contaminated series at >= 0.8 times
    the clean rate. Printed as the README quotes them."""
    rng = np.random.default_rng(20270401)
    runs, n = 40, 200
    index = pd.date_range("2023-01-01", periods=n, freq="D")
    cases = {"clean": 0.0, "AO 5 sigma": 5.0, "AO 3.5 sigma": 3.5, "LS 4 sigma": 4.0, "LS 3 sigma": 3.0, "TC 5 sigma": 5.0}
    found_rate, order_rate = {}, {}
    for case, size in cases.items():
        hits = right = 0
        for _ in range(runs):
            y = _ar1(rng, n)
            at = int(rng.integers(n // 5, 4 * n // 5))
            kind = {"AO": InterventionKind.ADDITIVE, "LS": InterventionKind.LEVEL_SHIFT,
                    "TC": InterventionKind.TEMPORARY_CHANGE}.get(case[:2])
            if kind is not None:
                y = y + size * effect_column(kind, at, n)
            analysis = identify_series(pd.Series(y, index=index), case).to_analysis()
            if kind is None:
                hits += bool(analysis.interventions)
            else:
                reach = 0 if kind is InterventionKind.ADDITIVE else 1
                hits += any(i.kind is kind and abs(i.position - at) <= reach for i in analysis.interventions)
            right += analysis.suggested.order.order == (1, 0, 0) and analysis.suggested.order.seasonal_order[:3] == (0, 0, 0)
        found_rate[case], order_rate[case] = hits / runs, right / runs
    for case in cases:
        label = "false detections" if case == "clean" else "found"
        print(f"{case:14s} {label} {found_rate[case]:.2f}  order (1,0,0) {order_rate[case]:.2f}")
    assert found_rate["clean"] <= 0.10
    assert found_rate["AO 5 sigma"] >= 0.90
    assert found_rate["LS 4 sigma"] >= 0.80
    for case in ("AO 5 sigma", "LS 4 sigma"):
        assert order_rate[case] >= 0.8 * order_rate["clean"]


def _ima(rng: np.random.Generator, n: int, theta: float = -0.5) -> np.ndarray:
    e = rng.normal(size=n + 1)
    return 50.0 + np.cumsum(e[1:] + theta * e[:-1])


@pytest.mark.slow
def test_the_nile_level_shift_is_found_where_a_trend_would_absorb_it():
    # The Nile to 1954 (84 years): the tests disagree on d, and the stationary leader took a
    # linear trend, ARIMA(1,0,0) with a mean and a trend, whose AR root absorbed the 1899 drop
    # so that no shift stood out. Perron (1989): a shift read as a trend; searched without the
    # trend, the drop is found (Cobb 1978) and the series is two levels of white noise.
    data = sm.datasets.nile.load_pandas().data
    y = pd.Series(data["volume"].to_numpy(dtype=float), index=pd.date_range("1871", periods=len(data), freq="YS"))
    found = identify_series(y[:84], "nile to 1954")
    assert [(i.kind, i.timestamp[:4]) for i in found.interventions] == [(InterventionKind.LEVEL_SHIFT, "1899")]
    assert found.suggested.model.full_label() == "ARIMA(0,0,0) with a mean"


def test_a_shift_read_under_the_stationary_alternative_must_predict_better():
    """When the unit-root tests disagree the stationary alternative is searched for a level
    shift (Perron 1989). Fitted to an integrated series, a stationary model reads its wandering
    as shifts: before the shift had to predict the levels better than the differenced leader
    (Yao 1988's count of its parameters), clean IMA(1,1) series (theta = -0.5, n = 100) came out
    with an intervention in 21% and without their difference in 31% (300 series); the bars
    here sit between that and the 7% and 16% now. A true shift still takes the difference away."""
    rng = np.random.default_rng(20261205)
    clean = [identify_series(pd.Series(_ima(rng, 100)), "ima") for _ in range(120)]
    assert np.mean([bool(r.interventions) for r in clean]) <= 0.14
    assert np.mean([r.suggested.model.d == 0 for r in clean]) <= 0.24
    shifted = []
    for _ in range(40):
        y = _ar1(rng, 100, 0.5) + 5.0 * effect_column(InterventionKind.LEVEL_SHIFT, 50, 100)
        shifted.append(identify_series(pd.Series(y), "ar-shift"))
    assert np.mean([r.suggested.model.d == 0 for r in shifted]) >= 0.75


def test_a_level_shift_right_after_a_gap_is_found_by_the_engine_not_read_as_a_unit_root():
    # The same series as above, through the whole engine: the tests read the gap and the shift
    # as a unit root (Perron 1989) and took d = 1 in 19 of 20; the stationary alternative is
    # now searched for a shift whatever the tests said, and across the gap the two compete on
    # their level errors (app.core.ranking.level_errors).
    rng = np.random.default_rng(65)
    found = 0
    for _ in range(20):
        y = 10.0 + _ar1(rng, 144)
        y[60:65] = np.nan
        y += 4.0 * effect_column(InterventionKind.LEVEL_SHIFT, 65, 144)
        result = identify_series(pd.Series(y, index=pd.date_range("2000-01-01", periods=144, freq="D")), "shift")
        found += result.suggested.model.d == 0 and any(
            i.kind is InterventionKind.LEVEL_SHIFT and abs(i.position - 65) <= 1 for i in result.interventions)
    assert found >= 16


def _spike_between_two_gaps() -> pd.Series:
    """A daily random walk with a spike on a point whose neighbours are both missing: once
    differenced, no observed difference reaches that point."""
    rng = np.random.default_rng(1)
    y = np.cumsum(rng.standard_normal(200)) + 50
    y[100] += 15
    y[[99, 101]] = np.nan
    return pd.Series(y, index=pd.date_range("2020-01-01", periods=200, freq="D"))


@pytest.mark.parametrize(("model", "placed", "words"), [
    (Order.of((1, 0, 0), None, "c"), [(0, InterventionKind.LEVEL_SHIFT)], "level shift at 2020-01-01 has the same effect on "
     "ARIMA(1,0,0) as the mean or drift"),
    (Order.of((1, 0, 0), None, "c"), [(119, InterventionKind.ADDITIVE), (119, InterventionKind.TEMPORARY_CHANGE)],
     "temporary change at 2020-04-29 has the same effect on ARIMA(1,0,0) as the additive outlier at 2020-04-29"),
    (Order.of((0, 1, 1)), [(0, InterventionKind.ADDITIVE), (1, InterventionKind.LEVEL_SHIFT)],
     "level shift at 2020-01-02 has the same effect on ARIMA(0,1,1) as the additive outlier at 2020-01-01"),
])
def test_interventions_whose_effects_coincide_are_refused_in_words(model, placed, words):
    # Their columns are linearly dependent once the series is differenced (a shift at the first
    # point is the mean), so no fit can size them apart: it ended in "Matrix is singular".
    y = 10 + np.random.default_rng(1).normal(size=120)
    with pytest.raises(ValueError, match=re.escape(words)):
        sized_interventions(y, model, placed, pd.date_range("2020-01-01", periods=120, freq="D"))


def test_an_effect_no_observed_difference_reaches_is_not_identifiable():
    y = _spike_between_two_gaps().to_numpy()
    walk = Order(0, 1, 0)
    assert not identifiable(y, walk, InterventionKind.ADDITIVE, 100)
    assert not identifiable(y, walk, InterventionKind.LEVEL_SHIFT, 100)  # differenced, a step is a pulse there
    assert identifiable(y, walk, InterventionKind.TEMPORARY_CHANGE, 100)  # its decay reaches the points after the gap
    assert identifiable(y, Order(0, 0, 0, trend="c"), InterventionKind.ADDITIVE, 100)  # observed in levels
    with pytest.raises(ValueError, match="reaches no observed point"):
        sized_interventions(y, walk, [(100, InterventionKind.ADDITIVE)], _spike_between_two_gaps().index)


def test_interventions_the_gaps_make_inestimable_are_dropped_not_raised():
    # Stage I on the bridged series found two temporary changes beside the gaps; their
    # differenced columns are nearly collinear on the observed points and the joint fit failed
    # with a singular matrix, which ended the whole identification.
    found = identify_series(_spike_between_two_gaps(), "lone-spike")
    assert all(identifiable(_spike_between_two_gaps().to_numpy(), found.suggested.model, i.kind, i.position)
               for i in found.interventions)


def test_the_note_names_the_scale_the_sizes_are_on():
    # US real GDP (statsmodels' macrodata) is identified on a Box-Cox scale with a level shift
    # found there: a size of +2.35 read as billions of dollars misled a new user.
    data = sm.datasets.macrodata.load_pandas().data
    gdp = pd.Series(data["realgdp"].to_numpy(), index=pd.date_range("1959-01-01", periods=len(data), freq="QS"))
    found = identify_series(gdp, "us/gdp")
    [note] = [n for n in found.data_notes if n.startswith("Interventions found")]
    assert found.transform.kind != "none" and f"Their sizes are on the {found.transform.name()} scale." in note


def test_a_level_shift_right_after_a_gap_is_found_where_it_begins():
    # AR(1) with a mean, a shift of 4 innovation SDs at 65 just after five missing points: on the
    # bridged series stage I read a ramp and found it in none of 30 series (a statistics review);
    # offered to stage II, the exact likelihood sizes it (Chen & Liu 1993, §3). Seeded, 20 series
    # under their own order: found at 65 in most, and nothing kept on the same series unshifted.
    rng = np.random.default_rng(65)
    model = Order.of((1, 0, 0), None, "c")
    shifted_found = clean_kept = 0
    for _ in range(20):
        base = 10.0 + _ar1(rng, 144)
        base[60:65] = np.nan
        shifted = base + 4.0 * effect_column(InterventionKind.LEVEL_SHIFT, 65, 144)
        found = detect_interventions(shifted, model, fit_candidate(shifted, model).estimate, pd.RangeIndex(144))
        shifted_found += any((i.kind, i.position) == (InterventionKind.LEVEL_SHIFT, 65) for i in found)
        clean_kept += bool(detect_interventions(base, model, fit_candidate(base, model).estimate, pd.RangeIndex(144)))
    assert shifted_found >= 14 and clean_kept <= 2
