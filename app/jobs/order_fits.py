"""Fitting a chosen order to a series' stored data.

Callers: the export (the parameters of a custom order that no analysis fitted), a decision on
such an order (its fit is kept for the export), the re-check
after new data (is the approved order still good?), and the review service's custom fits and
forecast checks. Fits run with BLAS pinned to one thread: on these small matrices extra BLAS threads only compete (three times slower measured
here on two cores).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import sqlite_utils
from threadpoolctl import threadpool_limits

from app.core.analysis import Analysis, Intervention
from app.core.chosen_interventions import relocated
from app.core.engine_version import ENGINE_VERSION
from app.core.errors import OrderError
from app.core.fitting import CandidateFit, fit_candidate
from app.core.interventions import adjusted
from app.core.order import Order
from app.core.prepare import PreparedSeries, prepare_series
from app.core.seasonality import default_period
from app.core.transform import TransformChoice, apply_transform
from app.store.database import UnknownSeries
from app.store.orders import DecidedOrder, save_order_fit
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


def data_period(prepared: PreparedSeries, analysis: Analysis | None) -> int | None:
    """The seasonal period of the series' data, at whose lags a chosen order's residuals are
    checked whether or not the order has seasonal terms (:func:`app.core.fitting.ljung_box_lags`):
    the period of the analysis' suggestion (None when the analysis found the data non-seasonal),
    else, with no analysis, the one the sampling frequency implies."""
    return analysis.period if analysis is not None else default_period(prepared.freq)


def fit_stored_order(
    prepared: PreparedSeries, model: Order, transform: TransformChoice, interventions: Sequence[Intervention] = (),
    period: int | None = None,
) -> CandidateFit:
    """Fit ``model`` to the series on the ``transform`` scale, with the effects of
    ``interventions`` (the analysis' own, :meth:`app.core.analysis.Analysis.interventions_on`,
    or a reviewer's) taken out at their sizes, naming the series on failure; ``period`` is the
    data's seasonal period for the residual checks (:func:`data_period`).

    Raises
    ------
    OrderError
        When the order cannot be fitted to this series (too few points, a transform that needs
        positive values, a numerical failure of the fit, an intervention at a time the series
        no longer has).
    """
    placed = relocated(prepared.series_id, prepared.index, interventions)
    try:
        with threadpool_limits(limits=1):
            return fit_candidate(adjusted(apply_transform(prepared.values, transform), placed), model, period=period)
    except OrderError as exc:
        raise OrderError(f"series {prepared.series_id!r}: {model.label()} cannot be fitted ({exc})") from None
    except NUMERICAL_FAILURES as exc:
        raise OrderError(
            f"series {prepared.series_id!r}: the fit of {model.label()} failed ({type(exc).__name__}: {exc})"
        ) from None


def fit_and_keep(
    db: sqlite_utils.Database, prepared: PreparedSeries, fingerprint: str, model: Order, transform: TransformChoice,
    interventions: Sequence[Intervention] = (), period: int | None = None,
) -> CandidateFit:
    """Fit a chosen model (:func:`fit_stored_order`) and keep its parameters for the export,
    filed under the ``fingerprint`` of the data fitted."""
    fit = fit_stored_order(prepared, model, transform, interventions, period)
    parameters = fit.to_candidate(keep_residuals=False).parameter_values()
    save_order_fit(db, prepared.series_id, fingerprint, model, transform, parameters, ENGINE_VERSION, interventions)
    return fit


def fill_parameters(db: sqlite_utils.Database, decided: DecidedOrder) -> None:
    """Refit a decided order whose record has no parameters yet, keep the refit, and fill them in."""
    prepared, fingerprint = load_prepared(db, decided.record["series_id"])
    fit = fit_and_keep(db, prepared, fingerprint, decided.model, decided.transform, decided.interventions)
    decided.record["parameters"] = fit.to_candidate(keep_residuals=False).parameter_values()
    decided.record["engine_version"] = ENGINE_VERSION
