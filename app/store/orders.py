"""The decided orders as the export hands them on, and the refits of chosen orders.

One record per series whose verdict has one of the chosen statuses (approved, overridden), with
the fields of :data:`ORDER_FIELDS`; the transform and the constant are the reviewer's (the
verdict's ``transform`` and ``trend``; a verdict saved before they were stored takes the term
the analysis gives its order). Series marked ``not_arima`` are listed apart
(:func:`not_arima_series`). Their names are fixed, so forecasting jobs can rely on
them; the seasonal fields are spelled out so that nobody confuses ``d`` with ``D``.

``data_changed`` is true when the series' data changed after the decision (an import since
then, and no analysis yet to re-check the order on the new data): the order was chosen for
data the forecasting job will no longer see, so the record says so until ``lagdesk analyze``
confirms the order or sends the series back to the queue (``recheck``).

``interventions`` are the outliers, level shifts and temporary changes the analysis estimated
(``timestamp``, ``kind``, ``size`` on the transformed scale; :mod:`app.core.interventions`;
the time stamp spelt as ``last_timestamp`` is, :func:`app.store.timestamps.stored_form`):
the ARIMA order describes the series with their effects taken out, and ``parameters`` were
fitted to it so. A reviewer who dropped or added one saved their own set with the verdict
(sizes estimated jointly with the decided order on the decided scale), and that set is carried;
otherwise the analysis' own are carried when the decision keeps the analysis' transform (their
sizes are on that scale), and none otherwise.

``parameters`` are the fitted coefficients of the chosen model on the series' current data, by
name (statsmodels' names, with ``const`` for a constant, ``drift`` for a drift or trend slope,
and ``sigma2`` for the innovation variance). They come from the stored analysis when it is
current and fitted the chosen order with the chosen transform, else from the latest refit in
``order_fits`` when it is for the same data and model; otherwise the record carries None and
the caller refits (:func:`app.jobs.order_fits.fit_stored_order`) and saves the refit here with
:func:`save_order_fit`, so the next export reuses it.
"""

from __future__ import annotations

import json
from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace
from typing import TypeVar

import sqlite_utils

from app.core.analysis import Analysis, Candidate, Intervention
from app.core.errors import LagdeskError, OrderError
from app.core.order import Order, validate_order
from app.core.transform_choice import TransformChoice
from app.core.vocabulary import DECIDED, VerdictStatus
from app.store.analyses import analysis_from_json
from app.store.database import utc_now, write_transaction
from app.store.timestamps import stored_form
from app.store.verdicts import verdict_counts

ORDER_FIELDS = (
    "series_id", "p", "d", "q", "seasonal_p", "seasonal_d", "seasonal_q", "period", "transform",
    "include_constant", "decision", "reviewer", "decided_at", "note", "data_sha256", "data_changed",
    "last_timestamp", "engine_version", "parameters", "interventions",
)
ALWAYS_COUNTED = (VerdictStatus.PENDING, VerdictStatus.PARKED, VerdictStatus.RECHECK)
# Listed apart in the export, for the forecasting job to route; never counted as left out.
ROUTED_FIELDS = ("series_id", "reviewer", "decided_at", "note")
T = TypeVar("T")


@dataclass
class DecidedOrder:
    """One exported order: its ``record`` (the :data:`ORDER_FIELDS`; ``parameters`` None while a
    refit is needed), the model and transform to fit, and the fingerprint of the current data."""

    record: dict
    model: Order
    transform: TransformChoice
    fingerprint: str
    interventions: tuple[Intervention, ...] = ()


def checked_statuses(statuses: Sequence[str]) -> list[str]:
    """The export's statuses, each approved or overridden, without repeats.

    Raises
    ------
    LagdeskError
        When a status is not a decided one, or none is given.
    """
    chosen = list(dict.fromkeys(statuses))
    wrong = [s for s in chosen if s not in DECIDED]
    if wrong or not chosen:
        raise LagdeskError(
            f"the export takes statuses {' and '.join(DECIDED)}, not {wrong[0]!r}" if wrong
            else "the export needs at least one status (approved, overridden)"
        )
    return chosen


def decided_orders(db: sqlite_utils.Database, statuses: Sequence[str] = DECIDED) -> list[DecidedOrder]:
    """Every series whose verdict has one of ``statuses``, by series id (see the module notes)."""
    chosen = checked_statuses(statuses)
    rows = db.query(
        "SELECT v.series_id, v.status, v.arima_order, v.seasonal_order, v.transform, v.trend, v.interventions, "
        "v.reviewer, v.decided_at, "
        "v.note, v.data_sha256, s.last_timestamp, s.fingerprint, "
        "a.state = 'complete' AND a.fingerprint = s.fingerprint AS analysis_current, a.engine_version, "
        "r.result AS analysis, "
        "f.fingerprint AS fit_fingerprint, f.model AS fit_model, f.parameters AS fit_parameters, "
        "f.engine_version AS fit_engine_version "
        "FROM verdicts v JOIN series s ON s.series_id = v.series_id "
        "LEFT JOIN analyses a ON a.series_id = v.series_id "
        "LEFT JOIN analysis_results r ON r.series_id = v.series_id "
        "LEFT JOIN order_fits f ON f.series_id = v.series_id "
        f"WHERE v.status IN ({', '.join('?' for _ in chosen)}) ORDER BY v.series_id",
        chosen,
    )
    return [_decided(row) for row in rows]


def _decided(row: dict) -> DecidedOrder:
    order, seasonal = json.loads(row["arima_order"]), json.loads(row["seasonal_order"])
    transform = TransformChoice.from_json(json.loads(row["transform"]))
    analysis = analysis_from_json(row["series_id"], row["analysis"]) if row["analysis"] else None
    try:
        model, candidate = verdict_model(analysis, order, seasonal, row["trend"])
    except OrderError as exc:
        raise OrderError(f"series {row['series_id']!r}: the {row['status']} order cannot be used ({exc})") from None
    parameters, engine_version = None, None
    same_transform = analysis is not None and analysis.transform.to_json() == transform.to_json()
    chosen = json.loads(row["interventions"]) if row["interventions"] else None
    interventions = decided_interventions(analysis, transform, chosen)
    if row["analysis_current"] and same_transform and candidate is not None and chosen is None:
        parameters, engine_version = candidate.parameter_values(), row["engine_version"]
    elif row["fit_fingerprint"] == row["fingerprint"] and row["fit_model"] == model_key(model, transform, interventions):
        parameters, engine_version = json.loads(row["fit_parameters"]), row["fit_engine_version"]
    record = {
        "series_id": row["series_id"], "p": model.p, "d": model.d, "q": model.q,
        "seasonal_p": model.P, "seasonal_d": model.D, "seasonal_q": model.Q, "period": model.period,
        "transform": transform.to_json(), "include_constant": model.trend != "n",
        "decision": row["status"], "reviewer": row["reviewer"], "decided_at": row["decided_at"],
        "note": row["note"], "data_sha256": row["data_sha256"], "data_changed": row["data_sha256"] != row["fingerprint"],
        "last_timestamp": row["last_timestamp"],
        "engine_version": engine_version, "parameters": parameters,
        "interventions": [{"timestamp": stored_form(i.timestamp), "kind": str(i.kind), "size": i.size}
                          for i in interventions],
    }
    return DecidedOrder(record, model, transform, row["fingerprint"], interventions)


def verdict_model(
    analysis: Analysis | None, order: Sequence[int], seasonal_order: Sequence[int] | None, trend: str | None
) -> tuple[Order, Candidate | None]:
    """The model a verdict decided, and the analysis' candidate of exactly that model (None when
    it fitted none): the order with the term the analysis gives it
    (:meth:`app.core.analysis.Analysis.model_for`), or with the reviewer's own ``trend`` when the
    verdict stores one.

    Raises
    ------
    OrderError
        When the order is not a valid one.
    """
    model, candidate = analysis.model_for(order, seasonal_order) if analysis else (validate_order(order, seasonal_order), None)
    if trend is not None and trend != model.trend:
        return replace(model, trend=trend), None
    return model, candidate


def decided_interventions(
    analysis: Analysis | None, transform: TransformChoice, chosen: Sequence[dict] | None
) -> tuple[Intervention, ...]:
    """The interventions a decided order takes out of the series: the reviewer's (``chosen``,
    the verdict's stored list) when there are such, else the analysis' own on its scale."""
    if chosen is not None:
        return tuple(Intervention.from_dict(item) for item in chosen)
    return analysis.interventions_on(transform) if analysis is not None else ()


def model_key(model: Order, transform: TransformChoice, interventions: Sequence[Intervention] = ()) -> str:
    """The model a refit was for, as stored in ``order_fits.model``: the order, term, transform
    and the interventions taken out (time, kind and size)."""
    return json.dumps({
        "order": list(model.order), "seasonal_order": list(model.seasonal_order), "trend": model.trend,
        "transform": transform.to_json(),
        "interventions": [[i.timestamp, str(i.kind), i.size] for i in interventions],
    }, sort_keys=True)


def save_order_fit(
    db: sqlite_utils.Database, series_id: str, fingerprint: str, model: Order, transform: TransformChoice,
    parameters: dict[str, float], engine_version: str, interventions: Sequence[Intervention] = (),
) -> None:
    """Keep the parameters of a refit of a chosen order, replacing the series' earlier refit."""
    with write_transaction(db):
        db.table("order_fits").insert({
            "series_id": series_id, "fingerprint": fingerprint, "model": model_key(model, transform, interventions),
            "parameters": json.dumps(parameters), "engine_version": engine_version, "fitted_at": utc_now(),
        }, replace=True)


def read_snapshot(db: sqlite_utils.Database, read: Callable[[], T]) -> T:
    """What ``read`` returns, every read in it seeing one snapshot of the database (inside an
    open transaction, that transaction's)."""
    if db.conn.in_transaction:
        return read()
    db.conn.execute("BEGIN")  # a read transaction: every read below sees the same committed state
    try:
        return read()
    finally:
        db.conn.execute("ROLLBACK")


def export_snapshot(db: sqlite_utils.Database, statuses: Sequence[str] = DECIDED) -> tuple[list[DecidedOrder], dict[str, int]]:
    """:func:`decided_orders` and :func:`left_out_counts` read from one snapshot of the
    database, so the orders and the counts of what is missing agree."""
    return read_snapshot(db, lambda: (decided_orders(db, statuses), left_out_counts(db, statuses)))


def not_arima_series(db: sqlite_utils.Database) -> list[dict]:
    """The series a reviewer marked ``not_arima``, by id, each with the :data:`ROUTED_FIELDS`."""
    return list(db.query(
        f"SELECT {', '.join(ROUTED_FIELDS)} FROM verdicts WHERE status = ? ORDER BY series_id", [VerdictStatus.NOT_ARIMA.value],
    ))


def left_out_counts(db: sqlite_utils.Database, statuses: Sequence[str] = DECIDED) -> dict[str, int]:
    """How many series an export of ``statuses`` leaves out, by status: always pending, parked
    and recheck, plus a decided status that was not chosen (``not_arima`` series are listed,
    not left out)."""
    chosen = checked_statuses(statuses)
    counts = verdict_counts(db)
    return {
        str(status): counts[status] for status in VerdictStatus
        if status in ALWAYS_COUNTED or (status not in chosen and status != VerdictStatus.NOT_ARIMA)
    }
