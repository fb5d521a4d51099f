"""Choosing the order of differencing d from unit-root and stationarity tests.

The decision combines two tests whose null hypotheses are opposite:

* KPSS (Kwiatkowski, Phillips, Schmidt & Shin 1992), null: the series is (level- or trend-)
  stationary; rejecting it is evidence for a unit root;
* ADF (Dickey & Fuller 1979; Said & Dickey 1984), null: the series has a unit root; rejecting it
  is evidence for stationarity.

At each level of differencing (levels, then the first difference) both are run with a
constant (``regression="c"``), and on the levels also with a constant and a trend (``"ct"``):

=======================  ======================  =============================================
KPSS (c)                 ADF (c)                 decision
=======================  ======================  =============================================
does not reject          rejects                 stationary: stop here (firm)
rejects                  does not reject         unit root: difference once more (firm), unless
                                                 KPSS(ct) does not reject and ADF(ct) rejects:
                                                 trend-stationary, d = 0 with a linear trend
                                                 leads, d = 1 searched too (uncertain);
                                                 uncertain when ADF's p-value is below
                                                 :data:`ADF_UNCERTAIN_P` or ADF(ct) rejects
does not reject          does not reject         the tests disagree (low power, near unit root);
                                                 on the first difference: stop at d = 1
rejects                  rejects                 the tests disagree (e.g. a break, long memory)
=======================  ======================  =============================================

The trend regressions (``"ct"``) are run on the levels of a series not seasonally differenced
only: on a seasonal difference a linear trend would be a quadratic one in the levels, which no
candidate carries, so there the level regressions decide alone. Measured on the real series of
README's Accuracy section: the monthly gasoline production of Wooldridge's barium data had got,
on its seasonal difference, d = 0 with an AR(1) and no growth at three origins; it now gets
d = 1, as the stepwise search does, and forecasts better at all three.

When the tests disagree the decision is *uncertain*: the engine keeps candidates for d and
d + 1 and ranks across them by a criterion computed on the same one-step level prediction
errors (see :func:`app.core.ranking.common_level_bic`). The primary d of an uncertain decision
is the differenced one when ADF's p-value exceeds :data:`ADF_UNCERTAIN_P` and the other one
otherwise. On the first difference a disagreement in which KPSS rejects is uncertain in the
same way between d = 1 and d = 2 (KPSS alone, as Hyndman & Khandakar (2008) decide d, would
difference again; ADF alone would not); one in which neither test rejects keeps d = 1, where
KPSS alone would stop too. A trend-stationary reading is a pre-test too: its linear trend is
extrapolated without end in the forecasts, so d = 1 is searched beside it and the same
criterion decides.

Measured on the real series of README's Accuracy section (573 forecasts, three origins): with
the first-difference disagreement searched, 9 suggestions changed, 4 for the better, and the
ratio to the stepwise search went from 0.996 to 0.993; with the trend-stationary reading
checked against d = 1, 10 changed, 7 for the better, 0.993 to 0.991.

KPSS p-values are interpolated in a table and clipped to [0.01, 0.10]; the decision uses the
5% critical value, never the clipped p-value.

Both tests need a complete series: missing points (NaN) are filled by linear interpolation
(:func:`app.core.prepare.interpolate_gaps`) for them alone; the fits that follow use the
observed points only. They run on the series centred and scaled to unit standard deviation
(:func:`standardised`): with a constant in the regression both statistics are unchanged by the
units, but statsmodels' least squares judge the rank of the design from its raw columns, and
on a series in the tens of trillions (a national output in currency units) ADF with a trend
dropped the trend column as rank-deficient and gave another lag length and statistic (-0.73
with 12 lags against -1.25 with 2 for US real GDP scaled by 1e10).

References
----------
.. [1] Kwiatkowski, D., Phillips, P.C.B., Schmidt, P. & Shin, Y. (1992). Testing the null
   hypothesis of stationarity against the alternative of a unit root. *J. Econometrics* 54, 159-178.
.. [2] Dickey, D.A. & Fuller, W.A. (1979). Distribution of the estimators for autoregressive
   time series with a unit root. *JASA* 74, 427-431.
.. [3] Hyndman, R.J. & Khandakar, Y. (2008). Automatic time series forecasting: the forecast
   package for R. *J. Statistical Software* 27(3) (d by repeated KPSS tests).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np
from statsmodels.tools.sm_exceptions import InterpolationWarning
from statsmodels.tsa.stattools import adfuller, kpss

from app.core.analysis import UnitRootTest
from app.core.p_values import p_words
from app.core.prepare import interpolate_gaps

TEST_LEVEL = 0.05
KPSS_LEVEL_KEY = "5%"
ADF_UNCERTAIN_P = 0.10
MAX_D = 2
LEVEL_NAMES = ("levels", "first difference", "second difference")
SEASONAL_LEVEL_NAMES = ("seasonal difference", "seasonal and first difference", "seasonal and second difference")


@dataclass
class DifferencingDecision:
    """The chosen d, how sure it is, and every test behind it."""

    d: int
    uncertain: bool
    alternative_d: int | None
    trend_stationary: bool
    tests: list[UnitRootTest] = field(default_factory=list)
    explanation: list[str] = field(default_factory=list)


def kpss_test(x: np.ndarray, regression: str, on: str) -> UnitRootTest:
    """KPSS test with automatic bandwidth (Hobijn et al. 1998), decision at the 5% level."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", InterpolationWarning)
        res = kpss(x, regression=regression, nlags="auto", result_object=True)
    stat = float(res.statistic)
    return UnitRootTest(
        name="KPSS", regression=regression, on=on, statistic=stat, p_value=float(res.pvalue),
        lags=int(res.lags), rejects=stat > res.critical_values[KPSS_LEVEL_KEY],
        null="stationary" if regression == "c" else "trend-stationary",
    )


def adf_test(x: np.ndarray, regression: str, on: str) -> UnitRootTest:
    """Augmented Dickey-Fuller test, lag length by AIC, decision at the 5% level."""
    res = adfuller(x, regression=regression, autolag="AIC", result_object=True)
    return UnitRootTest(
        name="ADF", regression=regression, on=on, statistic=float(res.statistic),
        p_value=float(res.pvalue), lags=int(res.lags), rejects=res.pvalue < TEST_LEVEL, null="unit root",
    )


def standardised(values: np.ndarray) -> np.ndarray:
    """``values`` centred on their mean and divided by their standard deviation (as they are when constant)."""
    spread = float(np.std(values))
    centred = values - float(np.mean(values))
    return centred / spread if spread > 0 else centred


def long_run_t(w: np.ndarray) -> float:
    """|mean| over its standard error for the observed values of ``w`` (NaN marks a missing
    one), the standard error from the Newey-West long-run variance (Bartlett weights,
    truncation lag floor(4 (n / 100)^(2/9))), so that autocorrelation does not make a mean look
    clearly away from 0; 0 for fewer than two values or no spread.

    A series of strongly autocorrelated values around 0 (the Southern Oscillation Index, a
    river's level anomalies) has an ordinary standard error of the mean several times too
    small, and its mean would look far from 0 by an ordinary t.

    References
    ----------
    .. [1] Newey, W.K. & West, K.D. (1987). A simple, positive semi-definite, heteroskedasticity
       and autocorrelation consistent covariance matrix. *Econometrica* 55, 703-708.
    .. [2] Newey, W.K. & West, K.D. (1994). Automatic lag selection in covariance matrix
       estimation. *Rev. Econ. Stud.* 61, 631-653 (the truncation lag's rule of thumb, from memory).
    """
    present = w[~np.isnan(w)]
    n = present.size
    if n < 2:
        return 0.0
    centred = present - present.mean()
    lags = min(int(4 * (n / 100) ** (2 / 9)), n - 1)
    long_run = float(centred @ centred) / n
    for j in range(1, lags + 1):
        long_run += 2 * (1 - j / (lags + 1)) * float(centred[j:] @ centred[:-j]) / n
    return float(abs(present.mean()) / math.sqrt(long_run / n)) if long_run > 0 else 0.0


def choose_differencing(x: np.ndarray, max_d: int = MAX_D, seasonally_differenced: bool = False) -> DifferencingDecision:
    """Choose d in {0, .., max_d} by KPSS cross-checked with ADF (see the module notes).

    Parameters
    ----------
    x : ndarray
        The series (already transformed and seasonally differenced if that applies); missing
        points (NaN) are interpolated for the tests.
    max_d : int
        Highest order of differencing considered.
    seasonally_differenced : bool
        Whether ``x`` is a seasonal difference: the tests and the words then name the series
        they ran on as such (:data:`SEASONAL_LEVEL_NAMES`) rather than as the levels.
    """
    values = standardised(interpolate_gaps(x))
    tests: list[UnitRootTest] = []
    words: list[str] = []
    for d in range(max_d + 1):
        on = (SEASONAL_LEVEL_NAMES if seasonally_differenced else LEVEL_NAMES)[d]
        kp, ad = kpss_test(values, "c", on), adf_test(values, "c", on)
        tests += [kp, ad]
        if d == max_d:
            words.append(f"Stopped at d = {max_d}, the most differencing considered.")
            return DifferencingDecision(d, False, None, False, tests, words)
        if not kp.rejects and ad.rejects:
            words.append(f"On the {on}, KPSS does not reject stationarity and ADF rejects a unit root at 5%: no further differencing.")
            return DifferencingDecision(d, False, None, False, tests, words)
        if kp.rejects and not ad.rejects:
            if d == 0 and not seasonally_differenced:
                kp_ct, ad_ct = kpss_test(values, "ct", on), adf_test(values, "ct", on)
                tests += [kp_ct, ad_ct]
                if not kp_ct.rejects and ad_ct.rejects:
                    words.append(
                        "KPSS rejects level stationarity, but with a trend term KPSS does not reject and ADF rejects a "
                        "unit root: trend-stationary, so d = 0 with a linear trend leads. A fitted trend is extrapolated "
                        "without end, so candidates are searched for d = 1 too; the fits decide between them."
                    )
                    return DifferencingDecision(0, True, 1, True, tests, words)
                if ad_ct.rejects or ad.p_value < ADF_UNCERTAIN_P:
                    reason = "ADF with a trend term rejects a unit root" if ad_ct.rejects else f"ADF's {p_words(ad.p_value)} is below {ADF_UNCERTAIN_P}"
                    return _uncertain(tests, words, on, 0, f"KPSS rejects stationarity, but {reason}")
            elif d == 0 and ad.p_value < ADF_UNCERTAIN_P:
                return _uncertain(tests, words, on, 0, f"KPSS rejects stationarity, but ADF's {p_words(ad.p_value)} is below {ADF_UNCERTAIN_P}")
            words.append(f"On the {on}, KPSS rejects stationarity and ADF does not reject a unit root at 5%: "
                         f"{'differenced' if d == 0 else 'differenced again'} (d = {d + 1} at least).")
            values = np.diff(values)
            continue
        if d >= 1 and not kp.rejects:
            words.append(f"On the {on} the tests disagree; a further difference needs both to agree, so d = {d}.")
            return DifferencingDecision(d, False, None, False, tests, words)
        verdict = "neither rejects its null" if not kp.rejects else "both reject their nulls"
        return _uncertain(tests, words, on, d, f"the tests disagree ({verdict}: KPSS {kp.statistic:.3f}, ADF {p_words(ad.p_value)})")
    raise AssertionError("unreachable")


def _uncertain(tests: list[UnitRootTest], words: list[str], on: str, d: int, why: str) -> DifferencingDecision:
    """An uncertain decision between ``d`` and ``d + 1``; the lead follows ADF's p-value."""
    adf = next(t for t in tests if t.name == "ADF" and t.regression == "c" and t.on == on)
    primary, other = (d + 1, d) if adf.p_value > ADF_UNCERTAIN_P else (d, d + 1)
    words.append(
        f"On the {on} {why}. Candidates are searched for d = {d} and d = {d + 1} (d = {primary} first, as ADF's "
        f"p-value is {'above' if primary > d else 'below'} {ADF_UNCERTAIN_P}); the fits decide between them."
    )
    return DifferencingDecision(primary, True, other, False, tests, words)
