"""Forecast check: a rolling-origin evaluation of one order on the last part of a series.

The check answers "does this order forecast well?" before a reviewer approves it.

* **Horizon** ``h``: one season (the period) for a seasonal series, :data:`NONSEASONAL_HORIZON`
  (8) steps otherwise.
* **Origins**: :data:`DEFAULT_ORIGINS` (5), spaced by the horizon and ending at the end of the
  series: the last origin leaves the final ``h`` observations out, the one before the ``h``
  before them, and so on. Each observation of the evaluated stretch (the last ``5h`` points) is
  forecast exactly once, so the forecast windows do not overlap. Fewer origins are used when the
  series is too short for the first training window to hold :func:`minimum_training` points.
* **Refit at every origin**: the order is re-estimated by maximum likelihood on the data before
  each origin (:func:`app.core.fitting.fit_candidate`), so no forecast uses parameters that saw
  the values it forecasts. Fixing the parameters from a fit on the whole series and only
  filtering would be faster, but it lets the evaluated stretch shape the parameters and flatters
  the model.
* **Intervals**: the Gaussian prediction intervals of the fitted state-space model (parameter
  uncertainty ignored, as usual) on the transformed scale, back-transformed quantile by quantile.
  The point forecast is the back-transformed mean of the transformed scale: the forecast
  *median* of the original scale, with no bias adjustment.
* **MASE** (Hyndman & Koehler 2006): each absolute error is divided by the in-sample mean
  absolute error of the one-step seasonal naive forecast (period ``m``, or 1 for a non-seasonal
  series) of the training window it was forecast from, and the scaled errors are averaged. The
  seasonal naive forecast is evaluated the same way (``naive_mase``), so the model can be set
  against the simplest benchmark on the same origins.
* **Coverage**: the share of the evaluated observations that fall inside the 80% and 95%
  intervals; a well-specified model comes close to the nominal levels.
* **Interventions** (outliers, level shifts, temporary changes the analysis or the reviewer
  took out; :mod:`app.core.interventions`): at each origin those before it are taken out of the
  training window at their estimated sizes and their effects carried into the forecasts (a
  level shift persists, a temporary change dies away), as the forecasting job of the hand-off
  does with the exported ones; one after the origin is not yet known there and is left in the
  actual values. The sizes were estimated on the whole series, a small look-ahead the check
  accepts so that it checks the model the export hands on.
* **Missing points** (NaN) stay missing: a training window with gaps is fitted by the exact
  likelihood, which skips them, and the Kalman filter forecasts from the observed points; a
  missing actual value is not scored (errors, MASE and coverage average over the points
  present); the naive scale uses the pairs ``Y_t, Y_{t-m}`` present, and the seasonal naive
  forecast repeats the latest observed value of the same season.

References
----------
.. [1] Hyndman, R.J. & Koehler, A.B. (2006). Another look at measures of forecast accuracy.
   *International Journal of Forecasting* 22, 679-688 (MASE, their eq. for q_t and MASE).
.. [2] Hyndman, R.J. & Athanasopoulos, G. (2021). *Forecasting: Principles and Practice*,
   3rd ed., OTexts, §5.5 (prediction intervals), §5.6 (back-transformed forecasts are medians),
   §5.8 (scaled errors), §5.10 (time series cross-validation with rolling origins).
.. [3] Tashman, L.J. (2000). Out-of-sample tests of forecasting accuracy: an analysis and review.
   *International Journal of Forecasting* 16, 437-450 (rolling-origin evaluation).
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy.stats import norm
from statsmodels.tsa.arima.model import ARIMA

from app.core.analysis import Intervention
from app.core.defaults import DEFAULT_ORIGINS
from app.core.errors import OrderError
from app.core.fitting import fit_candidate
from app.core.interventions import effect_column
from app.core.order import Order, validate_order
from app.core.prepare import RECOMMENDED_POINTS, PreparedSeries
from app.core.transform import TransformChoice, apply_transform, invert_transform

NONSEASONAL_HORIZON = 8
INTERVAL_LEVELS = (0.80, 0.95)


def default_horizon(period: int | None) -> int:
    """One season for a seasonal series, :data:`NONSEASONAL_HORIZON` steps otherwise."""
    return period if period and period >= 2 else NONSEASONAL_HORIZON


def seasonal_naive_scale(training: np.ndarray, m: int = 1) -> float:
    """In-sample mean absolute error of the one-step seasonal naive forecast.

    ``(1 / (n - m)) * sum_{t = m+1..n} |Y_t - Y_{t-m}|``: the denominator of the scaled error
    ``q_t`` of Hyndman & Koehler (2006).

    Raises
    ------
    ValueError
        When the training data hold no more than ``m`` values.

    References
    ----------
    .. [1] Hyndman & Koehler (2006), *IJF* 22, 679-688, definition of q_t.
    """
    values = np.asarray(training, dtype=float)
    if m < 1 or values.size <= m:
        raise ValueError(f"the seasonal naive scale needs more than m = {m} training values; got {values.size}")
    return _mean_present(np.abs(values[m:] - values[:-m]))


def mase(actual: np.ndarray, forecast: np.ndarray, training: np.ndarray, m: int = 1) -> float:
    """Mean absolute scaled error of ``forecast`` against ``actual``.

    ``MASE = mean(|q_t|)`` with ``q_t = e_t / seasonal_naive_scale(training, m)``, that is the
    forecasts' mean absolute error divided by the in-sample mean absolute error of the one-step
    seasonal naive forecast. Below 1: better than that naive forecast was in sample. Infinite
    when the training data never change over ``m`` steps.

    References
    ----------
    .. [1] Hyndman & Koehler (2006), *IJF* 22, 679-688, definition of MASE.
    """
    errors = np.abs(np.asarray(actual, dtype=float) - np.asarray(forecast, dtype=float))
    scale = seasonal_naive_scale(training, m)
    return _mean_present(errors) / scale if scale > 0 else math.inf


def seasonal_naive_forecast(training: np.ndarray, steps: int, m: int = 1) -> np.ndarray:
    """``Y_hat_{T+k} = Y_{T+k-m*ceil(k/m)}``: the last observed season repeated (``m = 1``: the last value).

    Where that value is missing, the latest observed value ``m``, ``2m``, ... steps before it
    stands in (NaN when its season has no observed value at all)."""
    values = np.asarray(training, dtype=float)
    k = np.arange(1, steps + 1)
    positions = values.size - 1 + k - m * ((k - 1) // m + 1)
    forecast = values[positions]
    for i in np.flatnonzero(np.isnan(forecast)):
        earlier = values[positions[i]::-m]
        observed = earlier[~np.isnan(earlier)]
        forecast[i] = observed[0] if observed.size else np.nan
    return forecast


@dataclass
class IntervalForecast:
    """Forecasts on the original scale with their prediction intervals (``level -> (lower, upper)``)."""

    mean: np.ndarray
    intervals: dict[float, tuple[np.ndarray, np.ndarray]]

    def to_dict(self, stamps: list) -> dict:
        out = {"timestamps": stamps, "forecast": _json_floats(self.mean)}
        for level, (lower, upper) in self.intervals.items():
            out[f"lower_{_percent(level)}"] = _json_floats(lower)
            out[f"upper_{_percent(level)}"] = _json_floats(upper)
        return out


def intervention_effects(interventions: Sequence[Intervention], length: int) -> np.ndarray:
    """The summed effects of ``interventions`` over ``length`` steps (on the transformed scale)."""
    effects = np.zeros(length)
    for found in interventions:
        effects += found.size * effect_column(found.kind, found.position, length)
    return effects


def forecast_order(
    y: np.ndarray, model: Order, transform: TransformChoice, steps: int, levels: tuple[float, ...] = INTERVAL_LEVELS,
    interventions: Sequence[Intervention] = (),
) -> IntervalForecast:
    """Fit ``model`` to ``y`` (original scale) and forecast ``steps`` ahead with intervals.

    The fit is :func:`~app.core.fitting.fit_candidate` on the transformed series (exact ML on
    the differenced data) with the effects of ``interventions`` (those within ``y``) taken out;
    the effects are added back to the forecasts and their bounds. The forecasts come from the
    same parameters put into the model of the undifferenced series, whose state holds the
    differencing, so the Kalman filter integrates the forecasts and their variances exactly.
    """
    effects = intervention_effects([i for i in interventions if i.position < y.size], y.size + steps)
    z = apply_transform(y, transform) - effects[:y.size]
    fit = fit_candidate(z, model)
    params = fit.estimates()
    # The estimates are in statsmodels ARIMA's order (deterministic terms, AR, MA, seasonal AR,
    # seasonal MA, sigma2) and with its meaning (regression with ARMA errors).
    levels_model = ARIMA(
        z, order=model.order, seasonal_order=model.seasonal_order, trend=model.trend,
        enforce_stationarity=False, enforce_invertibility=False,
    )
    prediction = levels_model.filter(params).get_forecast(steps)
    mean = np.asarray(prediction.predicted_mean, dtype=float) + effects[y.size:]
    se = np.asarray(prediction.se_mean, dtype=float)
    intervals = {}
    for level in levels:
        half = norm.ppf(0.5 + level / 2) * se
        intervals[level] = (_back_transformed_bound(mean - half, transform, lower=True),
                            _back_transformed_bound(mean + half, transform, lower=False))
    return IntervalForecast(invert_transform(mean, transform), intervals)


def _back_transformed_bound(values: np.ndarray, transform: TransformChoice, lower: bool) -> np.ndarray:
    """An interval bound on the original scale; a Box-Cox bound outside the transform's range
    becomes the edge of the range (0 for a lower bound, +inf for an upper one)."""
    out = invert_transform(values, transform)
    return np.where(np.isnan(out), 0.0 if lower else np.inf, out)


def minimum_training(model: Order, m: int) -> int:
    """The shortest training window of an origin: enough for the order to be fitted
    (:func:`~app.core.fitting.validate_order`), for the naive scale (``m + 1``), and at least
    :data:`~app.core.prepare.RECOMMENDED_POINTS` (the length below which the engine already
    warns that a series is too short)."""
    needed = next(n for n in itertools.count(RECOMMENDED_POINTS) if _long_enough(model, n))
    return max(needed, m + 1)


def _long_enough(model: Order, n: int) -> bool:
    try:
        validate_order(model.order, model.seasonal_order, n=n, trend=model.trend)
    except OrderError:
        return False
    return True


@dataclass
class OriginForecast:
    """The forecast from one origin: training length, what happened, what was forecast."""

    origin: int
    actual: np.ndarray
    forecast: IntervalForecast
    naive: np.ndarray
    scale: float


@dataclass
class Backtest:
    """The result of :func:`backtest_order` (see the module notes for the method)."""

    series_id: str
    model: Order
    transform: TransformChoice
    m: int
    horizon: int
    origins: list[OriginForecast]
    history: pd.Series
    ahead: IntervalForecast
    ahead_index: pd.Index
    levels: tuple[float, ...] = INTERVAL_LEVELS
    notes: list[str] = field(default_factory=list)

    def _scaled(self, which: str) -> np.ndarray:
        """Absolute scaled errors, one row per origin, one column per step (NaN where the actual
        value is missing)."""
        return np.array([
            np.abs(o.actual - (o.forecast.mean if which == "model" else o.naive)) / o.scale for o in self.origins
        ])

    @property
    def mase(self) -> float:
        return _mean_present(self._scaled("model"))

    @property
    def naive_mase(self) -> float:
        return _mean_present(self._scaled("naive"))

    def _inside(self, level: float) -> np.ndarray:
        """1.0 inside the ``level`` interval, 0.0 outside, NaN where the actual value is missing."""
        return np.array([
            np.where(np.isnan(o.actual), np.nan,
                     (o.forecast.intervals[level][0] <= o.actual) & (o.actual <= o.forecast.intervals[level][1]))
            for o in self.origins
        ])

    def coverage(self, level: float) -> float:
        """Share of the evaluated observations inside the ``level`` prediction interval."""
        return _mean_present(self._inside(level))

    def by_horizon(self) -> list[dict]:
        """Per step ahead: how many forecasts were scored (actual value present), MAE, RMSE,
        MASE and interval coverage."""
        errors = np.array([o.actual - o.forecast.mean for o in self.origins])
        scaled = self._scaled("model")
        inside = {level: self._inside(level) for level in self.levels}
        return [
            {
                "step": step + 1,
                "count": int(np.count_nonzero(~np.isnan(errors[:, step]))),
                "mae": _mean_present(np.abs(errors[:, step])),
                "rmse": math.sqrt(_mean_present(errors[:, step] ** 2)),
                "mase": _mean_present(scaled[:, step]),
                **{f"coverage_{_percent(level)}": _mean_present(inside[level][:, step]) for level in self.levels},
            }
            for step in range(self.horizon)
        ]

    def to_dict(self) -> dict:
        """Plain data for the review page, the API and the command line."""
        index = self.history.index
        last = self.origins[-1]
        holdout_stamps = _stamps(index[index.size - self.horizon:])
        return {
            "series_id": self.series_id,
            "label": self.model.full_label(),
            "order": list(self.model.order),
            "seasonal_order": list(self.model.seasonal_order),
            "trend": self.model.trend,
            "transform": self.transform.to_json(),
            "m": self.m,
            "horizon": self.horizon,
            "origins": len(self.origins),
            "training_lengths": [o.origin for o in self.origins],
            "mase": _json_float(self.mase),
            "naive_mase": _json_float(self.naive_mase),
            "coverage": {_percent(level): self.coverage(level) for level in self.levels},
            "by_horizon": self.by_horizon(),
            "notes": list(self.notes),
            "plot": {
                "history": {"timestamps": _stamps(index), "values": _json_floats(self.history.to_numpy())},
                "holdout": {**last.forecast.to_dict(holdout_stamps), "actual": _json_floats(last.actual)},
                "ahead": self.ahead.to_dict(_stamps(self.ahead_index)),
            },
        }


def backtest_order(
    prepared: PreparedSeries,
    model: Order,
    transform: TransformChoice,
    period: int | None,
    horizon: int | None = None,
    origins: int | None = None,
    interventions: Sequence[Intervention] = (),
) -> Backtest:
    """Rolling-origin evaluation of ``model`` on the last part of ``prepared``.

    Parameters
    ----------
    prepared : PreparedSeries
        The series on its regular grid (original scale).
    model : Order
        The order and deterministic term to evaluate.
    transform : TransformChoice
        The transform the model is fitted on; forecasts are back-transformed through it.
    period : int or None
        The series' seasonal period ``m`` for the naive benchmark, the MASE scale and the default
        horizon (None or 0: non-seasonal, ``m = 1``).
    horizon, origins : int, optional
        Steps ahead and number of origins; defaults :func:`default_horizon` and
        :data:`DEFAULT_ORIGINS`.
    interventions : sequence of Intervention, optional
        Taken out at their sizes where they precede an origin (see the module notes).

    Raises
    ------
    OrderError
        When the series is too short to leave even one origin with a long enough training window.

    References
    ----------
    .. [1] Hyndman & Koehler (2006), *IJF* 22, 679-688.
    .. [2] Hyndman & Athanasopoulos (2021), *Forecasting: Principles and Practice*, 3rd ed., §5.10.
    """
    y = prepared.values
    m = period if period and period >= 2 else 1
    h = horizon or default_horizon(period)
    wanted = origins or DEFAULT_ORIGINS
    if h < 1 or wanted < 1:
        raise OrderError(f"the horizon ({h}) and the number of origins ({wanted}) must be at least 1")
    shortest = minimum_training(model, m)
    count = min(wanted, (y.size - shortest) // h)
    if count < 1:
        shorter = (y.size - shortest) if y.size > shortest else 0
        raise OrderError(
            f"series {prepared.series_id!r}: {y.size} observations are too few for a forecast check of "
            f"{model.label()} with a horizon of {h} steps (needs at least {shortest + h})"
            + (f"; a horizon of at most {shorter} steps fits" if shorter >= 1 else "")
        )
    notes = []
    if interventions:
        notes.append("Taken out at their estimated sizes before each origin they precede, and carried into its forecasts: "
                     + "; ".join(f"{i.kind.words()} at {i.timestamp}" for i in interventions) + ".")
    if count < wanted:
        notes.append(f"Only {count} of {wanted} origins fit: each training window needs at least {shortest} points.")
    runs = []
    for j in range(count):
        origin = y.size - h * (count - j)
        training = y[:origin]
        runs.append(OriginForecast(
            origin=origin,
            actual=y[origin:origin + h],
            forecast=forecast_order(training, model, transform, h, interventions=interventions),
            naive=seasonal_naive_forecast(training, h, m),
            scale=_nonzero_scale(training, m, prepared.series_id),
        ))
    shown = min(y.size, (count + 1) * h)
    return Backtest(
        series_id=prepared.series_id, model=model, transform=transform, m=m, horizon=h, origins=runs,
        history=prepared.to_series().iloc[y.size - shown:],
        ahead=forecast_order(y, model, transform, h, interventions=interventions), ahead_index=future_index(prepared, h),
        notes=notes,
    )


def _nonzero_scale(training: np.ndarray, m: int, series_id: str) -> float:
    scale = seasonal_naive_scale(training, m)
    if scale <= 0:
        raise OrderError(f"series {series_id!r}: the training data never change over {m} steps, so MASE is undefined")
    return scale


def future_index(prepared: PreparedSeries, steps: int) -> pd.Index:
    """The ``steps`` timestamps after the end of the series, on its grid."""
    index = prepared.index
    if isinstance(index, pd.DatetimeIndex):
        return pd.date_range(index[-1], periods=steps + 1, freq=prepared.freq)[1:]
    step = int(index[1] - index[0]) if index.size > 1 else 1
    return pd.Index(int(index[-1]) + step * np.arange(1, steps + 1))


def _mean_present(values: np.ndarray) -> float:
    """The mean of the values that are not NaN (NaN when none is)."""
    present = np.asarray(values, dtype=float)
    present = present[~np.isnan(present)]
    return float(present.mean()) if present.size else math.nan


def _stamps(index: pd.Index) -> list:
    return [str(t) for t in index] if isinstance(index, pd.DatetimeIndex) else [int(t) for t in index]


def _percent(level: float) -> str:
    return f"{round(level * 100):d}"


def _json_float(value: float) -> float | None:
    return float(value) if math.isfinite(value) else None


def _json_floats(values: np.ndarray) -> list[float | None]:
    return [_json_float(float(v)) for v in values]
