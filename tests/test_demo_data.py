"""The invented demo portfolio: reproducible, complete, true to its recorded processes, readable.

The process checks compare sample autocorrelations with the theoretical ones of the recorded
coefficients, computed by statsmodels ``ArmaProcess.acf``, allowing three standard errors from
Bartlett's formula. The dropout-heavy channel is checked for its share and runs of missing days,
the intermittent sales series for its share of zeros and its demand class, computed here from
the definitions of Syntetos, Boylan & Croston [3]_ rather than by the engine's classifier. A slow
test checks that the engine flags every awkward series it analyses and says why.

References
----------
.. [1] Box, G.E.P., Jenkins, G.M., Reinsel, G.C. & Ljung, G.M. (2015). *Time Series Analysis:
   Forecasting and Control*, 5th ed., Wiley: ch. 3 (theoretical ACF of AR, MA and ARMA
   processes), §2.1 (Bartlett's approximation to the variance of sample autocorrelations and
   its AR(1) and MA(1) special cases; section number from memory).
.. [2] Brockwell, P.J. & Davis, R.A. (1991). *Time Series: Theory and Methods*, 2nd ed.,
   Springer, Theorem 7.2.1 (Bartlett's formula in the form used here; from memory).
.. [3] Syntetos, A.A., Boylan, J.E. & Croston, J.D. (2005). On the categorization of demand
   patterns. *Journal of the Operational Research Society* 56, 495-503 (ADI and CV² cut-offs
   1.32 and 0.49).
"""

from __future__ import annotations

import json
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from statsmodels.tsa.arima_process import ArmaProcess
from statsmodels.tsa.stattools import acf

from app.core.errors import SeriesProblem
from app.core.identify import identify_series
from app.core.portfolio_file import read_portfolio
from app.core.prepare import SHORT_GAP_MAX, prepare_series
from app.core.vocabulary import Confidence, Flag, InterventionKind

DEMO_DIR = Path(__file__).resolve().parent.parent / "demo_data"
PORTFOLIO = DEMO_DIR / "portfolio.csv"
TRUTH = DEMO_DIR / "truth.csv"
GAP_RUN = 6  # timestamps the "gap" series lacks in the file, besides one empty value cell
DROPOUT_SHARE = (0.10, 0.20)  # days missing from the dropout-heavy channel (demo_data/README.md)
DROPOUT_RUN = (1, 4)  # days in one dropout
ZERO_SHARE = (0.70, 0.85)  # days without a sale in the intermittent series
ADI_CUTOFF, CV2_CUTOFF = 1.32, 0.49  # Syntetos, Boylan & Croston (2005)
END = {"daily": "2024-12-31", "hourly": "2024-12-31 23:00", "monthly": "2024-12-01"}
THEORY_LAGS = 600  # terms of the Bartlett sum; every recorded process has decayed long before
PANDAS_FREQ = {"daily": "D", "hourly": "h", "monthly": "MS"}


def read_truth() -> pd.DataFrame:
    truth = pd.read_csv(TRUTH, dtype=str, keep_default_na=False)
    for column in ["n", "order_p", "order_d", "order_q", "seasonal_P", "seasonal_D", "seasonal_Q"]:
        truth[column] = truth[column].astype(int)
    return truth.set_index("series_id", drop=False)


def read_values() -> dict[str, np.ndarray]:
    table = pd.read_csv(PORTFOLIO, dtype={"series_id": str, "timestamp": str})
    return {sid: group["value"].to_numpy() for sid, group in table.groupby("series_id", sort=False)}


def series_of(awkwardness: str) -> str:
    """The one series with this deliberate defect."""
    truth = read_truth()
    (series_id,) = truth.index[truth["awkwardness"] == awkwardness]
    return series_id


def on_grid(series_id: str) -> pd.Series:
    """A series' values on its recorded grid (``n`` steps to the shared last date): NaN where the
    file has no row or an empty cell."""
    row = read_truth().loc[series_id]
    table = pd.read_csv(PORTFOLIO, dtype={"series_id": str, "timestamp": str})
    rows = table[table["series_id"] == series_id]
    grid = pd.date_range(end=END[row["frequency"]], periods=row["n"], freq=PANDAS_FREQ[row["frequency"]])
    values = pd.Series(rows["value"].to_numpy(), index=pd.DatetimeIndex(rows["timestamp"]))
    assert values.index.isin(grid).all(), series_id
    return values.reindex(grid)


def missing_runs(missing: np.ndarray) -> list[tuple[int, int]]:
    """(start, length) of each run of True in ``missing``."""
    edges = np.diff(np.r_[0, missing.astype(int), 0])
    starts, ends = np.flatnonzero(edges == 1), np.flatnonzero(edges == -1)
    return [(int(a), int(b - a)) for a, b in zip(starts, ends)]


def demand_class(values: np.ndarray) -> tuple[float, float, str]:
    """ADI, CV² and class of a demand series (Syntetos, Boylan & Croston 2005).

    ADI is the mean interval between successive non-zero demands; CV² the squared coefficient
    of variation of the non-zero sizes (population variance over squared mean).
    """
    demand_at = np.flatnonzero(values > 0)
    sizes = values[demand_at]
    adi = float(np.mean(np.diff(demand_at)))
    cv2 = float(np.var(sizes) / np.mean(sizes) ** 2)
    rare, varied = adi > ADI_CUTOFF, cv2 > CV2_CUTOFF
    label = {(False, False): "smooth", (False, True): "erratic", (True, False): "intermittent", (True, True): "lumpy"}
    return adi, cv2, label[rare, varied]


def arma_of(row: pd.Series) -> ArmaProcess:
    """The stationary ARMA part recorded in a truth row, seasonal polynomials multiplied in."""
    coefficients = json.loads(row["coefficients"])
    s = int(row["period"]) if row["period"] else 1

    def lag_polynomial(values: list[float], step: int, sign: float) -> np.ndarray:
        poly = np.zeros(step * len(values) + 1)
        poly[0] = 1.0
        poly[step::step] = sign * np.asarray(values)
        return poly

    ar = np.convolve(lag_polynomial(coefficients["ar"], 1, -1.0), lag_polynomial(coefficients["seasonal_ar"], s, -1.0))
    ma = np.convolve(lag_polynomial(coefficients["ma"], 1, 1.0), lag_polynomial(coefficients["seasonal_ma"], s, 1.0))
    return ArmaProcess(ar, ma)


def stationary_part(values: np.ndarray, row: pd.Series) -> np.ndarray:
    """Undo the recorded transform and differencing: ``(1 - L)^d (1 - L^s)^D`` of the (log) values."""
    x = np.log(values) if row["transform"] == "log" else values
    for _ in range(row["seasonal_D"]):
        s = int(row["period"])
        x = x[s:] - x[:-s]
    return np.diff(x, n=row["order_d"])


def bartlett_variance(rho: np.ndarray, k: int, n: int) -> float:
    """Bartlett's large-sample variance of the sample autocorrelation r_k.

    ``var(r_k) ~ (1/n) * sum_{i>=1} (rho_{i+k} + rho_{i-k} - 2 rho_k rho_i)^2`` (Brockwell &
    Davis 1991, Theorem 7.2.1; the same formula as Box, Jenkins, Reinsel & Ljung 2015, §2.1).
    ``rho`` holds the theoretical autocorrelations from lag 0.
    """
    i = np.arange(1, rho.size - k)
    return float(np.sum((rho[i + k] + rho[np.abs(i - k)] - 2 * rho[k] * rho[i]) ** 2) / n)


def acf_cases() -> list[tuple[str, int]]:
    """(series, lag) pairs to check: the longest clean series of several kinds.

    The four longest stationary non-seasonal AR/MA/ARMA series and the two longest once-
    differenced ones at lag 1; the longest weekly and daily-cycle seasonal series at lag 1 and
    at their seasonal lag.
    """
    truth = read_truth()
    clean = truth[(truth["awkwardness"] == "") & (truth["order_p"] + truth["order_q"] + truth["seasonal_P"] + truth["seasonal_Q"] > 0)]
    clean = clean.sort_values("n", ascending=False, kind="stable")
    plain = clean[clean["period"] == ""]
    cases = [(sid, 1) for sid in plain[plain["order_d"] == 0]["series_id"][:4]]
    cases += [(sid, 1) for sid in plain[plain["order_d"] == 1]["series_id"][:2]]
    for period in ("7", "24"):
        seasonal = clean[clean["period"] == period]["series_id"].iloc[0]
        cases += [(seasonal, 1), (seasonal, int(period))]
    return cases


def test_generator_reproduces_committed_files(tmp_path):
    subprocess.run([sys.executable, str(DEMO_DIR / "generate.py"), str(tmp_path)], check=True, capture_output=True)
    assert (tmp_path / "portfolio.csv").read_bytes() == PORTFOLIO.read_bytes()
    assert (tmp_path / "truth.csv").read_bytes() == TRUTH.read_bytes()


def test_truth_and_portfolio_name_the_same_series():
    truth, values = read_truth(), read_values()
    assert not truth.index.duplicated().any()
    assert set(values) == set(truth.index)


def test_truth_rows_agree_with_the_portfolio_and_themselves():
    truth, values = read_truth(), read_values()
    for sid, row in truth.iterrows():
        if row["awkwardness"] == "dropouts":
            missing_rows = int(on_grid(sid).index.size - values[sid].size)  # checked in its own test
        else:
            missing_rows = GAP_RUN if row["awkwardness"] == "gap" else 0
        assert values[sid].size == row["n"] - missing_rows, sid
        coefficients = json.loads(row["coefficients"])
        orders = [len(coefficients[key]) for key in ("ar", "ma", "seasonal_ar", "seasonal_ma")]
        assert orders == [row["order_p"], row["order_q"], row["seasonal_P"], row["seasonal_Q"]], sid
        seasonal = row["seasonal_P"] + row["seasonal_D"] + row["seasonal_Q"] > 0
        assert (row["period"] != "") == seasonal, sid
        if row["transform"] == "log":
            assert (values[sid] > 0).all(), sid


@pytest.mark.parametrize(("series_id", "lag"), acf_cases())
def test_sample_acf_matches_recorded_process(series_id, lag):
    row = read_truth().loc[series_id]
    x = stationary_part(read_values()[series_id], row)
    rho = arma_of(row).acf(lags=THEORY_LAGS)
    r = acf(x, nlags=lag, fft=True)[lag]
    standard_error = np.sqrt(bartlett_variance(rho, lag, x.size))
    assert abs(r - rho[lag]) < 3 * standard_error, (series_id, lag, r, rho[lag], standard_error)


@pytest.mark.parametrize("coefficient", [0.3, 0.8])
def test_bartlett_variance_matches_closed_forms(coefficient):
    # AR(1): var(r_1) ~ (1 - phi^2)/n; MA(1): var(r_1) ~ (1 - 3 rho_1^2 + 4 rho_1^4)/n
    # (Box, Jenkins, Reinsel & Ljung 2015, §2.1; from memory).
    n = 100
    ar1 = ArmaProcess([1.0, -coefficient]).acf(lags=THEORY_LAGS)
    assert bartlett_variance(ar1, 1, n) == pytest.approx((1 - coefficient**2) / n, rel=1e-9)
    ma1 = ArmaProcess([1.0], [1.0, coefficient]).acf(lags=THEORY_LAGS)
    rho1 = coefficient / (1 + coefficient**2)
    assert bartlett_variance(ma1, 1, n) == pytest.approx((1 - 3 * rho1**2 + 4 * rho1**4) / n, rel=1e-9)


def test_portfolio_reads_without_problems():
    portfolio = read_portfolio(PORTFOLIO)
    assert portfolio.problems == []
    assert [raw.series_id for raw in portfolio.series] == list(read_truth().index)


def test_prepare_series_accepts_all_but_the_deliberately_bad_ones():
    truth = read_truth()
    for raw in read_portfolio(PORTFOLIO).series:
        row = truth.loc[raw.series_id]
        if row["awkwardness"] in ("constant", "very_short"):
            expected_flag = "constant" if row["awkwardness"] == "constant" else "too_short"
            with pytest.raises(SeriesProblem) as problem:
                prepare_series(raw.values, raw.series_id, raw.lines)
            assert problem.value.flag == expected_flag, raw.series_id
            continue
        prepared = prepare_series(raw.values, raw.series_id, raw.lines)
        assert (prepared.n, prepared.freq) == (row["n"], PANDAS_FREQ[row["frequency"]]), raw.series_id
        if row["awkwardness"] == "gap":
            assert prepared.flags == ["gaps", "long_gap"]
            assert (prepared.gaps_filled, prepared.long_gaps) == (GAP_RUN + 1, 1)
        elif row["awkwardness"] == "dropouts":
            runs = missing_runs(on_grid(raw.series_id).isna().to_numpy())
            long_runs = sum(1 for _, length in runs if length > SHORT_GAP_MAX)
            assert prepared.flags == ["gaps", "long_gap"] if long_runs else ["gaps"]
            assert (prepared.gaps_filled, prepared.long_gaps) == (sum(length for _, length in runs), long_runs)
        else:
            assert prepared.flags == [], raw.series_id


def test_dropout_channel_misses_days_in_short_scattered_runs_of_both_kinds():
    series_id = series_of("dropouts")
    values = on_grid(series_id)
    missing = values.isna().to_numpy()
    runs = missing_runs(missing)
    present_rows = set(pd.read_csv(PORTFOLIO, dtype=str).query("series_id == @series_id")["timestamp"])
    absent = {stamp.strftime("%Y-%m-%d") not in present_rows for stamp in values.index[missing]}

    assert DROPOUT_SHARE[0] <= missing.mean() <= DROPOUT_SHARE[1]
    assert all(DROPOUT_RUN[0] <= length <= DROPOUT_RUN[1] for _, length in runs)
    assert not missing[0] and not missing[-1]  # a missing end would shorten the series, not leave a gap
    assert absent == {True, False}  # some days have no row, others an empty value cell
    # Scattered: missing days in every quarter of the series, not bunched in one stretch.
    assert all(quarter.any() for quarter in np.array_split(missing, 4))


def test_dropout_channel_keeps_its_recorded_autocorrelation():
    """Lag-1 autocorrelation from the pairs of days both observed, against the recorded AR(1)."""
    series_id = series_of("dropouts")
    row = read_truth().loc[series_id]
    x = on_grid(series_id).to_numpy()
    centred = x - np.nanmean(x)
    products = centred[1:] * centred[:-1]
    pairs = int(np.count_nonzero(~np.isnan(products)))
    r1 = np.nansum(products) / pairs / np.nanmean(centred**2)
    rho = arma_of(row).acf(lags=THEORY_LAGS)
    assert abs(r1 - rho[1]) < 3 * np.sqrt(bartlett_variance(rho, 1, pairs)), (r1, rho[1])


def test_intermittent_series_is_mostly_zeros_and_intermittent_in_the_sbc_classification():
    series_id = series_of("intermittent")
    row = read_truth().loc[series_id]
    y = on_grid(series_id).to_numpy()
    coefficients = json.loads(row["coefficients"])

    assert not np.isnan(y).any()
    assert (y >= 0).all() and (y == np.round(y)).all()
    assert ZERO_SHARE[0] <= (y == 0).mean() <= ZERO_SHARE[1]
    assert row["process"] == "intermittent demand"
    assert [row[c] for c in ("order_p", "order_d", "order_q", "seasonal_P", "seasonal_D", "seasonal_Q")] == [0] * 6
    # Sizes are 1 + Poisson(extra_size_mean); the share of demand days is Bernoulli(demand_probability).
    p, size_mean = coefficients["demand_probability"], 1 + coefficients["extra_size_mean"]
    demand = y[y > 0]
    assert abs(demand.size / y.size - p) < 3 * np.sqrt(p * (1 - p) / y.size)
    assert abs(demand.mean() - size_mean) < 3 * np.sqrt(coefficients["extra_size_mean"] / demand.size)
    adi, cv2, label = demand_class(y)
    assert (label, adi > ADI_CUTOFF) == ("intermittent", True), (adi, cv2)


@pytest.mark.parametrize(("values", "expected"), [
    ([3, 4, 3, 5, 4, 0, 3, 4], "smooth"),
    ([1, 9, 1, 12, 0, 1, 10, 1], "erratic"),
    ([2, 0, 0, 2, 0, 0, 3, 0, 0, 2], "intermittent"),
    ([1, 0, 0, 9, 0, 0, 1, 0, 0, 12], "lumpy"),
])
def test_demand_class_of_hand_made_series(values, expected):
    assert demand_class(np.asarray(values, dtype=float))[2] == expected


@pytest.mark.slow
@pytest.mark.parametrize("awkwardness", ["gap", "dropouts", "outlier", "level_shift", "intermittent"])
def test_the_engine_flags_each_awkward_series_it_analyses_and_says_why(awkwardness):
    series_id = series_of(awkwardness)
    raw = next(s for s in read_portfolio(PORTFOLIO).series if s.series_id == series_id)
    analysis = identify_series(raw.values, raw.series_id, lines=raw.lines).to_analysis()
    expected_flag = {"gap": Flag.LONG_GAP, "dropouts": Flag.GAPS, "outlier": Flag.OUTLIERS,
                     "level_shift": Flag.LEVEL_SHIFT, "intermittent": Flag.INTERMITTENT_DEMAND}[awkwardness]

    assert analysis.confidence != Confidence.FIRM
    assert expected_flag in analysis.flags
    assert analysis.confidence_reasons
    if awkwardness in ("outlier", "level_shift"):
        kind = InterventionKind.ADDITIVE if awkwardness == "outlier" else InterventionKind.LEVEL_SHIFT
        defect_date = re.search(r"\d{4}-\d{2}-\d{2}", read_truth().loc[series_id, "description"]).group(0)
        assert (kind, defect_date) in [(i.kind, i.timestamp) for i in analysis.interventions]
    if awkwardness in ("gap", "dropouts"):
        assert analysis.gaps_filled == int(on_grid(series_id).isna().sum())
    if awkwardness == "intermittent":
        assert any("intermittent" in note for note in analysis.data_notes)


def readme_summary_rows() -> list[list[str]]:
    """The table rows (cells stripped, backticks removed) of the README's Summary section."""
    summary = (DEMO_DIR / "README.md").read_text(encoding="utf-8").split("## Summary", 1)[1]
    rows = []
    for line in summary.splitlines():
        if line.startswith("| `"):
            rows.append([cell.strip().strip("`") for cell in line.strip().strip("|").split("|")])
    return rows


def test_readme_summary_tables_match_truth():
    truth = read_truth()
    groups = {row[0]: row for row in readme_summary_rows() if row[0] in set(truth["group"])}
    processes = {row[0]: int(row[-1]) for row in readme_summary_rows() if row[0] not in groups}
    assert processes == truth["process"].value_counts().to_dict()
    assert set(groups) == set(truth["group"])
    for group, members in truth.groupby("group"):
        periods = sorted(set(members["period"]) - {""})
        seasonal = int((members["period"] != "").sum())
        expected = [
            group, members["frequency"].iloc[0], str(len(members)),
            f"{members['n'].min()}–{members['n'].max()}",
            f"{seasonal} ({', '.join(periods)})" if seasonal else "0",
            str(int((members["transform"] == "log").sum())),
            ", ".join(sorted(a for a in members["awkwardness"] if a)),
        ]
        assert groups[group] == expected, group
