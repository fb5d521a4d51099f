"""Fitting a chosen order to a series' stored data.

Three callers: the export (the parameters of a custom order that no analysis fitted), the
re-check after new data (is the approved order still good?) and the forecast check of the
review page and ``lagdesk backtest`` (:func:`backtest_series`). Fits run with BLAS pinned to one
thread: on these small matrices extra BLAS threads only compete (three times slower measured
here on two cores).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import sqlite_utils
from threadpoolctl import threadpool_limits

from app.core.backtest import backtest_order
from app.core.errors import LagdeskError, OrderError
from app.core.fitting import CandidateFit, ModelOrder, fit_candidate
from app.core.identify import ENGINE_VERSION
from app.core.prepare import PreparedSeries, prepare_series
from app.core.transform import TransformChoice, apply_transform
from app.store.analyses import load_analysis
from app.store.database import UnknownSeries
from app.store.orders import DecidedOrder, candidate_parameters, chosen_model, save_order_fit
from app.store.series import load_series, series_fingerprint

NUMERICAL_FAILURES = (ValueError, ArithmeticError, np.linalg.LinAlgError)


def load_prepared(db: sqlite_utils.Database, series_id: str) -> tuple[PreparedSeries, str]:
    """The stored series on its regular grid, and the fingerprint of that data.

    The fingerprint is read before the values, as the analysis runner does: should an import
    land in between, what is computed is filed under the older data and shows as out of date.

    Raises
    ------
    UnknownSeries
        When the database holds no such series.
    """
    fingerprint = series_fingerprint(db, series_id)
    values = load_series(db, series_id)
    if fingerprint is None or values is None:
        raise UnknownSeries(series_id)
    return prepare_series(values, series_id), fingerprint


def fit_stored_order(prepared: PreparedSeries, model: ModelOrder, transform: TransformChoice) -> CandidateFit:
    """Fit ``model`` to the series on the ``transform`` scale, naming the series on failure.

    Raises
    ------
    OrderError
        When the order cannot be fitted to this series (too few points, a transform that needs
        positive values, a numerical failure of the fit).
    """
    try:
        with threadpool_limits(limits=1):
            return fit_candidate(apply_transform(prepared.values, transform), model)
    except OrderError as exc:
        raise OrderError(f"series {prepared.series_id!r}: {model.label()} cannot be fitted ({exc})") from None
    except NUMERICAL_FAILURES as exc:
        raise OrderError(
            f"series {prepared.series_id!r}: the fit of {model.label()} failed ({type(exc).__name__}: {exc})"
        ) from None


def fill_parameters(db: sqlite_utils.Database, decided: DecidedOrder) -> None:
    """Refit a decided order whose record has no parameters yet, keep the refit, and fill them in."""
    prepared, fingerprint = load_prepared(db, decided.record["series_id"])
    fit = fit_stored_order(prepared, decided.model, decided.transform)
    parameters = candidate_parameters(fit.to_dict())
    save_order_fit(db, prepared.series_id, fingerprint, decided.model, decided.transform, parameters, ENGINE_VERSION)
    decided.record["parameters"] = parameters
    decided.record["engine_version"] = ENGINE_VERSION


def backtest_series(
    db: sqlite_utils.Database,
    series_id: str,
    order: Sequence[int] | None,
    seasonal_order: Sequence[int] | None = None,
    transform: str | dict | None = None,
    horizon: int | None = None,
    origins: int | None = None,
) -> dict:
    """The forecast check of one order on a stored series (:func:`app.core.backtest.backtest_order`).

    ``order`` None checks the analysis' suggestion (with its seasonal order unless one is
    given); a seasonal order left out is none.

    The deterministic term is the one the engine gives the order (:func:`chosen_model`); the
    transform defaults to the stored analysis' (none without an analysis). The naive benchmark
    and the MASE scale use the model's seasonal period, else the period the analysis examined.

    Returns
    -------
    dict
        :meth:`app.core.backtest.Backtest.to_dict` plus ``data_sha256``, the fingerprint of the
        data checked.

    Raises
    ------
    UnknownSeries
        When the database holds no such series.
    LagdeskError
        When the order or transform is not valid, or the series is too short for the check.
    """
    prepared, fingerprint = load_prepared(db, series_id)
    result = load_analysis(db, series_id)
    if order is None:
        if result is None:
            raise LagdeskError(f"series {series_id!r} has no analysis yet: give an order, or run lagdesk analyze")
        order, seasonal_order = result["suggested"]["order"], seasonal_order or result["suggested"]["seasonal_order"]
    seasonal_order = seasonal_order or (0, 0, 0, 0)
    try:
        choice = TransformChoice.from_json(transform if transform is not None else (result or {}).get("transform", "none"))
        apply_transform(prepared.values, choice)
    except (ValueError, OrderError) as exc:
        raise LagdeskError(f"series {series_id!r}: {exc}") from None
    model, _ = chosen_model(result["candidates"] if result else [], order, seasonal_order)
    period = model.seasonal_order[3] or (result["seasonal"].get("examined_period") if result else None)
    try:
        with threadpool_limits(limits=1):
            check = backtest_order(prepared, model, choice, period, horizon=horizon, origins=origins)
    except NUMERICAL_FAILURES as exc:
        raise LagdeskError(
            f"series {series_id!r}: the forecast check of {model.label()} failed ({type(exc).__name__}: {exc})"
        ) from None
    return {**check.to_dict(), "data_sha256": fingerprint}
