"""The rules of ``firm`` that concern rivals nesting the suggestion and the differencing alternative.

Check values: the chi-square upper 5% point for one degree of freedom is 3.841 and for two
5.991 (any chi-square table); Wilks (1938) for the likelihood-ratio test; the Dickey-Fuller
normalised-bias 5% point with a mean, about -14.1 (Fuller 1976, Table 8.5.1, from memory); the
power of the likelihood-ratio test against scipy's noncentral chi-square.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd
import pytest
from scipy.stats import chi2, ncx2

from app.core.confidence import (
    MIN_DIFFERENCED_LENGTH,
    MIN_FIRM_LENGTH,
    NESTED_LEVEL_LONG,
    NESTED_LEVEL_SHORT,
    SEASONAL_MA_BOUNDARY,
    largest_real_ar_root,
    nested_level,
    score_confidence,
    seasonal_ma_modulus,
    short_series_doubt,
    unit_root_doubt,
    weak_term_power,
)
from app.core.fitting import CandidateFit, fit_candidate
from app.core.likelihood import ArmaSpec
from app.core.order import Order
from app.core.ranking import (
    common_level_bic,
    final_window,
    level_errors,
    likelihood_ratio_p,
    margin_to_rival,
    rank_across_differencing,
    strongest_nesting_rival,
)
from app.core.vocabulary import Confidence


@pytest.fixture(scope="module")
def noise() -> np.ndarray:
    return 10.0 + np.random.default_rng(20270316).standard_normal(300)


@pytest.fixture(scope="module")
def fits(noise) -> dict[str, CandidateFit]:
    """White noise with a mean, the same with a trend, and AR(1) with a mean, fitted to white noise."""
    wn = fit_candidate(noise, Order(0, 0, 0, trend="c"))
    return {
        "wn": wn,
        "wn_trend": fit_candidate(noise, Order(0, 0, 0, trend="ct"), [wn]),
        "ar1": fit_candidate(noise, Order(1, 0, 0, trend="c"), [wn]),
    }


def _with_gain(fit: CandidateFit, lead: CandidateFit, statistic: float) -> CandidateFit:
    """``fit`` with its log-likelihood set so that ``2 (l_fit - l_lead) = statistic``."""
    return replace(fit, loglik=lead.loglik + statistic / 2)


def _ar(fit: CandidateFit, phi: list[float], nobs: int) -> CandidateFit:
    """``fit`` as an AR(len(phi)) with those coefficients, fitted on ``nobs`` observations."""
    assert fit.estimate is not None
    estimate = replace(fit.estimate, spec=ArmaSpec(p=len(phi)), coefficients=np.array(phi, dtype=float))
    return replace(fit, model=Order(len(phi), 0, 0, trend="c"), nobs=nobs, estimate=estimate)


@pytest.mark.parametrize("outer, inner, expected", [
    (Order(2, 0, 0, trend="c"), Order(1, 0, 0, trend="c"), True),
    (Order(1, 0, 1, trend="c"), Order(1, 0, 0, trend="c"), True),
    (Order(1, 0, 0, trend="ct"), Order(1, 0, 0, trend="c"), True),
    (Order(0, 1, 1, trend="t"), Order(0, 1, 0, trend="n"), True),
    (Order(2, 0, 0, trend="c"), Order(1, 0, 0, trend="ct"), False),
    (Order(0, 0, 1, trend="c"), Order(1, 0, 0, trend="c"), False),
    (Order(1, 1, 0), Order(1, 0, 0), False),
    (Order(1, 0, 0, trend="c"), Order(1, 0, 0, trend="c"), False),
    (Order(1, 0, 0, 1, 0, 0, 12, "c"), Order(1, 0, 0, trend="c"), True),
])
def test_nests_counts_arma_terms_and_the_deterministic_term(outer, inner, expected):
    assert outer.contains(inner) is expected


@pytest.mark.parametrize("statistic, rival, p", [(3.841, "ar1", 0.05), (3.841, "wn_trend", 0.05), (0.0, "ar1", 1.0)])
def test_likelihood_ratio_p_refers_twice_the_gain_to_chi_square_with_the_extra_parameters(fits, statistic, rival, p):
    assert likelihood_ratio_p(fits["wn"], _with_gain(fits[rival], fits["wn"], statistic)) == pytest.approx(p, abs=1e-4)


def test_likelihood_ratio_p_with_two_extra_parameters(fits, noise):
    ar2 = fit_candidate(noise, Order(2, 0, 0, trend="c"), fits.values())
    assert ar2.n_params - fits["wn"].n_params == 2
    assert likelihood_ratio_p(fits["wn"], _with_gain(ar2, fits["wn"], 5.991)) == pytest.approx(0.05, abs=1e-4)


def test_a_fit_below_the_model_it_nests_counts_as_no_gain(fits):
    assert likelihood_ratio_p(fits["wn"], _with_gain(fits["ar1"], fits["wn"], -1.0)) == 1.0


def test_nesting_rivals_leave_the_margin_rule_and_meet_the_likelihood_ratio_test(fits):
    ranked = [fits["wn"], _with_gain(fits["ar1"], fits["wn"], 4.0), fits["wn_trend"]]
    assert margin_to_rival(ranked) == float("inf")
    rival, p = strongest_nesting_rival(ranked)
    assert rival.model == Order(1, 0, 0, trend="c") and p == pytest.approx(0.0455, abs=1e-4)


def test_nested_level_by_length_band():
    assert nested_level(120) == NESTED_LEVEL_SHORT and nested_level(400) == NESTED_LEVEL_LONG


def test_a_nesting_model_that_fits_better_keeps_the_suggestion_from_firm(fits):
    lead = fits["wn"]
    assert lead.passes_ljung_box and not lead.flags
    assert score_confidence([lead, _with_gain(fits["ar1"], lead, 1.0)], [], "bic").level == Confidence.FIRM
    score = score_confidence([lead, _with_gain(fits["ar1"], lead, 4.7)], [], "bic")
    assert score.level == Confidence.TENTATIVE
    # 300 observations: the short band of rule 3 (AIC's level, Burnham & Anderson 2002).
    assert score.reasons == ["ARIMA(1,0,0) fits better by a likelihood-ratio test (p = 0.030, below the 15.7% level for series "
                             "shorter than 400 observations)"]


def test_a_better_fit_with_a_trend_is_named_with_its_trend(fits):
    score = score_confidence([fits["wn"], _with_gain(fits["wn_trend"], fits["wn"], 9.0)], [], "bic")
    # The upper tail of chi-squared(1) at 9.0 is 0.0027 (scipy.stats.chi2.sf), worded to three decimals.
    assert score.reasons == ["ARIMA(0,0,0) with a mean and a linear trend fits better by a likelihood-ratio test (p = 0.003, "
                             "below the 15.7% level for series shorter than 400 observations)"]


@pytest.mark.parametrize("phi, root", [([0.95], 0.95), ([1.2, -0.35], 0.7), ([-0.97], 0.0), ([1.6, -0.8], 0.0), ([], 0.0)])
def test_largest_real_ar_root_ignores_negative_and_complex_roots(fits, phi, root):
    # 1 - 1.2z + 0.35z^2 = (1 - 0.7z)(1 - 0.5z); 1 - 1.6z + 0.8z^2 has complex roots of modulus 0.8^-0.5.
    assert largest_real_ar_root(_ar(fits["wn"], phi, 300)) == pytest.approx(root)


@pytest.mark.parametrize("nobs, doubt", [(120, True), (400, False)])
def test_an_ar_root_within_dickey_fuller_reach_of_one_is_not_firm(fits, nobs, doubt):
    # n (1 - 0.95) = 6 at n = 120 and 20 at n = 400, against 14.1.
    fit = _ar(fits["wn"], [0.95], nobs)
    assert (unit_root_doubt(fit) is not None) is doubt
    if doubt:
        assert score_confidence([fit], [], "bic").level == Confidence.TENTATIVE


@pytest.mark.parametrize("n, doubt", [(120, True), (MIN_DIFFERENCED_LENGTH - 1, True), (MIN_DIFFERENCED_LENGTH, False)])
def test_a_differenced_suggestion_of_a_short_series_is_not_firm(fits, n, doubt):
    assert MIN_DIFFERENCED_LENGTH == 282  # 14.1 / (1 - 0.95), rounded up
    walk = _ar(replace(fits["wn"], model=Order(0, 1, 0)), [], n - 1)
    walk = replace(walk, model=Order(0, 1, 0))
    assert (unit_root_doubt(walk) is not None) is doubt


@pytest.mark.parametrize("nobs", [50, 120, 188, 189, 400])
def test_weak_term_power_is_the_noncentral_chi_square_tail(nobs):
    # Noncentrality n phi^2 / (1 - phi^2) for phi = 0.2 (Brockwell & Davis 1991, §8.8).
    expected = ncx2.sf(chi2.isf(0.05, 1), 1, nobs * 0.04 / 0.96)
    assert weak_term_power(nobs) == pytest.approx(expected, rel=1e-9)


def test_min_firm_length_is_where_the_power_reaches_eighty_percent():
    assert MIN_FIRM_LENGTH == 189  # 7.849 * 0.96 / 0.04 = 188.4, rounded up
    assert weak_term_power(MIN_FIRM_LENGTH - 1) < 0.80 <= weak_term_power(MIN_FIRM_LENGTH)


@pytest.mark.parametrize("nobs, firm", [(120, False), (MIN_FIRM_LENGTH - 1, False), (MIN_FIRM_LENGTH, True)])
def test_a_clean_suggestion_fitted_on_too_few_observations_is_not_firm(fits, nobs, firm):
    lead = replace(fits["wn"], nobs=nobs)
    score = score_confidence([lead], [], "bic")
    assert (score.level == Confidence.FIRM) is firm
    assert (short_series_doubt(lead) is None) is firm
    if not firm:
        assert score.reasons == [short_series_doubt(lead)]
        assert f"{nobs} observations" in score.reasons[0] and f"needs {MIN_FIRM_LENGTH}" in score.reasons[0]


def test_groups_of_different_seasonal_differences_are_compared_after_the_seasonal_start_up(fits):
    # Two groups whose errors agree from the second season of the common stretch on, but the
    # seasonally differenced one carries its filter's start-up (larger errors) in the first
    # season: compared over the whole stretch it loses, after its start-up it wins (the BIC of
    # app.core.ranking.common_level_bic, one parameter fewer). The window is the common final
    # stretch less the first season (rank_across_differencing's notes).
    n, s = 120, 12
    errors = np.random.default_rng(3).standard_normal(n)
    plain_errors = 1.05 * errors
    differenced_errors = errors[s:].copy()
    differenced_errors[:s] *= 2.0
    plain = replace(fits["wn"], model=Order(1, 1, 0, 1, 0, 0, s), residuals=plain_errors, n_params=4)
    differenced = replace(fits["wn"], model=Order(0, 1, 1, 0, 1, 1, s), residuals=differenced_errors, n_params=3)
    y = np.zeros(n)  # complete, so the level errors are the residuals (level_errors)
    ranked = rank_across_differencing({(0, 1): [plain], (1, 1): [differenced]}, y)
    assert ranked[0] is differenced
    errors = {fit.model: level_errors(fit, y) for fit in (plain, differenced)}

    def bic(fit, m):
        return common_level_bic(*errors[fit.model], fit.n_params, final_window(n, m, (e for e, _ in errors.values())))

    m = differenced_errors.size - 1
    assert bic(differenced, m) > bic(plain, m), "precondition: with the start-up in it, D = 1 loses"
    assert bic(differenced, m - s) < bic(plain, m - s)


def _seasonal_sample(seasonal_ar: float, seasonal_ma: float, n: int = 400, s: int = 12, seed: int = 8) -> np.ndarray:
    """(1 - Phi B^s) w_t = (1 + Theta B^s) e_t, simulated by statsmodels' ArmaProcess."""
    from statsmodels.tsa.arima_process import ArmaProcess

    ar, ma = np.zeros(s + 1), np.zeros(s + 1)
    ar[0] = ma[0] = 1.0
    ar[s], ma[s] = -seasonal_ar, seasonal_ma
    return 10.0 + ArmaProcess(ar, ma).generate_sample(n + 200, distrvs=np.random.default_rng(seed).standard_normal)[200:]


def test_a_seasonal_difference_of_a_stationary_seasonal_ar_is_doubted_and_a_true_one_is_not():
    # A seasonal AR with Phi = 0.6 seasonally differenced leaves (1 - B^12) in the MA part: the
    # fitted seasonal MA sits near -1 (Box, Jenkins, Reinsel & Ljung 2015, §9.2, from memory),
    # the calibration batch's wrong firm seasonal suggestions. For Q = 1 the inverse root's
    # modulus is |Theta|, checked against statsmodels' SARIMAX fit of the same order.
    from statsmodels.tsa.statespace.sarimax import SARIMAX

    model = Order(0, 0, 0, 1, 1, 1, 12)
    over = fit_candidate(_seasonal_sample(0.6, 0.0), model)
    reference = SARIMAX(pd.Series(_seasonal_sample(0.6, 0.0)), order=(0, 0, 0), seasonal_order=(1, 1, 1, 12)).fit(disp=False)
    assert seasonal_ma_modulus(over) == pytest.approx(abs(reference.params["ma.S.L12"]), abs=0.02)
    assert seasonal_ma_modulus(over) >= SEASONAL_MA_BOUNDARY
    assert "seasonal MA root" in unit_root_doubt(over)
    # A seasonal random walk with Theta = -0.6 after its difference: the difference is right
    # (33 seasons estimate Theta within about 0.14, sqrt((1 - Theta^2) / 33)).
    walk = np.cumsum((_seasonal_sample(0.0, -0.6, n=396, seed=9) - 10.0).reshape(-1, 12), axis=0).ravel()
    right = fit_candidate(walk, Order(0, 0, 0, 0, 1, 1, 12))
    reference = SARIMAX(pd.Series(walk), order=(0, 0, 0), seasonal_order=(0, 1, 1, 12)).fit(disp=False)
    assert seasonal_ma_modulus(right) == pytest.approx(abs(reference.params["ma.S.L12"]), abs=0.02)
    assert unit_root_doubt(right) is None


def test_a_box_cox_lambda_at_the_end_of_its_range_keeps_the_suggestion_from_firm():
    # White noise with 24 spikes of 8 SD (10% of 240 points): lambda = -1 shrinks them so far
    # that the intervention search no longer sees them, and 7 of 10 such suggestions had come
    # out firm (a statistics review). An estimate on the boundary of its range is no interior
    # optimum (Self & Liang 1987), so the suggestion says so and is not firm.
    from app.core.identify import identify_series
    from app.core.transform import LAMBDA_BOUNDS

    index = pd.date_range("2000-01-01", periods=240, freq="MS")
    rng = np.random.default_rng([7, 24, 0])
    y = 10 + rng.normal(size=240)
    y[rng.choice(240, 24, replace=False)] += 8
    result = identify_series(pd.Series(y, index=index), "plant/probe/spiky")
    assert (result.transform.kind, result.transform.lam) == ("box_cox", LAMBDA_BOUNDS[0])
    assert result.confidence.level is not Confidence.FIRM
    assert any(r.startswith("Box-Cox lambda = -1 lies at the end of the range searched [-1, 2]")
               for r in result.confidence.reasons), result.confidence.reasons
