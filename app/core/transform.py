"""Variance-stabilising transforms: none, the log, or Box-Cox with Guerrero's lambda.

A transform is suggested only for a strictly positive series whose spread grows with its level
(:func:`choose_transform`); lambda is chosen by Guerrero's (1993) method
(:func:`guerrero_lambda`). The Box-Cox transform with parameter lambda is
``(x**lambda - 1) / lambda``, and ``log(x)`` at lambda = 0 (Box & Cox 1964).

References
----------
.. [1] Box, G.E.P. & Cox, D.R. (1964). An analysis of transformations. *JRSS B* 26, 211-252.
.. [2] Guerrero, V.M. (1993). Time-series analysis supported by power transformations.
   *J. Forecasting* 12, 37-48.
.. [3] Hyndman, R.J. & Athanasopoulos, G. (2021). *Forecasting: Principles and Practice*,
   3rd ed., OTexts, §3.1 (transformations).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Literal

import numpy as np
from scipy.optimize import minimize_scalar
from scipy.special import boxcox, inv_boxcox

from app.core.errors import OrderError

TransformKind = Literal["none", "log", "box_cox"]
LAMBDA_BOUNDS = (-1.0, 2.0)
NONSEASONAL_SUBSERIES_LENGTH = 2
NONSEASONAL_CHECK_LENGTH = 4
MIN_SUBSERIES = 4
SPREAD_LEVEL_CORRELATION_MIN = 0.5
LAMBDA_MAX_FOR_TRANSFORM = 0.5
LOG_TOLERANCE = 0.15
LAMBDA_DECIMALS = 2


@dataclass
class TransformChoice:
    """A variance-stabilising transform and why it was chosen.

    ``kind`` is ``"none"``, ``"log"`` or ``"box_cox"``; ``lam`` is the lambda applied (None for
    no transform, 0 for the log). ``guerrero`` is the unrounded estimate and
    ``spread_level_correlation`` the correlation of subseries means and standard deviations,
    when they were computed.
    """

    kind: TransformKind
    lam: float | None = None
    guerrero: float | None = None
    spread_level_correlation: float | None = None
    explanation: list[str] = field(default_factory=list)

    def __post_init__(self) -> None:
        if self.kind not in ("none", "log", "box_cox"):
            raise ValueError(f"unknown transform {self.kind!r} (expected none, log or box_cox)")
        if self.kind == "none" and self.lam is not None:
            raise ValueError("a 'none' transform has no lambda")
        if self.kind == "log" and self.lam not in (None, 0.0):
            raise ValueError(f"the log transform is Box-Cox with lambda 0, not {self.lam}")
        if self.kind == "log":
            self.lam = 0.0
        if self.kind == "box_cox" and (self.lam is None or not np.isfinite(self.lam)):
            raise ValueError(f"a Box-Cox transform needs a finite lambda, not {self.lam!r}")

    def to_json(self) -> str | dict:
        """``"none"``, ``"log"`` or ``{"box_cox": lambda}``."""
        return {"box_cox": self.lam} if self.kind == "box_cox" else self.kind

    @classmethod
    def from_json(cls, value: str | dict) -> TransformChoice:
        """Read back what :meth:`to_json` wrote (or a reviewer typed in the same form)."""
        if value == "none":
            return cls(kind="none")
        if value == "log":
            return cls(kind="log")
        if isinstance(value, dict) and set(value) == {"box_cox"}:
            lam = value["box_cox"]
            if isinstance(lam, bool) or not isinstance(lam, (int, float)):
                raise ValueError(f"Box-Cox lambda must be a number, not {lam!r}")
            return cls(kind="box_cox", lam=float(lam))
        raise ValueError(f'transform {value!r} is not "none", "log" or {{"box_cox": lambda}}')


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
    means, sds = _subseries_levels_and_spreads(values, period or NONSEASONAL_SUBSERIES_LENGTH)
    if means.size < 2 or not (sds > 0).any():
        raise ValueError("Guerrero's method needs at least two subseries and some spread within them")

    def coefficient_of_variation(lam: float) -> float:
        ratio = sds / means ** (1.0 - lam)
        return float(np.std(ratio, ddof=1) / np.mean(ratio))

    return float(minimize_scalar(coefficient_of_variation, bounds=LAMBDA_BOUNDS, method="bounded").x)


def _subseries_levels_and_spreads(values: np.ndarray, length: int) -> tuple[np.ndarray, np.ndarray]:
    """Means and standard deviations of consecutive subseries of ``length``, newest kept."""
    if length < 2:
        raise ValueError(f"subseries of length {length} have no spread; the period must be at least 2")
    count = values.size // length
    blocks = values[values.size - count * length:].reshape(count, length)
    return blocks.mean(axis=1), blocks.std(axis=1, ddof=1)


def choose_transform(x: np.ndarray, period: int | None = None) -> TransformChoice:
    """Suggest no transform, the log, or a Box-Cox transform for one series.

    Rule, every step common practice with thresholds of our choosing:

    1. only a strictly positive series is transformed;
    2. it is cut into consecutive subseries of length ``period`` (or
       :data:`NONSEASONAL_CHECK_LENGTH` = 4 for a non-seasonal series: the standard deviation
       of 2 points is too noisy for a correlation); fewer than :data:`MIN_SUBSERIES` (4)
       subseries are too few to judge, and nothing is done;
    3. the spread must grow with the level: the correlation of subseries means and standard
       deviations above :data:`SPREAD_LEVEL_CORRELATION_MIN` (0.5);
    4. Guerrero's lambda must be clearly below 1: under :data:`LAMBDA_MAX_FOR_TRANSFORM` (0.5);
    5. lambda within :data:`LOG_TOLERANCE` (0.15) of 0 gives the log, which is easier to
       read; otherwise Box-Cox with lambda rounded to 2 decimals.

    References
    ----------
    .. [1] Guerrero (1993), *J. Forecasting* 12, 37-48.
    .. [2] Hyndman & Athanasopoulos (2021), *Forecasting: Principles and Practice*, 3rd ed.,
       §3.1 (simple values of lambda are easier to explain; from memory).
    """
    values = np.asarray(x, dtype=float)
    if (values <= 0).any():
        return TransformChoice(
            "none",
            explanation=[f"The series has values <= 0 (smallest {values.min():.4g}): no log or Box-Cox transform."],
        )
    length = period or NONSEASONAL_CHECK_LENGTH
    means, sds = _subseries_levels_and_spreads(values, length)
    if means.size < MIN_SUBSERIES:
        return TransformChoice(
            "none",
            explanation=[
                f"Only {means.size} subseries of length {length}: too few to judge whether the spread "
                f"grows with the level (at least {MIN_SUBSERIES} needed); no transform."
            ],
        )
    correlation = _correlation(means, sds)
    if not correlation > SPREAD_LEVEL_CORRELATION_MIN:
        return TransformChoice(
            "none", spread_level_correlation=correlation,
            explanation=[
                f"The spread does not grow with the level (correlation of subseries means and standard "
                f"deviations {correlation:.2f} <= {SPREAD_LEVEL_CORRELATION_MIN:.2f}): no transform."
            ],
        )
    lam = guerrero_lambda(values, period)
    grows = f"The spread grows with the level (correlation {correlation:.2f})"
    if lam >= LAMBDA_MAX_FOR_TRANSFORM:
        return TransformChoice(
            "none", guerrero=lam, spread_level_correlation=correlation,
            explanation=[
                f"{grows}, but Guerrero's lambda {lam:.2f} is not clearly below 1 "
                f"(>= {LAMBDA_MAX_FOR_TRANSFORM:.2f}): no transform."
            ],
        )
    if abs(lam) <= LOG_TOLERANCE:
        return TransformChoice(
            "log", guerrero=lam, spread_level_correlation=correlation,
            explanation=[f"{grows}; Guerrero's lambda {lam:.2f} is within {LOG_TOLERANCE:.2f} of 0 -> log transform."],
        )
    rounded = round(lam, LAMBDA_DECIMALS)
    return TransformChoice(
        "box_cox", lam=rounded, guerrero=lam, spread_level_correlation=correlation,
        explanation=[f"{grows}; Guerrero's lambda {lam:.2f} -> Box-Cox transform with lambda {rounded:.2f}."],
    )


def _correlation(a: np.ndarray, b: np.ndarray) -> float:
    if np.ptp(a) == 0 or np.ptp(b) == 0:
        return 0.0
    return float(np.corrcoef(a, b)[0, 1])


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
            f"{int((values <= 0).sum())} values are <= 0 (smallest {values.min():.4g})"
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
