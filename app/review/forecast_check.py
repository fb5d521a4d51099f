"""The forecast check of an order on a stored series, for the review page, the API and
``lagdesk backtest`` (the method is :func:`app.core.backtest.backtest_order`).

Each origin refits the order, so the work grows with the origins, the horizon and the order;
a check is bounded, since anyone who can open a page can ask for one: at most
:data:`MAX_ORIGINS` origins, a horizon of at most two seasons or :data:`MIN_HORIZON_CAP` steps
(whichever is longer), and orders within the engine's own search limits
(:data:`app.core.order.MAX_ORDER`, :data:`app.core.order.MAX_SEASONAL_ORDER`).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import sqlite_utils
from threadpoolctl import threadpool_limits

from app.core.backtest import backtest_order
from app.core.errors import LagdeskError, OrderError
from app.core.order import MAX_ORDER, MAX_SEASONAL_ORDER, Order, validate_order
from app.core.transform import TransformChoice, apply_transform
from app.jobs.order_fits import NUMERICAL_FAILURES, load_prepared
from app.store.analyses import load_analysis

MAX_ORIGINS = 20
MIN_HORIZON_CAP = 30
HORIZON_CAP_SEASONS = 2


class ForecastCheckTooLarge(LagdeskError):
    """A forecast check asked for more origins, a longer horizon or a larger order than it takes."""


def max_horizon(period: int | None) -> int:
    """The longest horizon a check takes: two seasons or :data:`MIN_HORIZON_CAP` steps, whichever is longer."""
    return max(HORIZON_CAP_SEASONS * (period or 0), MIN_HORIZON_CAP)


def check_bounds(model: Order, period: int | None, horizon: int | None, origins: int | None) -> None:
    """Refuse a check beyond the bounds of the module notes.

    Raises
    ------
    ForecastCheckTooLarge
        Naming the bound passed.
    """
    if max(model.p, model.q) > MAX_ORDER or max(model.P, model.Q) > MAX_SEASONAL_ORDER:
        raise ForecastCheckTooLarge(
            f"the forecast check takes orders up to the engine's search limits (p, q <= {MAX_ORDER}; "
            f"P, Q <= {MAX_SEASONAL_ORDER}), not {model.label()}"
        )
    if origins is not None and not 1 <= origins <= MAX_ORIGINS:
        raise ForecastCheckTooLarge(f"origins ({origins}) must be between 1 and {MAX_ORIGINS}")
    cap = max_horizon(period)
    if horizon is not None and not 1 <= horizon <= cap:
        raise ForecastCheckTooLarge(
            f"horizon ({horizon}) must be between 1 and {cap} (two seasons or {MIN_HORIZON_CAP} steps, whichever is longer)"
        )


def backtest_series(
    db: sqlite_utils.Database,
    series_id: str,
    order: Sequence[int] | None,
    seasonal_order: Sequence[int] | None = None,
    transform: str | dict | None = None,
    horizon: int | None = None,
    origins: int | None = None,
) -> dict[str, Any]:
    """The forecast check of one order on a stored series.

    ``order`` None checks the analysis' suggestion (with its seasonal order unless one is
    given); a seasonal order left out is none.

    The deterministic term is the one the engine gives the order
    (:meth:`app.core.analysis.Analysis.model_for`); the transform defaults to the stored
    analysis' (none without an analysis). The naive benchmark and the MASE scale use the
    model's seasonal period, else the period the analysis examined.

    Returns
    -------
    dict
        :meth:`app.core.backtest.Backtest.to_dict` plus ``data_sha256``, the fingerprint of the
        data checked.

    Raises
    ------
    UnknownSeries
        When the database holds no such series.
    ForecastCheckTooLarge
        When the order, the horizon or the origins pass the bounds of the module notes.
    LagdeskError
        When the order or transform is not valid, or the series is too short for the check.
    """
    prepared, fingerprint = load_prepared(db, series_id)
    analysis = load_analysis(db, series_id)
    if order is None:
        if analysis is None:
            raise LagdeskError(f"series {series_id!r} has no analysis yet: give an order, or run lagdesk analyze")
        order, seasonal_order = analysis.suggested.order.order, seasonal_order or analysis.suggested.order.seasonal_order
    try:
        if transform is not None:
            choice = TransformChoice.from_json(transform)
        else:
            choice = analysis.transform if analysis else TransformChoice("none")
        apply_transform(prepared.values, choice)
    except (ValueError, OrderError) as exc:
        raise LagdeskError(f"series {series_id!r}: {exc}") from None
    model = analysis.model_for(order, seasonal_order)[0] if analysis else validate_order(order, seasonal_order)
    period = model.period or (analysis.seasonal.examined_period if analysis else None)
    check_bounds(model, period, horizon, origins)
    try:
        with threadpool_limits(limits=1):
            check = backtest_order(prepared, model, choice, period, horizon=horizon, origins=origins)
    except NUMERICAL_FAILURES as exc:
        raise LagdeskError(
            f"series {series_id!r}: the forecast check of {model.label()} failed ({type(exc).__name__}: {exc})"
        ) from None
    return {**check.to_dict(), "data_sha256": fingerprint}
