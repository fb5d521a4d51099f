"""Seasonal period, seasonal strength and the seasonal differencing decision for one series.

* The default period ``s`` follows from the sampling frequency (:func:`default_period`); a user
  may override it, and :func:`validate_period` rejects values that make no sense.
* The seasonal strength ``F_S`` of Wang, Smith & Hyndman (2006) is read from a robust STL
  decomposition (:func:`seasonal_strength`); the series is differenced once at lag ``s`` when
  ``F_S`` exceeds :data:`SEASONAL_STRENGTH_THRESHOLD` and the series holds at least
  :data:`MIN_SEASONS_DIFFERENCING` full seasons (:func:`choose_seasonal_differencing`); with
  only two, the differences must also show the season (:func:`season_in_differences`),
  as F_S alone is unreliable on two seasons; on three or four, without that sign, D is only
  left open. When only the ordinary (non-robust) STL fit exceeds the threshold, D is
  uncertain and both D are searched.
* :func:`seasonal_structure_present` tells whether the correlogram shows anything at the
  seasonal lags, so the engine can say "no seasonal structure at lag s" instead of forcing a
  seasonal model; :func:`seasonal_lags` lists the lags ``s, 2s, ...`` a correlogram marks.
* When the strength calls for a seasonal difference, the Canova-Hansen test of a fixed seasonal
  pattern (:mod:`app.core.seasonal_stability`) runs beside it and its result is reported. It
  does not overrule the strength: on short monthly series it has little power (a monthly
  seasonal random walk was rejected in 0 of 60 runs at 72 points, 46 of 60 at 120 and 60 of 60
  at 240; measured once, seed 11, with the simulation of ``tests/core/test_seasonal_stability.py``),
  so a non-rejection is weak evidence on its own. The engine acts on it only together with the
  leader's own sign of a fixed pattern, a seasonal MA near −1
  (:func:`app.core.identify.fixed_seasonality_words`).

STL and the Canova-Hansen test need a complete series: a series with missing points (NaN) is
filled by linear interpolation (:func:`app.core.prepare.interpolate_gaps`) for them.

The OCSB test (Osborn, Chui, Smith & Birchenhall 1988) is not implemented: statsmodels does not
have it and its critical values could not be checked against a published table here.

References
----------
.. [1] Wang, X., Smith, K.A. & Hyndman, R.J. (2006). Characteristic-based clustering for time
   series data. *Data Mining and Knowledge Discovery* 13, 335-364.
.. [2] Hyndman, R.J. & Athanasopoulos, G. (2021). *Forecasting: Principles and Practice*,
   3rd ed., OTexts, §2.1 (seasonal periods), §4.3 (STL features), §9.1 (seasonal differencing).
.. [3] Cleveland, R.B., Cleveland, W.S., McRae, J.E. & Terpenning, I. (1990). STL: a
   seasonal-trend decomposition procedure based on loess. *J. Official Statistics* 6, 3-73.
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from pandas.tseries.frequencies import to_offset
from scipy.stats import f as f_distribution
from scipy.stats import norm
from statsmodels.tsa.seasonal import STL

from app.core.correlogram import autocorrelations
from app.core.errors import OrderError
from app.core.prepare import MONTH_OFFSETS, QUARTER_OFFSETS, interpolate_gaps
from app.core.seasonal_stability import SeasonalStability, canova_hansen
from app.core.vocabulary import Flag

SEASONAL_STRENGTH_THRESHOLD = 0.64
MIN_SEASONS_SEASONAL_TERMS = 2
MIN_SEASONS_DIFFERENCING = 3
# Below this many seasons a strength above the threshold does not decide alone: without a second
# sign of a season (season_in_differences) D is left open when the robust STL fit exceeds the
# threshold, and D = 0 when only the ordinary one does. Measured with 200 simulated monthly series
# per process and length (seed [7, n, process], 2026-12-05, a /tmp script): on white noise, random
# walks, AR(1) phi = 0.8 and trends plus noise the strength alone differenced 8-19% outright at 36
# points and left D open in 56-70% more (30-46% at 48, 4-14% at 60, 2-7% at 72); now 0-2%
# outright and 12-18% open at 36, 0-1% and 2-5% at 48. Through the whole engine (30 series
# each, seed [11, n, process]) 36 months of white noise got a seasonal model 10 times in 30
# before and 2 after, random walks 5 and 1; a seasonal random walk plus noise 30 and 30 (28 and
# 25 when its steps are as large as the noise); a fixed monthly profile as large as the noise 28
# and 23 (there the seasonal naive forecast and the mean have the same expected error).
MIN_SEASONS_STRENGTH_ALONE = 5
# The level of each of the two signs of a season in the first differences
# (:func:`season_in_differences`): together at most twice that under a random walk (Bonferroni);
# the third sign, not a test at a set level, adds a few tenths of a percent (SEASONAL_ERROR_SHARE_SIGN).
SIGN_LEVEL = 0.025
# The third sign of season_in_differences: the mean square of the seasonal difference at most this
# share of the variance around a fitted line. For a fixed seasonal pattern of variance v_S plus
# white noise of variance v, the share is about 2v / (v_S + v) (less the little of the pattern the
# line takes up): below 0.5 when v_S > 3v, where the value a season back predicts with at most half
# the squared error of the line. The factor 2 is our margin for estimating on two seasons, set on
# simulated forecasts (2026-12-05, a /tmp script; each series two seasons long, the next season
# held out, the engine's suggestion fitted and forecast): of 60 series each (seed 7), a monthly
# fixed profile twice the noise's size and a weekly wave 4 times the size of AR(1) noise
# (phi = 0.7) got this sign alone on 17 and 22, and the seasonal difference it brought made
# their forecasts 38% and 45% better (geometric mean of the MASE ratios); random walks, AR(1)
# with phi = 0.9 and level shifts at the start of the second season got it on none. On 600
# series each of 24 monthly and 104 weekly points (seed 3), white noise, AR(1) with phi 0.8 and
# 0.95, random walks and trends plus noise were differenced in 0-2.3% with the sign and without
# it alike (2.2% against 2.0% at most); a random walk's median share is 4.9. At a share of 1 (measured with the variance
# form below) it also fired on seasons about as large as the noise, whose forecasts it left about as good, and on
# random walks and AR(1) with phi 0.8-0.95, whose forecasts it made 1.2-2 times worse. The mean
# square, not the variance around the seasonal difference's mean: a review found that with the
# variance a level shift at the start of the second season passed (the seasonal difference is
# then the shift plus noise, of small variance), and the seasonal difference with a drift repeated
# the shift in the forecast, 7-9 times worse; with the mean square none of 400 such series passes
# (200 each at 24 monthly and 104 weekly points, seed 77), against 150 with the variance.
SEASONAL_ERROR_SHARE_SIGN = 0.5
# Harmonics of the period in the F-test of season_in_differences: two give a smooth seasonal
# shape for four degrees of freedom, which two seasons of data can bear (our choice; a few
# Fourier terms for a long period are common practice).
HARMONICS = 2
STL_ROBUST = True

_ONE_HOUR = pd.Timedelta(hours=1)
_PERIOD_OF_OFFSET: tuple[tuple[tuple[type, ...], int], ...] = (
    ((pd.offsets.Day,), 7),
    ((pd.offsets.BusinessDay,), 5),
    ((pd.offsets.Week,), 52),
    (MONTH_OFFSETS, 12),
    (QUARTER_OFFSETS, 4),
)


@dataclass(frozen=True)
class SeasonalStrength:
    """Trend and seasonal strength of one series from its STL decomposition.

    ``seasonal`` is F_S = max(0, 1 - Var(R)/Var(S+R)) and ``trend`` is
    F_T = max(0, 1 - Var(R)/Var(T+R)); the variances (divisor n - 1) are kept so the figures
    can be checked.
    """

    seasonal: float
    trend: float
    period: int
    var_remainder: float
    var_seasonal_remainder: float
    var_trend_remainder: float
    robust: bool


@dataclass
class SeasonalDifferencing:
    """The seasonal differencing decision D in {0, 1} with the figures behind it.

    ``strength`` and ``trend_strength`` are F_S and F_T (None when the series is too short for a
    decomposition or has no period); ``seasons`` counts full seasons; ``enough_seasons`` says
    whether there are enough of them for D = 1 on the strength alone and
    ``seasonal_terms_possible`` whether there are enough for any seasonal AR or MA term (and
    for D = 1 with a second sign, :func:`choose_seasonal_differencing`). ``flags`` holds
    ``too_few_seasons`` below :data:`MIN_SEASONS_DIFFERENCING` full seasons, and
    ``uncertain_seasonal_differencing`` when the two strength measures disagree, or when on
    three or four seasons the differences do not show the season the strength reads; then
    ``alternative_D`` is the other D, searched as well.
    """

    D: int
    period: int | None
    strength: float | None
    trend_strength: float | None
    threshold: float
    seasons: int
    enough_seasons: bool
    seasonal_terms_possible: bool
    flags: list[str] = field(default_factory=list)
    explanation: list[str] = field(default_factory=list)
    stability: SeasonalStability | None = None
    alternative_D: int | None = None

    @property
    def choices(self) -> tuple[int, ...]:
        """The D to search, the decision's own first (two when the decision is uncertain)."""
        return (self.D,) if self.alternative_D is None else (self.D, self.alternative_D)


def default_period(freq: str) -> int | None:
    """Seasonal period implied by a sampling frequency.

    ===========================================  ======  ====================
    frequency (pandas alias)                     period  cycle
    ===========================================  ======  ====================
    hourly (``h``, ``60min``)                    24      a day
    daily (``D``)                                7       a week
    business daily (``B``)                       5       a working week
    weekly (``W-SUN``, ``W-MON`` ...)            52      a year (52.18 weeks)
    monthly (``MS``, ``ME``, ``BMS``, ``BME``)   12      a year
    quarterly (``QS``, ``QE``, ``QS-OCT`` ...)   4       a year
    yearly, integer steps, anything else         None    non-seasonal
    ===========================================  ======  ====================

    Multiples such as ``2D`` or ``2h`` and sub-hourly data have no default: their cycles are
    either not a whole number of steps (3.5 two-day steps a week) or too long for seasonal
    ARIMA fits to run in reasonable time (96 quarter-hours a day); the user can still give
    such a period explicitly. Weekly data get 52, the usual rounding of the
    52.18 weeks in a year.

    Parameters
    ----------
    freq : str
        A frequency as :func:`app.core.prepare.prepare_series` reports it (a pandas offset
        alias, ``"step"`` or ``"N steps"``).

    References
    ----------
    .. [1] Hyndman & Athanasopoulos (2021), *Forecasting: Principles and Practice*, 3rd ed.,
       §2.1, table of seasonal periods.
    """
    try:
        offset = to_offset(freq)
    except ValueError:
        return None
    if isinstance(offset, pd.offsets.Tick):
        return 24 if pd.Timedelta(offset) == _ONE_HOUR else None
    if offset.n != 1:
        return None
    for kinds, period in _PERIOD_OF_OFFSET:
        if isinstance(offset, kinds):
            return period
    return None


def validate_period(period: int | None, n: int, series_id: str | None = None) -> int | None:
    """Check a seasonal period given for a series of ``n`` observations.

    ``None`` means non-seasonal and is returned as is. A period must be a whole number of at
    least 2 (a "period" of 1 is no seasonality at all) and shorter than the series; whether
    there are enough full seasons for a seasonal model is decided later and flagged, not
    raised (see :func:`choose_seasonal_differencing`).

    Raises
    ------
    OrderError
        The period is not a whole number, is below 2, or is not shorter than the series.
    """
    if period is None:
        return None
    where = f"series {series_id!r}: " if series_id is not None else ""
    if isinstance(period, bool) or not isinstance(period, numbers.Integral):
        raise OrderError(f"{where}seasonal period {period!r} is not a whole number (give e.g. 12, or none)")
    s = int(period)
    if s < 2:
        raise OrderError(
            f"{where}seasonal period {s} is not allowed: a period must be at least 2 "
            "(use none for a non-seasonal model)"
        )
    if s >= n:
        raise OrderError(
            f"{where}seasonal period {s} is not shorter than the series ({n} observations); "
            "a seasonal model needs several full seasons"
        )
    return s


def seasonal_strength(x: np.ndarray, period: int, robust: bool = STL_ROBUST) -> SeasonalStrength:
    """Seasonal and trend strength of Wang, Smith & Hyndman (2006) from an STL fit, robust by default.

    With STL components trend T, seasonal S and remainder R,

    ``F_S = max(0, 1 - Var(R) / Var(S + R))`` and ``F_T = max(0, 1 - Var(R) / Var(T + R))``.

    A value near 1 means the seasonal (trend) component dominates the noise. When
    ``Var(S + R)`` is zero (no seasonal or remainder variation at all) F_S is 0.

    Parameters
    ----------
    x : ndarray
        The series, finite, with at least two full seasons.
    period : int
        Seasonal period, at least 2.
    robust : bool
        Whether STL fits robustly (its outer loop of bisquare weights).

    Notes
    -----
    STL is statsmodels' ``STL(x, period=period, robust=robust)`` with its other defaults
    (seasonal smoother of length 7). The robust fit (common practice) puts outliers in the
    remainder instead of letting them bend the seasonal component; on short noise-only series
    it also gives F_S above the threshold far less often than the non-robust fit.

    References
    ----------
    .. [1] Wang, Smith & Hyndman (2006), *Data Mining and Knowledge Discovery* 13, 335-364.
    .. [2] Hyndman & Athanasopoulos (2021), *Forecasting: Principles and Practice*, 3rd ed., §4.3.
    .. [3] Cleveland et al. (1990), *J. Official Statistics* 6, 3-73 (STL, robust fitting).
    """
    values = np.asarray(x, dtype=float)
    if values.ndim != 1 or not np.isfinite(values).all():
        raise ValueError("seasonal_strength needs a one-dimensional series of finite values")
    if period < 2 or values.size < MIN_SEASONS_SEASONAL_TERMS * period:
        raise ValueError(
            f"seasonal_strength needs period >= 2 and at least {MIN_SEASONS_SEASONAL_TERMS} full seasons "
            f"(period {period}, {values.size} observations)"
        )
    fit = STL(values, period=period, robust=robust).fit()
    var_r = float(np.var(fit.resid, ddof=1))
    var_sr = float(np.var(fit.seasonal + fit.resid, ddof=1))
    var_tr = float(np.var(fit.trend + fit.resid, ddof=1))
    return SeasonalStrength(
        seasonal=_strength(var_r, var_sr),
        trend=_strength(var_r, var_tr),
        period=period,
        var_remainder=var_r,
        var_seasonal_remainder=var_sr,
        var_trend_remainder=var_tr,
        robust=robust,
    )


def _strength(var_remainder: float, var_component_remainder: float) -> float:
    if var_component_remainder <= 0.0:
        return 0.0
    return max(0.0, 1.0 - var_remainder / var_component_remainder)


def exact_repeat(x: np.ndarray) -> int | None:
    """The smallest ``k`` from 2 to ``n / 3`` for which the series repeats itself exactly every
    ``k`` points over at least three cycles (``x[t] == x[t - k]`` at every pair present, and at
    least ``2k`` such pairs; missing points skipped), or None.

    Such a series has nothing left for an ARIMA model once differenced at lag ``k``, and before
    that it breaks the tests: statsmodels' KPSS bandwidth came out infinite on 21 monthly points
    repeating every 3. Three cycles, not two: a review found two equal sales in 48 otherwise
    empty months, 24 apart, read as a repeat (and up to 4% of simulated sparse demand refused);
    intermittent demand is not checked at all (the caller, :mod:`app.core.identify`). Lags are
    tried only where the first observed value comes back, so the check costs one pass over the
    series and one comparison per such lag.
    """
    present = np.flatnonzero(~np.isnan(x))
    if present.size < 6:
        return None
    first, n = int(present[0]), x.size
    later = x[first + 2:first + n // 3 + 1]
    for k in np.flatnonzero(later == x[first]) + 2:
        a, b = x[k:], x[:-k]
        pairs = ~np.isnan(a) & ~np.isnan(b)
        if pairs.sum() >= 2 * k and np.array_equal(a[pairs], b[pairs]):
            return int(k)
    return None


def choose_seasonal_differencing(x: np.ndarray, period: int | None) -> SeasonalDifferencing:
    """Decide whether to difference once at lag ``period`` (D = 1) or not (D = 0).

    Rule: D = 1 when the seasonal strength F_S (:func:`seasonal_strength`) exceeds
    :data:`SEASONAL_STRENGTH_THRESHOLD` = 0.64 and the series holds at least
    :data:`MIN_SEASONS_DIFFERENCING` = 3 full seasons; with two full seasons only when, besides,
    the differences show the season (:func:`season_in_differences`), and on three or four
    without that sign D is left open (both searched, the fits deciding); otherwise D = 0 (D = 2
    is never proposed, common practice).

    Why a second sign on few seasons: STL's strength rests on two cycles there and exceeds the
    threshold on series with no season at all. In 300 simulated series each (seed 11, 2026-12-04,
    a ``/tmp`` script; figures from that one run): at 24 monthly points on 14% of white noise,
    37% of random walks and 29% of linear trends plus noise; at 104 weekly points on 69% of
    random walks and 89% of trends plus noise. Each of the two signs of
    :func:`season_in_differences` is a test at 2.5% under a random walk; F_S and the harmonic
    sign together came out on 0-5% of those series, and took a fixed pattern twice the size of
    a random walk's steps on 88-100% of them; the lag-s sign took 98% of weekly seasonal
    random walks of 104 points in a 200-run simulation of the same day (12% of monthly ones of
    24 points: two monthly seasons say little), which the harmonic sign misses. The third sign,
    the seasonal difference's mean square (:data:`SEASONAL_ERROR_SHARE_SIGN`), takes a smooth season
    much larger than the noise, which the first differences shrink below both tests at a long
    period: two years of weekly temperatures, where D = 0 forecast a season ahead 2.8 times worse
    than the seasonal naive (README, Accuracy).
    ``tests/core/test_seasonality.py`` repeats a smaller version. On three or four seasons it is
    not much firmer (the figures beside :data:`MIN_SEASONS_STRENGTH_ALONE`), so there a strength
    without the second sign leaves D open, and an ordinary fit above the threshold with the
    robust one below it, without the sign, does not difference. From
    :data:`MIN_SEASONS_STRENGTH_ALONE` seasons on the strength alone decides, unless the robust
    and the ordinary STL fit fall on opposite sides of the threshold (the robust one below):
    then D is uncertain and both D are searched, the fits ranked across them by the BIC of
    their one-step level prediction errors (:func:`app.core.ranking.rank_across_differencing`),
    as an uncertain d is.

    Why two fits: the robust fit gives outliers zero weight and so leaves them, and any sharp
    change of the seasonal shape, in the remainder, which lowers F_S; the threshold comes from
    practice with the ordinary fit. On 200 simulated series each without a season (white noise,
    random walks, AR(1) with phi = 0.8, trend plus noise; seed 11, 2026-12-05, a ``/tmp``
    script) the ordinary fit exceeds 0.64 on 3-13% at 60-72 monthly points and on at most 3%
    from 84, the robust fit on at most 1%; both exceed it on every seasonal random walk. On
    real monthly series the robust fit alone kept D = 0 where the ordinary one and the
    stepwise search of Hyndman & Khandakar (2008) difference, and the forecasts with D = 0
    were worse (README, Accuracy).

    Minimum lengths (common practice): 3 full seasons for a seasonal difference, which costs a
    whole season of observations; 2 full seasons for any seasonal AR or MA term, which needs
    the correlogram to reach lag 2s. Below 3 seasons the result carries the flag
    ``too_few_seasons``; below 2, F_S is not computed at all.

    The threshold 0.64 is common practice in Hyndman's later work (from memory: FPP3 §9.1
    states it for ``unitroot_nsdiffs``, and R's ``forecast::nsdiffs`` uses it by default); it
    does not come from Wang, Smith & Hyndman (2006), who define the measure only.

    Parameters
    ----------
    x : ndarray
        The series (after any variance-stabilising transform); missing points (NaN) are
        interpolated for STL and the Canova-Hansen test.
    period : int or None
        A period already checked by :func:`validate_period`; None means non-seasonal.

    References
    ----------
    .. [1] Wang, Smith & Hyndman (2006), *Data Mining and Knowledge Discovery* 13, 335-364.
    .. [2] Hyndman & Athanasopoulos (2021), *Forecasting: Principles and Practice*, 3rd ed.,
       §4.3 and §9.1.
    """
    threshold = SEASONAL_STRENGTH_THRESHOLD
    if period is None:
        return SeasonalDifferencing(
            D=0, period=None, strength=None, trend_strength=None, threshold=threshold, seasons=0,
            enough_seasons=False, seasonal_terms_possible=False,
            explanation=["No seasonal period: no seasonal differencing."],
        )
    n = int(np.asarray(x).size)
    seasons = n // period
    enough = seasons >= MIN_SEASONS_DIFFERENCING
    terms_possible = seasons >= MIN_SEASONS_SEASONAL_TERMS
    result = SeasonalDifferencing(
        D=0, period=period, strength=None, trend_strength=None, threshold=threshold, seasons=seasons,
        enough_seasons=enough, seasonal_terms_possible=terms_possible,
    )
    if not terms_possible:
        result.flags.append(Flag.TOO_FEW_SEASONS)
        result.explanation.append(
            f"Only {_seasons_text(seasons)} of {period} in {n} observations: at least "
            f"{MIN_SEASONS_SEASONAL_TERMS} are needed for any seasonal term; no seasonal differencing."
        )
        return result
    filled = interpolate_gaps(x)
    measure = seasonal_strength(filled, period)
    result.strength, result.trend_strength = measure.seasonal, measure.trend
    above = measure.seasonal > threshold
    comparison = f"Seasonal strength {_beside(measure.seasonal, threshold)} {'>' if above else '<='} {threshold:.2f}"
    if not enough:
        result.flags.append(Flag.TOO_FEW_SEASONS)
        # The second sign is looked at only when the strength alone would difference.
        sign = season_in_differences(filled, period) if above else None
        if sign is not None and sign.present:
            result.D = 1
            result.explanation.append(
                f"{comparison}, and with only {_seasons_text(seasons)} of {period} in {n} observations the "
                f"differences show the season too ({sign.words()}) -> differenced once at lag {period}."
            )
        else:
            result.explanation.append(
                f"{comparison}, {'but' if above else 'and'} only {_seasons_text(seasons)} of {period} in {n} observations"
                + (f" and the differences do not show the season ({sign.words()})" if sign is not None else "")
                + f"; not differenced (on fewer than {MIN_SEASONS_DIFFERENCING} seasons the strength alone does not decide)."
            )
    elif above and (hidden := _season_not_in_differences(filled, period, seasons)):
        _leave_open(result, f"{comparison}, but with only {_seasons_text(seasons)} of {period} in {n} observations the "
                            f"differences do not show the season ({hidden.words()})", filled, period)
    elif above:
        result.D = 1
        result.explanation.append(f"{comparison} -> differenced once at lag {period}.")
        _test_stability(result, filled, period)
    elif (plain := seasonal_strength(filled, period, robust=False).seasonal) > threshold and (
            hidden := _season_not_in_differences(filled, period, seasons)):
        result.explanation.append(
            f"{comparison} by the robust STL fit and {_beside(plain, threshold)} by the ordinary one, but with only "
            f"{_seasons_text(seasons)} of {period} in {n} observations the differences do not show the season "
            f"({hidden.words()}): no seasonal differencing at lag {period}.")
    elif plain > threshold:
        _leave_open(result, f"{comparison} by the robust STL fit, but {_beside(plain, threshold)} by the ordinary fit",
                    filled, period)
    else:
        result.explanation.append(f"{comparison} -> no seasonal differencing at lag {period}.")
    return result


def _leave_open(result: SeasonalDifferencing, why: str, filled: np.ndarray, period: int) -> None:
    """D left uncertain for ``why``: both D searched, D = 0 first, the fits deciding."""
    result.alternative_D = 1
    result.flags.append(Flag.UNCERTAIN_SEASONAL_DIFFERENCING)
    result.explanation.append(f"{why}: the seasonal difference is uncertain. Candidates are searched without and with a "
                              f"difference at lag {period} (without first); the fits decide between them.")
    _test_stability(result, filled, period)


def _season_not_in_differences(filled: np.ndarray, period: int, seasons: int) -> SeasonInDifferences | None:
    """The signs of :func:`season_in_differences` when a series of fewer than
    :data:`MIN_SEASONS_STRENGTH_ALONE` seasons shows neither of them; None otherwise."""
    if seasons >= MIN_SEASONS_STRENGTH_ALONE:
        return None
    sign = season_in_differences(filled, period)
    return None if sign.present else sign


def _test_stability(result: SeasonalDifferencing, filled: np.ndarray, period: int) -> None:
    """The Canova-Hansen test beside a seasonal difference the strength calls for or leaves open,
    its words added to ``result``'s; none where the first differences repeat their season so
    nearly exactly that the long-run covariance of the test's scores is singular."""
    try:
        result.stability = canova_hansen(filled, period)
    except np.linalg.LinAlgError:
        result.explanation.append("The Canova-Hansen test of seasonal stability cannot be computed: the first differences "
                                  "repeat their seasonal pattern so nearly exactly that its long-run covariance is singular.")
        return
    result.explanation.append(result.stability.words())


def _beside(value: float, threshold: float) -> str:
    """``value`` to two decimals, or three where two would make it read as the threshold."""
    text = f"{value:.2f}"
    return f"{value:.3f}" if float(text) == threshold else text


@dataclass(frozen=True)
class SeasonInDifferences:
    """The three signs of a season in the differences (:func:`season_in_differences`)."""

    correlation: float
    correlation_bound: float
    harmonic_p: float
    seasonal_error_share: float

    @property
    def present(self) -> bool:
        return (self.correlation > self.correlation_bound or self.harmonic_p < SIGN_LEVEL
                or self.seasonal_error_share < SEASONAL_ERROR_SHARE_SIGN)

    def words(self) -> str:
        return (f"first differences: lag-s autocorrelation {self.correlation:.2f} against {self.correlation_bound:.2f}, "
                f"first {HARMONICS} harmonics p = {self.harmonic_p:.3g} against {SIGN_LEVEL}; seasonal difference: "
                f"mean square {self.seasonal_error_share:.2f} of the variance around a line, against "
                f"{SEASONAL_ERROR_SHARE_SIGN}")


def season_in_differences(x: np.ndarray, period: int) -> SeasonInDifferences:
    """Three signs of a season in the differences of ``x``: two in the first differences, each a
    test at :data:`SIGN_LEVEL` under a random walk, whose first differences are white noise, and
    one in the seasonal difference.

    * Their sample autocorrelation at lag ``period`` above ``z / sqrt(m)`` on ``m`` differences
      (one-sided, ``z`` the upper ``SIGN_LEVEL`` normal quantile): about ``N(0, 1/m)`` under white
      noise and under the MA(1) of a trend plus noise (Bartlett's formula; Box, Jenkins,
      Reinsel & Ljung 2015, §2.1.6, section from memory). A changing season repeats in the
      differences and makes it positive (ch. 9).
    * The F-test of the first :data:`HARMONICS` harmonics of the period (differenced, beside a
      constant) in a least-squares regression of the differences: exact under Gaussian white
      noise, and conservative under over-differenced or stationary noise, whose spectrum is
      low where the harmonics are. It has the power the autocorrelation lacks on a smooth
      pattern of a long period, whose week-to-week change is small next to the noise (Harvey
      1989, §2.3.4, trigonometric seasonality, section from memory).
    * The mean square of the seasonal difference ``x_t - x_(t-period)`` as a share of the
      residual variance of a straight line fitted to ``x`` by least squares, below
      :data:`SEASONAL_ERROR_SHARE_SIGN`: the value a season back predicts the series at least
      twice as well in squared error as the line. Comparing the variance of a difference with
      the series' own is a check of differencing in common practice (an over-difference raises
      it); here it sees a smooth pattern of a long period that the first differences shrink to
      2 sin(pi / s) of its size. A random walk's seasonal difference has the variance of
      ``period`` steps, several times a line's residual variance over two seasons (median
      share 4.9), so it seldom passes (figures beside the constant). The mean square and not the variance around the
      difference's mean: a level shift at the start of the second season leaves the seasonal
      difference nearly constant, and its variance small.
    """
    values = np.asarray(x, dtype=float)
    d = np.diff(values)
    around_mean = float(np.sum((d - d.mean()) ** 2))  # the residual sum of squares of the constant alone
    correlation = float(autocorrelations(d, period)[period]) if around_mean > 0 and d.size > period else 0.0
    t = np.arange(d.size + 1)
    waves = []
    for j in range(1, min(HARMONICS, period // 2) + 1):
        waves.append(np.cos(2 * np.pi * j * t / period))
        if 2 * j != period:  # at the Nyquist frequency the sine is zero
            waves.append(np.sin(2 * np.pi * j * t / period))
    design = np.column_stack([np.ones(d.size), np.diff(np.column_stack(waves), axis=0)])
    q, df = design.shape[1] - 1, d.size - design.shape[1]
    full = float(np.sum((d - design @ np.linalg.lstsq(design, d, rcond=None)[0]) ** 2))
    harmonic_p = 1.0
    if df > 0 and full > 0:
        statistic = (around_mean - full) / q / (full / df)
        harmonic_p = float(f_distribution.sf(statistic, q, df))
    return SeasonInDifferences(correlation, float(norm.ppf(1 - SIGN_LEVEL) / np.sqrt(d.size)), harmonic_p,
                               _seasonal_error_share(values, period))


def _seasonal_error_share(x: np.ndarray, period: int) -> float:
    """The mean square of the seasonal difference of ``x`` as a share of the residual variance
    of a least-squares line through ``x`` (each divided by its count); infinite when the line
    fits exactly."""
    steps = np.arange(x.size, dtype=float)
    line = np.polynomial.polynomial.polyfit(steps, x, 1)
    around_line = float(np.mean((x - np.polynomial.polynomial.polyval(steps, line)) ** 2))
    seasonal = x[period:] - x[:-period]
    return float(np.mean(seasonal**2)) / around_line if around_line > 0 else math.inf


def _seasons_text(seasons: int) -> str:
    return f"{seasons} full season" + ("" if seasons == 1 else "s")


def seasonal_structure_present(acf_values: np.ndarray, band: np.ndarray | float, period: int) -> bool:
    """Whether the ACF shows anything at the seasonal lags ``s`` or ``2s``.

    Rule (kept simple on purpose): structure is present when ``|r_s|`` exceeds the band at lag
    ``s``, or ``|r_2s|`` exceeds the band at lag ``2s`` (checked only when the correlogram
    reaches lag ``2s``). A seasonal AR term shows a decaying run of spikes at s, 2s, ...; a
    seasonal MA(1) term a single spike at s; an unneeded seasonal difference a negative spike
    at s: each passes this rule. Use it on the series as it will be modelled
    (transformed and differenced), or a trend can hide the seasonal lags behind a wide
    Bartlett band.

    Parameters
    ----------
    acf_values : ndarray
        ACF at lags 1..K, ``acf_values[k - 1]`` being lag k (as in
        :class:`app.core.correlogram.Correlogram`).
    band : ndarray or float
        Half-width of the band at lags 1..K (same layout), or one half-width for all lags.
    period : int
        Seasonal period s; the correlogram must reach lag s.

    References
    ----------
    .. [1] Box, Jenkins, Reinsel & Ljung (2015), *Time Series Analysis*, 5th ed., ch. 9
       (autocorrelations of seasonal models at multiples of s).
    """
    acf = np.asarray(acf_values, dtype=float)
    half_width = np.broadcast_to(np.asarray(band, dtype=float), acf.shape)
    if period < 1 or period > acf.size:
        raise ValueError(f"the correlogram reaches lag {acf.size}; it must reach the seasonal lag {period}")
    return any(abs(acf[lag - 1]) > half_width[lag - 1] for lag in seasonal_lags(period, acf.size)[:2])


def seasonal_lags(period: int | None, nlags: int) -> list[int]:
    """The seasonal lags ``s, 2s, ...`` up to ``nlags``; empty for a non-seasonal series."""
    if period is None:
        return []
    return list(range(period, nlags + 1, period))
