"""Variance-stabilising transforms: none, the log, or Box-Cox with a simple lambda.

A transform is chosen by the likelihood of the *original* data under one order
(:func:`choose_transform`): the order is fitted with no transform, on the log, on the square
root and on Box-Cox with Guerrero's (1993) lambda rounded to a simple value
(:func:`simple_lambda`), and each log-likelihood is put on the scale of the observations by
adding the log-Jacobian of the transform (:func:`log_jacobian`; Box & Cox 1964, §3). A transform
is kept only when it lowers the AIC of the original data clearly (:data:`CLEAR_AIC_DROP`).
:func:`app.core.identify.identify_prepared` runs the comparison first under the order of
:func:`order_before_search`, identifies the series on the scale it chooses, and runs it again
under the leader found there; when that moves to another scale, the series is identified again.
Missing points (NaN) stay missing through a transform; Guerrero's lambda, which needs a complete
series, is estimated on the series with its gaps filled by linear interpolation
(:func:`app.core.prepare.interpolate_gaps`), and the log-Jacobian sums over the observations the
fit's likelihood covers, which leaves out those whose difference reaches a gap
(:func:`log_jacobian`). The Box-Cox transform with parameter lambda is ``(x**lambda - 1) /
lambda``, and ``log(x)`` at lambda = 0 (Box & Cox 1964).

References
----------
.. [1] Box, G.E.P. & Cox, D.R. (1964). An analysis of transformations. *JRSS B* 26, 211-252.
.. [2] Guerrero, V.M. (1993). Time-series analysis supported by power transformations.
   *J. Forecasting* 12, 37-48.
.. [3] Burnham, K.P. & Anderson, D.R. (2002). *Model Selection and Multimodel Inference*, 2nd ed.,
   Springer, §2.6 (rules of thumb for AIC differences).
.. [4] Hyndman, R.J. & Athanasopoulos, G. (2021). *Forecasting: Principles and Practice*,
   3rd ed., OTexts, §3.1 (transformations).
.. [5] Box, G.E.P., Jenkins, G.M., Reinsel, G.C. & Ljung, G.M. (2015). *Time Series Analysis:
   Forecasting and Control*, 5th ed., Wiley, §9.2 (:func:`order_before_search`).
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np
from scipy.optimize import minimize_scalar
from scipy.special import boxcox, inv_boxcox

from app.core.errors import OrderError
from app.core.fitting import likelihood_points
from app.core.order import Order, default_trend
from app.core.prepare import interpolate_gaps
from app.core.transform_choice import TransformChoice

LAMBDA_BOUNDS = (-1.0, 2.0)
NONSEASONAL_SUBSERIES_LENGTH = 2
LAMBDA_STEP = 0.5
LAMBDA_TOLERANCE = 0.15
LAMBDA_DECIMALS = 1
SQUARE_ROOT = 0.5
# Our choice: with 2-3 subseries (two or three seasons of monthly data) 55-75% of Guerrero's
# estimates fall on the bounds of the search (a review's simulation, 2026-12-05), a value the
# data do not choose.
MIN_SUBSERIES = 4
CLEAR_AIC_DROP = 10.0


def guerrero_lambda(x: np.ndarray, period: int | None = None) -> float:
    """Box-Cox lambda by Guerrero's (1993) coefficient-of-variation method.

    The series is cut into consecutive subseries of length ``period`` (length 2 for a
    non-seasonal series), dropping the oldest observations that do not fill one. With
    subseries means m_h and standard deviations s_h, lambda minimises the coefficient of
    variation of ``s_h / m_h**(1 - lambda)`` over [-1, 2] (scipy's bounded scalar
    minimisation): the lambda for which the spread is most nearly proportional to
    ``level**(1 - lambda)``, so that the transformed series has a constant spread.

    Parameters
    ----------
    x : ndarray
        A strictly positive series.
    period : int, optional
        Seasonal period; None for a non-seasonal series.

    Raises
    ------
    ValueError
        The series is not strictly positive, or has fewer than two subseries or no spread
        within them.

    Notes
    -----
    The subseries layout (length 2 when non-seasonal, oldest remainder dropped) and the
    search interval are those of R's ``forecast::BoxCox.lambda(method = "guerrero")``
    (from memory).

    References
    ----------
    .. [1] Guerrero, V.M. (1993). *J. Forecasting* 12, 37-48.
    .. [2] Hyndman & Athanasopoulos (2021), *Forecasting: Principles and Practice*, 3rd ed., §3.1.
    """
    values = np.asarray(x, dtype=float)
    if values.ndim != 1 or not np.isfinite(values).all() or (values <= 0).any():
        raise ValueError("Guerrero's method needs a one-dimensional series of finite, strictly positive values")
    means, sds = _subseries_levels_and_spreads(values, _subseries_length(period))
    if means.size < 2 or not (sds > 0).any():
        raise ValueError("Guerrero's method needs at least two subseries and some spread within them")

    def coefficient_of_variation(lam: float) -> float:
        ratio = sds / means ** (1.0 - lam)
        return float(np.std(ratio, ddof=1) / np.mean(ratio))

    return float(minimize_scalar(coefficient_of_variation, bounds=LAMBDA_BOUNDS, method="bounded").x)


def _subseries_length(period: int | None) -> int:
    """The length of Guerrero's subseries: a season, or :data:`NONSEASONAL_SUBSERIES_LENGTH`."""
    return period or NONSEASONAL_SUBSERIES_LENGTH


def _subseries_levels_and_spreads(values: np.ndarray, length: int) -> tuple[np.ndarray, np.ndarray]:
    """Means and standard deviations of consecutive subseries of ``length``, newest kept."""
    if length < 2:
        raise ValueError(f"subseries of length {length} have no spread; the period must be at least 2")
    count = values.size // length
    blocks = values[values.size - count * length:].reshape(count, length)
    return blocks.mean(axis=1), blocks.std(axis=1, ddof=1)


def simple_lambda(lam: float) -> float:
    """A Box-Cox lambda rounded to a value that is easy to explain.

    The nearest multiple of :data:`LAMBDA_STEP` (0.5: -1, -0.5, 0 the log, 0.5 the square
    root, 1 no transform, ...) when within :data:`LAMBDA_TOLERANCE` (0.15) of it, else one
    decimal; never outside :data:`LAMBDA_BOUNDS` [-1, 2]. Common practice, the steps of our
    choosing: simple values of lambda are easier to explain (Hyndman & Athanasopoulos 2021,
    §3.1, from memory), and the likelihood of the original data decides whether the rounded
    value is used at all (:func:`choose_transform`).

    References
    ----------
    .. [1] Box & Cox (1964), *JRSS B* 26, 211-252.
    .. [2] Hyndman & Athanasopoulos (2021), *Forecasting: Principles and Practice*, 3rd ed., §3.1.
    """
    nearest = LAMBDA_STEP * round(lam / LAMBDA_STEP)
    value = nearest if abs(lam - nearest) <= LAMBDA_TOLERANCE else round(lam, LAMBDA_DECIMALS)
    return float(min(max(value, LAMBDA_BOUNDS[0]), LAMBDA_BOUNDS[1])) + 0.0  # + 0.0: no -0.0


def log_jacobian(x: np.ndarray, transform: TransformChoice, model: Order) -> float:
    """``sum log g'(x_t)`` for the transform ``g``: what the log-likelihood of a fit of ``model``
    to the transformed series ``x`` gains to become that of the original data.

    ``g'(x) = x**(lambda - 1)`` for Box-Cox (``1/x`` for the log, lambda = 0), 1 for none. The
    sum runs over the observations the fit's likelihood covers
    (:func:`app.core.fitting.likelihood_points`): after the first ``d + sD``, on which it is
    conditional, and without those whose difference is missing because it reaches a gap.
    Counting those too would add ``(lambda - 1) log x_t`` for observations the likelihood never
    saw: a credit to ``lambda > 1`` and a charge to the log wherever the values exceed 1.

    References
    ----------
    .. [1] Box & Cox (1964), *JRSS B* 26, 211-252, §3 (the Jacobian of the transformation).
    """
    if transform.kind == "none" or transform.lam is None:  # lam is None only for none
        return 0.0
    return float((transform.lam - 1.0) * np.nansum(np.log(likelihood_points(x, model))))


def transform_alternatives(x: np.ndarray, period: int | None = None) -> tuple[list[TransformChoice], list[str]]:
    """The transforms weighed against none for a strictly positive series, simplest first, and words.

    The log and the square root (Box-Cox lambda 0.5), the two in common use (Box & Cox 1964;
    Hyndman & Athanasopoulos 2021, §3.1), and Box-Cox with Guerrero's (1993) lambda rounded by
    :func:`simple_lambda` when that is another value than 0, 0.5 and 1 (lambda 1 is a shift of
    the data: no transform) and the series holds at least :data:`MIN_SUBSERIES` subseries.

    References
    ----------
    .. [1] Box & Cox (1964), *JRSS B* 26, 211-252.
    .. [2] Guerrero (1993), *J. Forecasting* 12, 37-48.
    .. [3] Hyndman & Athanasopoulos (2021), *Forecasting: Principles and Practice*, 3rd ed., §3.1.
    """
    alternatives = [TransformChoice("log"), TransformChoice("box_cox", lam=SQUARE_ROOT)]
    subseries = x.size // _subseries_length(period)
    if subseries < MIN_SUBSERIES:
        return alternatives, [f"Guerrero's lambda not estimated: {subseries} subseries, fewer than the {MIN_SUBSERIES} it needs."]
    try:
        estimate = guerrero_lambda(interpolate_gaps(x), period)
    except ValueError as exc:
        return alternatives, [f"Guerrero's lambda could not be estimated ({exc})."]
    lam = simple_lambda(estimate)
    if lam in (0.0, SQUARE_ROOT, 1.0):
        return alternatives, [f"Guerrero's lambda {estimate:.2f} rounds to {lam:g}."]
    alternatives.append(TransformChoice("box_cox", lam=lam))
    return alternatives, [f"Guerrero's lambda {estimate:.2f} rounds to {lam:g}, weighed as well."]


def simplicity(transform: TransformChoice) -> tuple[int, float]:
    """How far a transform is from none, for choosing the simplest (smaller is simpler): none,
    the log, the square root, then other lambdas by their distance from 1 (no transform)."""
    if transform.kind == "none" or transform.lam is None:
        return (0, 0.0)
    if transform.kind == "log":
        return (1, 0.0)
    return (2, 0.0) if transform.lam == SQUARE_ROOT else (3, abs(transform.lam - 1.0))


def order_before_search(d: int, D: int, period: int | None) -> Order:
    """The order the transforms are first weighed under, before any candidate is fitted:
    ARIMA(1,d,1)(0,D,1)s with the differencing the unit-root tests chose on the series as
    observed, and a mean when d + D = 0.

    It only chooses the scale the search starts on; the comparison is run again under the
    leader of that search (:func:`app.core.identify.identify_prepared`), which decides. The
    multiplicative seasonal MA model with both differences is the form Box & Jenkins fitted to
    the logarithms of airline passenger numbers (Box, Jenkins, Reinsel & Ljung 2015, §9.2;
    section from memory), the model a practitioner fits first to see whether a seasonal series
    wants its log. The AR(1) term takes up a difference the tests left out: its coefficient goes
    to 1 where a unit root remains. Without it, AirPassengers (whose tests leave d = 0 after the
    seasonal difference) was weighed under an MA(1) on a trending series, which fits so badly
    that it favoured no transform against the published log.

    References
    ----------
    .. [1] Box, G.E.P., Jenkins, G.M., Reinsel, G.C. & Ljung, G.M. (2015). *Time Series
       Analysis: Forecasting and Control*, 5th ed., Wiley, §9.2.
    """
    seasonal = (0, D, 1, period) if period else (0, 0, 0, 0)
    return Order.of((1, d, 1), seasonal, default_trend(d, D))


def choose_transform(
    x: np.ndarray, period: int | None, model: Order, role: str,
    loglik_on: Callable[[TransformChoice], float], first: int = 1, smallest: float = math.inf,
) -> TransformChoice:
    """No transform, the log, or Box-Cox, by the likelihood of the original data under one order.

    Rule (the threshold tied to Burnham & Anderson's rule of thumb):

    1. only a strictly positive series is transformed;
    2. the order ``model`` is fitted with no transform and with each of :func:`transform_alternatives`
       (``loglik_on``); the log-Jacobian over the observations its likelihood covers
       (:func:`log_jacobian`) is added, which makes the log-likelihoods those of the same
       original data (Box & Cox 1964, §3), so they can be compared;
    3. a transform is taken only when it lowers the AIC of the original data by at least
       :data:`CLEAR_AIC_DROP` (10) against no transform, lambda counted as one estimated
       parameter of any transform (a gain of 6 log-likelihood units), and when no other
       transform lowers its AIC by as much (a gain of 5); of the transforms that pass both, the
       simplest is taken (:func:`simplicity`: log, then the square root, then Guerrero's lambda). Burnham &
       Anderson (2002, §2.6) read an AIC difference above 10 as essentially no support for the
       worse model; a smaller difference keeps the simpler choice, since the comparison is made
       under an order found on one of the scales and the best of several transforms is taken.
       Both conditions compare every pair, so the choice does not depend on the order the
       transforms are weighed in;
    4. when the order cannot be fitted to the series as observed, there is nothing to weigh
       the transforms against and none is taken.

    Parameters
    ----------
    x : ndarray
        The series as observed.
    period : int, optional
        Seasonal period for Guerrero's subseries; None for a non-seasonal series.
    model : Order
        The order compared under.
    role : str
        Where the order comes from, for the words (e.g. "the leader on the log scale").
    loglik_on : callable
        The order's maximised log-likelihood on the series under a given transform (NaN when
        it cannot be fitted).
    first : int
        The number the words give the first point of ``x``: more than 1 when ``x`` is the
        recent stretch of a longer series.
    smallest : float
        The smallest value of the whole series when ``x`` is its recent stretch: the transform
        chosen is applied to the whole series, so all of it must be positive.

    References
    ----------
    .. [1] Box & Cox (1964), *JRSS B* 26, 211-252.
    .. [2] Burnham & Anderson (2002), *Model Selection and Multimodel Inference*, 2nd ed., §2.6.
    .. [3] Guerrero (1993), *J. Forecasting* 12, 37-48.
    """
    values = np.asarray(x, dtype=float)
    smallest = min(float(np.nanmin(values)), smallest)
    if smallest <= 0:
        return TransformChoice(
            "none", explanation=[f"The series has values <= 0 (smallest {smallest:.4g}): no log or Box-Cox transform."],
        )
    alternatives, words = transform_alternatives(values, period)
    scored: list[tuple[TransformChoice, float]] = []
    for choice in [TransformChoice("none"), *alternatives]:
        loglik = loglik_on(choice) + log_jacobian(values, choice, model)
        if math.isfinite(loglik):
            scored.append((choice, loglik))
        else:
            words.append(f"{model.label()} could not be fitted on the {choice.name()} scale: not weighed.")
    if not scored:
        return TransformChoice("none", explanation=[*words, "Nothing to compare: no transform."])
    lost = model.lost_to_differencing
    covered = int(np.count_nonzero(~np.isnan(likelihood_points(values, model))))
    span = f"observations {first + lost}-{first + values.size - 1}"
    if covered < values.size - lost:
        span += f", the {covered} of them {'whose differences are' if lost else 'that are'} not missing"
    words.append(
        f"Under {model.label()}, {role}, the log-likelihoods of the original data (Jacobian of the "
        f"transform included, {span}) are: " + ", ".join(f"{c.name()} {ll:.1f}" for c, ll in scored) + "."
    )

    none, *transforms = scored
    if none[0].kind != "none":
        return TransformChoice("none", explanation=[*words, "Nothing to weigh the transforms against: no transform."])
    if not transforms:
        return TransformChoice("none", explanation=words)
    aic = {i: 2.0 - 2.0 * loglik for i, (_, loglik) in enumerate(transforms)}
    # Every transform counts one parameter; no transform counts none.
    clears = [aic[i] <= -2.0 * none[1] - CLEAR_AIC_DROP for i in aic]
    beaten_by = {i: next((j for j in aic if aic[i] - aic[j] >= CLEAR_AIC_DROP), None) for i in aic}
    passing = [i for i in aic if clears[i] and beaten_by[i] is None]
    pick = min(passing, key=lambda i: simplicity(transforms[i][0])) if passing else min(aic, key=lambda i: aic[i])
    for i in sorted((i for i in aic if simplicity(transforms[i][0]) < simplicity(transforms[pick][0])),
                    key=lambda i: simplicity(transforms[i][0])):
        j = beaten_by[i]
        words.append(f"{transforms[i][0].name()} does not lower the AIC by {CLEAR_AIC_DROP:g} against none." if j is None else
                     f"{transforms[i][0].name()} is clearly beaten by {transforms[j][0].name()} (its AIC "
                     f"{aic[i] - aic[j]:.1f} higher).")
    better = min(aic, key=lambda i: aic[i])
    if better != pick:
        words.append(f"The AIC of {transforms[better][0].name()} is {math.floor((aic[pick] - aic[better]) * 10) / 10:.1f} "
                     f"below that of {transforms[pick][0].name()}, less than {CLEAR_AIC_DROP:g}: the simpler "
                     f"{transforms[pick][0].name()} is weighed against none.")
    gain = transforms[pick][1] - none[1]
    words.append(_comparison_words(transforms[pick][0], gain, 2.0 * gain - 2.0, none[0], model.label()))
    chosen = transforms[pick][0] if passing else none[0]
    return TransformChoice(chosen.kind, chosen.lam, explanation=words)


def _comparison_words(choice: TransformChoice, gain: float, drop: float, best: TransformChoice, order_label: str) -> str:
    """The deciding step of :func:`choose_transform` in words: ``choice`` against ``best`` (no
    transform), by its log-likelihood ``gain`` and its AIC ``drop`` (both negative when it does
    worse). A drop short of the threshold is shown rounded down, so that it never reads as the
    threshold itself."""
    counted = "choosing a transform counted as one parameter"
    if gain < 0 or drop < 0:
        return (f"{choice.name()} {'loses' if gain < 0 else 'gains only'} {abs(gain):.1f} {'to' if gain < 0 else 'over'} "
                f"{best.name()} on the original scale under {order_label}; its AIC is {abs(drop):.1f} higher "
                f"({counted}): {best.name()} kept.")
    taken = drop >= CLEAR_AIC_DROP
    shown = drop if taken else math.floor(drop * 10) / 10
    said = (f"{choice.name()} gains {gain:.1f} over {best.name()} on the original scale under {order_label}; "
            f"its AIC is {shown:.1f} lower ({counted})")
    if taken:
        return f"{said}, at least the {CLEAR_AIC_DROP:g} needed: {choice.name()} taken."
    return f"{said}, less than the {CLEAR_AIC_DROP:g} needed: {best.name()} kept."


def apply_transform(x: np.ndarray, choice: TransformChoice) -> np.ndarray:
    """The series on the transformed scale (a new array).

    Raises
    ------
    OrderError
        A log or Box-Cox transform asked for a series with values <= 0.
    """
    values = np.asarray(x, dtype=float)
    if choice.kind == "none":
        return values.copy()
    if (values <= 0).any():
        raise OrderError(
            f"a {choice.kind.replace('_', '-')} transform needs strictly positive values; "
            f"{int((values <= 0).sum())} values are <= 0 (smallest {np.nanmin(values):.4g})"
        )
    return np.log(values) if choice.kind == "log" else boxcox(values, choice.lam)


def invert_transform(y: np.ndarray, choice: TransformChoice) -> np.ndarray:
    """Back from the transformed scale (e.g. forecasts) to the original one.

    For Box-Cox, values with ``lambda * y + 1 <= 0`` lie outside the transform's range and come
    back as NaN (scipy's ``inv_boxcox``).
    """
    values = np.asarray(y, dtype=float)
    if choice.kind == "none":
        return values.copy()
    return np.exp(values) if choice.kind == "log" else inv_boxcox(values, choice.lam)
