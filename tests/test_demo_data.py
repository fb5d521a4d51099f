"""The invented demo portfolio: reproducible, complete, true to its recorded processes, readable.

The process checks compare sample autocorrelations with the theoretical ones of the recorded
coefficients, computed by statsmodels ``ArmaProcess.acf``, allowing three standard errors from
Bartlett's formula.

References
----------
.. [1] Box, G.E.P., Jenkins, G.M., Reinsel, G.C. & Ljung, G.M. (2015). *Time Series Analysis:
   Forecasting and Control*, 5th ed., Wiley: ch. 3 (theoretical ACF of AR, MA and ARMA
   processes), §2.1 (Bartlett's approximation to the variance of sample autocorrelations and
   its AR(1) and MA(1) special cases; section number from memory).
.. [2] Brockwell, P.J. & Davis, R.A. (1991). *Time Series: Theory and Methods*, 2nd ed.,
   Springer, Theorem 7.2.1 (Bartlett's formula in the form used here; from memory).
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from statsmodels.tsa.arima_process import ArmaProcess
from statsmodels.tsa.stattools import acf

from app.core.errors import SeriesProblem
from app.core.portfolio_file import read_portfolio
from app.core.prepare import prepare_series

DEMO_DIR = Path(__file__).resolve().parent.parent / "demo_data"
PORTFOLIO = DEMO_DIR / "portfolio.csv"
TRUTH = DEMO_DIR / "truth.csv"
GAP_RUN = 6  # timestamps the "gap" series lacks in the file, besides one empty value cell
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
        else:
            assert prepared.flags == [], raw.series_id


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
