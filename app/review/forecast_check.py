"""The forecast check of an order on a stored series, for the review page, the API and
``lagdesk backtest`` (the method is :func:`app.core.backtest.backtest_order`).

Each origin refits the order, so the work grows with the origins, the horizon and the order;
a check is bounded, since anyone who can open a page can ask for one: at most
:data:`MAX_ORIGINS` origins, a horizon of at most two seasons or :data:`MIN_HORIZON_CAP` steps
(whichever is longer), and orders within the engine's own search limits
(:data:`app.core.order.MAX_ORDER`, :data:`app.core.order.MAX_SEASONAL_ORDER`). ``lagdesk
backtest`` runs on its user's own machine and takes any order a verdict takes
(:func:`app.core.order.validate_order`): an order that can be approved can be checked. A comparison
runs the checks of :data:`MIN_COMPARED` to :data:`MAX_COMPARED` orders, each within those bounds.

Checks are not stored in the database. The last :data:`REMEMBERED_CHECKS` are kept in this
process (:class:`RecentChecks`), filed under the series' data fingerprint, the model, the
transform, the horizon and the origins: asking again for the same check answers at once, and
the review page shows the forecast score of every candidate checked since the data last changed.
"""

from __future__ import annotations

import json
import threading
from collections import OrderedDict
from collections.abc import Sequence
from typing import Any

import sqlite_utils
from threadpoolctl import threadpool_limits

from app.core.analysis import Analysis
from app.core.backtest import backtest_order
from app.core.errors import LagdeskError, OrderError
from app.core.order import MAX_ORDER, MAX_SEASONAL_ORDER, Order, validate_order
from app.core.transform import TransformChoice, apply_transform
from app.jobs.order_fits import NUMERICAL_FAILURES, load_prepared
from app.review.decisions import ChosenInterventions, decided_model, reviewer_interventions, taken_out_with, with_constant
from app.store.analyses import load_analysis
from app.store.series import series_fingerprint

MAX_ORIGINS = 20
MIN_HORIZON_CAP = 30
HORIZON_CAP_SEASONS = 2
MIN_COMPARED = 2
MAX_COMPARED = 3
# About 10 kB each (the plotted stretch and the forecasts): a megabyte or two at most.
REMEMBERED_CHECKS = 128

CheckKey = tuple[str, str, Order, str, int | None, int | None, str]


class RecentChecks:
    """The last ``size`` forecast checks of this process, the least recently used dropped first.

    A check is a pure function of the data (named by its fingerprint), the model, the
    transform, the horizon and the origins, so an entry never goes out of date: new data make a
    new fingerprint and a new key. Entries are shared, never to be changed by a reader.
    """

    def __init__(self, size: int) -> None:
        self._size = size
        self._lock = threading.Lock()
        self._checks: OrderedDict[CheckKey, dict[str, Any]] = OrderedDict()

    def get(self, key: CheckKey) -> dict[str, Any] | None:
        with self._lock:
            check = self._checks.get(key)
            if check is not None:
                self._checks.move_to_end(key)
            return check

    def put(self, key: CheckKey, check: dict[str, Any]) -> None:
        with self._lock:
            self._checks[key] = check
            self._checks.move_to_end(key)
            while len(self._checks) > self._size:
                self._checks.popitem(last=False)


RECENT_CHECKS = RecentChecks(REMEMBERED_CHECKS)


def check_key(series_id: str, fingerprint: str, model: Order, choice: TransformChoice,
              horizon: int | None = None, origins: int | None = None, interventions: str = "") -> CheckKey:
    """What a check is filed under in :data:`RECENT_CHECKS` (``None``: the default horizon or
    origins; ``interventions``: a reviewer's set as text, empty for the analysis' own)."""
    return series_id, fingerprint, model, json.dumps(choice.to_json(), sort_keys=True), horizon, origins, interventions


class ForecastCheckTooLarge(LagdeskError):
    """A forecast check asked for more origins, a longer horizon or a larger order than it takes."""


def max_horizon(period: int | None) -> int:
    """The longest horizon a check takes: two seasons or :data:`MIN_HORIZON_CAP` steps, whichever is longer."""
    return max(HORIZON_CAP_SEASONS * (period or 0), MIN_HORIZON_CAP)


def check_bounds(model: Order, period: int | None, horizon: int | None, origins: int | None, any_order: bool = False) -> None:
    """Refuse a check beyond the bounds of the module notes; with ``any_order`` (the command
    line) the order is not bounded.

    Raises
    ------
    ForecastCheckTooLarge
        Naming the bound passed.
    """
    if not any_order and (max(model.p, model.q) > MAX_ORDER or max(model.P, model.Q) > MAX_SEASONAL_ORDER):
        raise ForecastCheckTooLarge(
            f"the forecast check here takes orders up to the engine's search limits (p, q <= {MAX_ORDER}; "
            f"P, Q <= {MAX_SEASONAL_ORDER}), not {model.label()}; lagdesk backtest --order checks any order a verdict takes"
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
    include_constant: bool | None = None,
    interventions: ChosenInterventions | None = None,
    any_order: bool = False,
) -> dict[str, Any]:
    """The forecast check of one order on a stored series.

    ``order`` None checks the order the hand-off exports for the series: a decided verdict's
    (approved or overridden; with its transform, constant and interventions wherever these
    arguments leave them to the defaults), else the analysis' suggestion (with its seasonal
    order unless one is given); a seasonal order left out is none. ``any_order`` lifts the
    bound on the order (the command line; module notes).

    The deterministic term is the one the engine gives the order
    (:meth:`app.core.analysis.Analysis.model_for`) unless ``include_constant`` says otherwise;
    the transform defaults to the stored analysis' (none without an analysis); the
    interventions are the reviewer's when given (time stamp and kind each, sized with the order
    as :func:`app.review.decisions.fit_custom_order` sizes them), else the analysis' own on its
    scale, taken out as the hand-off takes them out (:func:`app.core.backtest.backtest_order`). The naive
    benchmark and the MASE scale use the model's seasonal period, else the period the analysis
    examined.

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
        When the order (unless ``any_order``), the horizon or the origins pass the bounds of the
        module notes.
    LagdeskError
        When the order or transform is not valid, or the series is too short for the check.
    """
    prepared, fingerprint = load_prepared(db, series_id)
    analysis = load_analysis(db, series_id)
    decided = decided_model(db, series_id) if order is None else None
    if decided is not None:
        order, seasonal_order = decided["order"], seasonal_order or decided["seasonal_order"]
        transform = decided["transform"] if transform is None else transform
        include_constant = decided["include_constant"] if include_constant is None else include_constant
        interventions = decided["interventions"] if interventions is None else interventions
    elif order is None:
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
    model = with_constant(model, include_constant)
    period = model.period or (analysis.seasonal.examined_period if analysis else None)
    check_bounds(model, period, horizon, origins, any_order)
    chosen = reviewer_interventions(prepared, model, choice, analysis, interventions)
    taken_out = taken_out_with(analysis, choice, chosen)
    key = check_key(series_id, fingerprint, model, choice, horizon, origins,
                    json.dumps([i.to_dict() for i in chosen]) if chosen is not None else "")
    remembered = RECENT_CHECKS.get(key)
    if remembered is not None:
        return remembered
    try:
        with threadpool_limits(limits=1):
            check = backtest_order(prepared, model, choice, period, horizon=horizon, origins=origins,
                                   interventions=taken_out)
    except NUMERICAL_FAILURES as exc:
        raise LagdeskError(
            f"series {series_id!r}: the forecast check of {model.label()} failed ({type(exc).__name__}: {exc})"
        ) from None
    result = {**check.to_dict(), "data_sha256": fingerprint}
    RECENT_CHECKS.put(key, result)
    return result


def compare_orders(
    db: sqlite_utils.Database,
    series_id: str,
    orders: Sequence[tuple[Sequence[int], Sequence[int] | None]],
    horizon: int | None = None,
    origins: int | None = None,
) -> list[dict[str, Any]]:
    """The forecast checks of two or three orders of one series, with the same horizon and origins.

    Each is :func:`backtest_series` of one ``(order, seasonal_order)`` pair, with the
    analysis' transform, so their MASE and coverage can be set side by side. Left to their
    defaults, horizon and origins come out the same for orders of the same season (a longer
    order may leave room for fewer origins: see each check's ``origins`` and ``notes``).

    Raises
    ------
    ForecastCheckTooLarge
        When fewer than :data:`MIN_COMPARED` or more than :data:`MAX_COMPARED` orders are given,
        or one check passes the bounds of the module notes (checked for all before any runs).
    LagdeskError
        When an order is given twice, or as :func:`backtest_series`.
    """
    if not MIN_COMPARED <= len(orders) <= MAX_COMPARED:
        raise ForecastCheckTooLarge(f"a comparison takes {MIN_COMPARED} or {MAX_COMPARED} orders, not {len(orders)}")
    models = [validate_order(order, seasonal) for order, seasonal in orders]
    if len({(m.order, m.seasonal_order) for m in models}) < len(models):
        raise OrderError("each order of a comparison must differ from the others")
    analysis = load_analysis(db, series_id)
    for model in models:
        period = model.period or (analysis.seasonal.examined_period if analysis else None)
        check_bounds(model, period, horizon, origins)
    return [backtest_series(db, series_id, order, seasonal, horizon=horizon, origins=origins) for order, seasonal in orders]


def remembered_checks(db: sqlite_utils.Database, series_id: str, analysis: Analysis) -> dict[Order, dict[str, Any]]:
    """The checks of the analysis' candidates (with the default horizon and origins and the
    analysis' transform) that :data:`RECENT_CHECKS` holds for the series' current data."""
    fingerprint = series_fingerprint(db, series_id)
    if fingerprint is None:
        return {}
    found = {c.order: RECENT_CHECKS.get(check_key(series_id, fingerprint, c.order, analysis.transform)) for c in analysis.candidates}
    return {model: check for model, check in found.items() if check is not None}
