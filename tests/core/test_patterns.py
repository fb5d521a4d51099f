"""Checks of app.core.patterns: cut-offs on theoretical correlograms, chance spikes, the EACF.

Sources: theoretical ACF/PACF of statsmodels ``ArmaProcess`` (reference library); the
identification rules of Box, Jenkins, Reinsel & Ljung (2015) §6.2 (an AR(p) has a PACF that
cuts off after lag p, an MA(q) an ACF that cuts off after lag q); the extended ACF of Tsay &
Tiao (1984, JASA 79:84-96) and its reading in Cryer & Chan (2008) §6.3 [M for the sections].
"""

from __future__ import annotations

import math
from collections import Counter

import numpy as np
import pytest
from statsmodels.api import OLS
from statsmodels.tsa.arima_process import ArmaProcess
from threadpoolctl import threadpool_limits

from app.core.correlogram import Correlogram, bartlett_band, correlogram, lag_count, z_value
from app.core.patterns import (
    cutoff,
    eacf_table,
    eacf_vertex,
    read_patterns,
    read_seasonal_patterns,
    significant_lags,
    with_neighbours,
)

MAX_P = MAX_Q = 5
N_BANDS = 200  # the series length the bands are drawn for when the correlogram is theoretical


def _theoretical_correlogram(ar: list[float], ma: list[float], nlags: int = 20, n: int = N_BANDS) -> Correlogram:
    """The exact ACF/PACF of an ARMA process with the bands a series of length n would get."""
    process = ArmaProcess(ar, ma)
    r = process.acf(nlags + 1)
    return Correlogram(
        lags=np.arange(1, nlags + 1),
        acf=r[1:],
        acf_band=bartlett_band(r, n),
        pacf=process.pacf(nlags + 1)[1:],
        pacf_band=np.full(nlags, z_value() / math.sqrt(n)),
    )


@pytest.mark.parametrize(
    "ar, p",
    [([1, -0.6], 1), ([1, -0.5, -0.3], 2), ([1, -0.4, 0.3, -0.3], 3)],
    ids=["AR(1)", "AR(2)", "AR(3)"],
)
def test_pacf_cutoff_of_theoretical_ar_equals_order(ar, p):
    reading = read_patterns(_theoretical_correlogram(ar, [1]), MAX_P, MAX_Q)
    assert reading.pacf_cutoff == p
    assert "PACF cut-off" in reading.proposals[(p, 0)]


def test_theoretical_ar2_acf_tails_off():
    # phi = (0.5, 0.3): rho_k decays slowly (0.71, 0.66, 0.54, ...), so no MA order is read from it.
    reading = read_patterns(_theoretical_correlogram([1, -0.5, -0.3], [1]), MAX_P, MAX_Q)
    assert reading.acf_cutoff > MAX_Q
    assert not any(p == 0 and q > 0 for p, q in reading.proposals)


@pytest.mark.parametrize(
    "ma, q",
    [([1, 0.6], 1), ([1, 0.5, 0.4], 2), ([1, -0.7, 0.5], 2)],
    ids=["MA(1)", "MA(2)", "MA(2) alternating"],
)
def test_acf_cutoff_of_theoretical_ma_equals_order(ma, q):
    cg = _theoretical_correlogram([1], ma)
    reading = read_patterns(cg, MAX_P, MAX_Q)
    assert reading.acf_cutoff == q
    assert "ACF cut-off" in reading.proposals[(0, q)]


def test_white_noise_with_one_chance_spike_at_lag_7_has_no_cutoff():
    # A 95% band is crossed by about one lag in twenty by chance (Box, Jenkins, Reinsel & Ljung
    # 2015, §2.1.6 [M]); seed 59 gives n = 200 white noise whose ACF and PACF cross it at lag 7 only.
    x = np.random.default_rng(59).normal(size=N_BANDS)
    cg = correlogram(x, 20)
    window = MAX_Q + 3
    for values, band in ((cg.acf, cg.acf_band), (cg.pacf, cg.pacf_band)):
        crossing = np.flatnonzero(np.abs(values[:window]) > band[:window]) + 1
        assert crossing.tolist() == [7], "precondition: one isolated crossing at lag 7"
        assert significant_lags(values, band, window) == []
        assert cutoff(values, band, window) == 0
    reading = read_patterns(cg, MAX_P, MAX_Q)
    assert (reading.acf_cutoff, reading.pacf_cutoff) == (0, 0)
    assert "white noise" in reading.proposals[(0, 0)]


def test_lone_spike_beyond_the_bonferroni_band_counts():
    # The stricter band z(1 - alpha/(2L)) (Bonferroni, common practice) lets a real isolated spike through.
    band = np.full(10, 0.14)
    values = np.zeros(10)
    values[6] = 0.14 * 3.2 / 1.96
    assert cutoff(values, band, 8) == 7


def test_with_neighbours_adds_one_step_moves_within_limits():
    out = with_neighbours({(0, 0): ["white noise"], (5, 1): ["PACF cut-off"]}, 5, 5)
    assert set(out) == {(0, 0), (1, 0), (0, 1), (5, 1), (4, 1), (5, 0), (5, 2)}
    assert out[(0, 0)] == ["white noise"] and out[(1, 0)] == ["neighbour"]


# --- seasonal periods: the cut-off window -----------------------------------------------------

THEORETICAL_CASES = {
    "AR(1)": ([1, -0.6], [1]), "AR(2)": ([1, -0.5, -0.3], [1]), "AR(3)": ([1, -0.4, 0.3, -0.3], [1]),
    "MA(1)": ([1], [1, 0.6]), "MA(2)": ([1], [1, 0.5, 0.4]), "ARMA(1,1)": ([1, -0.6], [1, 0.5]),
}


@pytest.mark.parametrize("name", list(THEORETICAL_CASES))
def test_monthly_period_leaves_the_reading_as_it_was(name):
    # The window of max_order + 3 = 8 lags stops before lag 12 anyway: a monthly season changes
    # nothing in the non-seasonal reading.
    cg = _theoretical_correlogram(*THEORETICAL_CASES[name], nlags=25)
    plain, monthly = read_patterns(cg, MAX_P, MAX_Q), read_patterns(cg, MAX_P, MAX_Q, period=12)
    assert (monthly.acf_cutoff, monthly.pacf_cutoff, monthly.proposals) == (plain.acf_cutoff, plain.pacf_cutoff, plain.proposals)


def test_quarterly_seasonal_spike_alone_is_left_to_the_seasonal_reading():
    # A seasonal MA(1) at s = 4 (Theta = 0.6) has ACF and PACF spikes at multiples of 4 only
    # (Box, Jenkins, Reinsel & Ljung 2015, ch. 9, from memory): the spike at lag 4 clears even
    # the Bonferroni band, so read without a season it is an MA(4); with s = 4 it is the
    # seasonal part's and the non-seasonal reading is white noise.
    cg = _theoretical_correlogram([1], [1, 0, 0, 0, 0.6])
    assert read_patterns(cg, MAX_P, MAX_Q).acf_cutoff == 4, "precondition: the lone spike counts without a season"
    reading = read_patterns(cg, MAX_P, MAX_Q, period=4)
    assert (reading.acf_cutoff, reading.pacf_cutoff) == (0, 0)
    assert "white noise" in reading.proposals[(0, 0)]


def test_quarterly_seasonal_satellite_is_left_to_the_seasonal_reading():
    # (1 - 0.5B)(1 - 0.6B^4): the PACF has its spike at lag 1, the seasonal one at 4 and
    # satellites at 3 and 5 = s -+ 1 (BJRL 2015 ch. 9, from memory). Without a season the
    # satellite at 3 is a lone spike beyond the Bonferroni band and starts a run to lag 5, an
    # AR(5); with s = 4 the PACF cuts off after lag 1.
    cg = _theoretical_correlogram(np.convolve([1, -0.5], [1, 0, 0, 0, -0.6]).tolist(), [1])
    assert read_patterns(cg, MAX_P, MAX_Q).pacf_cutoff == 5, "precondition: lags 4 and 5 count without a season"
    reading = read_patterns(cg, MAX_P, MAX_Q, period=4)
    assert reading.pacf_cutoff == 1
    assert "PACF cut-off" in reading.proposals[(1, 0)]


@pytest.mark.parametrize(
    ("theta", "proposals", "words"),
    [
        # A seasonal MA(1) at s = 12 (BJRL 2015 ch. 9): one ACF spike at lag 12; the PACF decays at
        # 12, 24, 36 as Theta^k, so how many of its seasonal lags clear the band of n = 200 depends on Theta.
        (-0.4, {(0, 1): ["seasonal ACF cut-off"], (1, 0): ["seasonal PACF cut-off"], (1, 1): ["seasonal spikes in both"]},
         "Both the ACF and the PACF have seasonal spikes"),
        (-0.6, {(0, 1): ["seasonal ACF cut-off"], (1, 1): ["seasonal decay"]},
         "The PACF has spikes at more than the first 2 seasonal lag(s), read as a decay"),
    ],
)
def test_the_seasonal_reading_says_which_correlogram_cuts_off_and_which_decays(theta, proposals, words):
    # Found by a new user: "spikes at the first seasonal lag and none after" for both, then "both
    # tail off" in the next sentence. The words now name what was read and never contradict it.
    cg = _theoretical_correlogram([1], np.r_[1, np.zeros(11), theta].tolist(), nlags=40)
    found, said = read_seasonal_patterns(cg, 12, 2, 2)
    assert found == proposals
    assert any(w.startswith(words) for w in said)
    assert not any("tail off" in w for w in said)


def test_quarterly_airline_acf_reads_the_non_seasonal_ma1():
    # The differenced airline model (1 - 0.4B)(1 - 0.6B^4) has ACF spikes at 1, s - 1, s and
    # s + 1 (BJRL 2015 §9.2, from memory): read with s = 4 the ACF cuts off after lag 1.
    cg = _theoretical_correlogram([1], np.convolve([1, -0.4], [1, 0, 0, 0, -0.6]).tolist())
    assert read_patterns(cg, MAX_P, MAX_Q).acf_cutoff > 1, "precondition: the seasonal spikes count without a season"
    reading = read_patterns(cg, MAX_P, MAX_Q, period=4)
    assert reading.acf_cutoff == 1
    assert "ACF cut-off" in reading.proposals[(0, 1)]


def test_quarterly_ar1_acf_is_read_past_the_season():
    # An AR(1) with phi = 0.8 has rho_k = 0.8^k, a decay (BJRL 2015 §3.2, from memory). A window
    # that stopped before lag s = 4 read every such ACF as cutting off by lag 3; the full window
    # reads a quarterly series as it reads the same series without a season. n = 120 (30 years).
    # Measured on these seeds: the quarterly reading equals the plain one in 47 of 50, the ACF
    # runs past lag 3 in 25 and stops at lag 3 in 19, (1, 0) is proposed in 49; the old window
    # stopped at lag 3 in 44 and never went past it. At n = 120 Bartlett's band at lags 4-5
    # (about 0.35) is as wide as rho_4, rho_5 of the process: that a third of these ACFs stop at
    # lag 3 is the band's verdict, not the window's.
    seeds, n = range(50), 120
    same = past_three = at_three = ar1 = 0
    for seed in seeds:
        x = ArmaProcess([1, -0.8], [1]).generate_sample(n, distrvs=np.random.default_rng([20261207, seed]).standard_normal, burnin=200)
        cg = correlogram(x, lag_count(n, 4))
        vertex = eacf_vertex(eacf_table(x, MAX_P, MAX_Q)[1])
        quarterly, plain = read_patterns(cg, MAX_P, MAX_Q, vertex, period=4), read_patterns(cg, MAX_P, MAX_Q, vertex)
        same += (quarterly.acf_cutoff, quarterly.pacf_cutoff) == (plain.acf_cutoff, plain.pacf_cutoff)
        past_three += quarterly.acf_cutoff > 3
        at_three += quarterly.acf_cutoff == 3
        ar1 += (1, 0) in quarterly.proposals
    assert same >= 0.9 * len(seeds)
    assert past_three >= 0.4 * len(seeds), past_three
    assert at_three <= 0.4 * len(seeds), at_three
    assert ar1 >= 0.9 * len(seeds), ar1


# --- extended ACF ------------------------------------------------------------------------------

def _tsay_tiao_cell(z: np.ndarray, k: int, j: int) -> float:
    """Cell (k, j) of the EACF written from Tsay & Tiao's definition with statsmodels OLS.

    The j-th iterated AR(k) regression is
    z_t = sum_{i<=k} phi_i z_{t-i} + sum_{h<=j} beta_h e^{(j-h)}_{t-h} + e^{(j)}_t, where e^{(l)}
    are the residuals of the l-th iterated regression (Tsay & Tiao 1984, §3); the cell is the lag
    j+1 autocorrelation of z_t - sum phi_i^{(j)} z_{t-i}. Regressions use every t where all
    regressors exist (t >= k + j), as the engine documents.
    """
    n = z.size
    residuals: list[np.ndarray] = []
    for it in range(j + 1):
        start = k + it
        cols = [z[start - i: n - i] for i in range(1, k + 1)]
        cols += [residuals[it - h][start - h: n - h] for h in range(1, it + 1)]
        fit = OLS(z[start:], np.column_stack(cols)).fit()
        e = np.zeros(n)
        e[start:] = fit.resid
        residuals.append(e)
    phi = fit.params[:k]
    w = z[k:] - sum(phi[i - 1] * z[k - i: n - i] for i in range(1, k + 1))
    w = w - w.mean()
    return float(w[j + 1:] @ w[: -(j + 1)] / (w @ w))


def test_eacf_first_column_and_row_follow_the_definition():
    # Column 0 is the lag-1 ACF after an OLS AR(k) filter; row 0 is the plain ACF; with one
    # iteration only one lagged residual enters, so these cells do not depend on its pairing.
    x = ArmaProcess([1, -0.6], [1, 0.5]).generate_sample(400, distrvs=np.random.default_rng(21).standard_normal, burnin=100)
    z = x - x.mean()
    values, _ = eacf_table(x, 3, 3)
    for k in range(1, 4):
        for j in (0, 1):
            assert values[k, j] == pytest.approx(_tsay_tiao_cell(z, k, j), abs=1e-10), (k, j)


def test_eacf_iterated_cells_follow_the_definition():
    x = ArmaProcess([1, -0.6], [1, 0.5]).generate_sample(400, distrvs=np.random.default_rng(21).standard_normal, burnin=100)
    z = x - x.mean()
    values, _ = eacf_table(x, 3, 3)
    for k in range(1, 4):
        for j in (2, 3):
            assert values[k, j] == pytest.approx(_tsay_tiao_cell(z, k, j), abs=1e-10), (k, j)


def test_eacf_significance_uses_tsay_tiao_threshold():
    x = np.random.default_rng(22).normal(size=300)
    values, significant = eacf_table(x, 3, 3)
    k, j = np.indices(values.shape)
    np.testing.assert_array_equal(significant, np.abs(values) > 2 / np.sqrt(300 - k - j))


def _vertex_counts(ar: list[float], ma: list[float], n: int = 2000, seeds: range = range(20)) -> Counter:
    counts: Counter = Counter()
    # Many small least-squares problems: one BLAS thread, or they crawl on a busy machine.
    with threadpool_limits(1):
        for seed in seeds:
            x = ArmaProcess(ar, ma).generate_sample(n, distrvs=np.random.default_rng(1000 + seed).standard_normal, burnin=200)
            counts[eacf_vertex(eacf_table(x, MAX_P, MAX_Q)[1])] += 1
    return counts


# Each cell is a 5% test, so a false X inside the triangle moves the vertex now and then: over 20
# seeded series of n = 2000 the true order must be the vertex read most often.
@pytest.mark.parametrize(
    "ar, ma, order",
    [([1, -0.5, -0.3], [1], (2, 0)), ([1], [1, 0.6, 0.4], (0, 2))],
    ids=["AR(2)", "MA(2)"],
)
def test_eacf_vertex_of_long_simulated_series_is_true_order(ar, ma, order):
    counts = _vertex_counts(ar, ma)
    assert counts.most_common(1)[0][0] == order, counts


def test_eacf_vertex_of_long_simulated_arma11_is_true_order():
    counts = _vertex_counts([1, -0.6], [1, 0.5])
    assert counts.most_common(1)[0][0] == (1, 1), counts


def test_eacf_vertex_reads_a_textbook_triangle():
    # Cryer & Chan (2008) §6.3 [M]: an ARMA(1,1) shows X's in row 0 and O's from (1,1) on, with
    # the triangle's edge moving one column right per row.
    table = np.ones((6, 6), dtype=bool)
    for row in range(1, 6):
        table[row, row:] = False
    assert eacf_vertex(table) == (1, 1)
