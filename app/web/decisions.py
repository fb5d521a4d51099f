"""A reviewer's decision on one series: checking it, saving it, and fitting a custom order first.

Pages and the JSON API both go through these functions, so a verdict saved from a form and
one sent by a script are checked the same way.
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlite_utils
from threadpoolctl import threadpool_limits

from app.core.errors import LagdeskError, OrderError
from app.core.fitting import ModelOrder, fit_candidate, validate_order
from app.core.prepare import prepare_series
from app.core.transform import TransformChoice, apply_transform
from app.store.analyses import load_analysis
from app.store.database import UnknownSeries
from app.store.series import load_series
from app.store.verdicts import get_verdict, set_verdict

NO_SEASON = (0, 0, 0, 0)
REVIEW_STATUSES = ("approved", "overridden", "parked")


class DecisionError(LagdeskError):
    """A decision that contradicts the analysis (e.g. 'approved' with an order that was not suggested)."""


def _same_differencing(candidate: dict, model: ModelOrder) -> bool:
    return candidate["order"][1] == model.order[1] and list(candidate["seasonal_order"])[1:] == list(model.seasonal_order)[1:]


def checked_order(analysis: dict | None, n: int, order: Sequence[int], seasonal_order: Sequence[int] | None) -> ModelOrder:
    """Validate an order for a series of ``n`` points, with the deterministic term the engine's
    candidates of the same differencing used (so their AICc and BIC can be compared).

    Raises
    ------
    OrderError
        With a message naming the bad value.
    """
    model = validate_order(order, seasonal_order or NO_SEASON, n=n)
    for candidate in (analysis or {}).get("candidates", []):
        if _same_differencing(candidate, model):
            return ModelOrder(model.order, model.seasonal_order, candidate["trend"])
    return model


def fit_order(db: sqlite_utils.Database, series_id: str, order: Sequence[int], seasonal_order: Sequence[int] | None) -> dict:
    """Fit ``order`` to the stored series on the scale the engine identified it on.

    Returns the candidate dict the engine stores (``CandidateFit.to_dict()``) plus
    ``delta_aicc``: AICc minus the smallest AICc among the stored candidates with the same
    differencing (None when there is none; criteria of different d are not comparable).

    Raises
    ------
    UnknownSeries, OrderError, SeriesProblem
    """
    raw = load_series(db, series_id)
    if raw is None:
        raise UnknownSeries(series_id)
    analysis = load_analysis(db, series_id)
    prepared = prepare_series(raw, series_id)
    model = checked_order(analysis, prepared.n, order, seasonal_order)
    choice = TransformChoice.from_json(analysis.get("transform", "none")) if analysis else TransformChoice("none")
    # One BLAS thread: a small dense fit gains nothing from more, and with an analysis run on
    # the same cores, threads fighting over them make it many times slower.
    with threadpool_limits(limits=1):
        fit = fit_candidate(apply_transform(prepared.values, choice), model).to_dict()
    comparable = [c["aicc"] for c in (analysis or {}).get("candidates", []) if _same_differencing(c, model)]
    fit["delta_aicc"] = fit["aicc"] - min(comparable) if comparable else None
    fit["source"] = ["custom"]
    return fit


def decide(
    db: sqlite_utils.Database,
    series_id: str,
    *,
    status: str,
    order: Sequence[int] | None,
    seasonal_order: Sequence[int] | None,
    note: str,
    reviewer: str,
    version: int,
) -> dict:
    """Check and save a verdict; returns the new verdict.

    ``approved`` takes the suggestion (an order, if given, must be the suggested one);
    ``overridden`` needs an order, checked against the series length; ``parked`` keeps an
    order if one is given.

    Raises
    ------
    UnknownSeries, StaleVersion, OrderError, DecisionError
    """
    get_verdict(db, series_id)  # UnknownSeries before anything else
    if status not in REVIEW_STATUSES:
        raise DecisionError(f"status must be one of {', '.join(REVIEW_STATUSES)}, not {status!r}")
    analysis = load_analysis(db, series_id)
    if status == "approved":
        if analysis is None:
            raise DecisionError(f"series {series_id!r} has no analysis, so no suggestion to approve; send 'overridden' with an order")
        suggested = analysis["suggested"]
        if order is None:
            order, seasonal_order = suggested["order"], suggested["seasonal_order"]
        elif list(order) != list(suggested["order"]) or list(seasonal_order or NO_SEASON) != list(suggested["seasonal_order"]):
            raise DecisionError(
                f"'approved' means the suggested {suggested['order']} {suggested['seasonal_order']}; "
                f"use 'overridden' for {list(order)} {list(seasonal_order or NO_SEASON)}"
            )
    if status == "overridden" and order is None:
        raise OrderError("an overridden verdict needs an order [p, d, q]")
    if order is not None:
        n = analysis["n"] if analysis else len(load_series(db, series_id))
        model = checked_order(analysis, n, order, seasonal_order)
        order, seasonal_order = list(model.order), list(model.seasonal_order)
    return set_verdict(
        db, series_id, status=status, order=order, seasonal_order=seasonal_order,
        transform=analysis.get("transform", "none") if analysis else "none",
        note=note, reviewer=reviewer, version=version,
    )
