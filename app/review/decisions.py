"""A reviewer's decision on one series: checking it, saving it, reopening it, and fitting a
custom order before deciding.

The pages, the JSON API and ``lagdesk decide`` all go through these functions, so a verdict
saved from a form, sent by a script or typed in a terminal is checked the same way.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import replace

import sqlite_utils

from app.core.analysis import Analysis, Candidate, delta_aicc_against
from app.core.errors import LagdeskError, OrderError
from app.core.order import Order, validate_order
from app.core.transform import TransformChoice
from app.core.vocabulary import REVIEWER_STATUSES, VerdictStatus
from app.jobs.order_fits import fit_stored_order, load_prepared
from app.store.analyses import load_analysis
from app.store.verdicts import get_verdict, set_verdict

# A note is a reviewer's reason in a few sentences; the bound keeps a pasted file (or an
# attacker's megabytes) out of the history, which keeps every version of it.
MAX_NOTE_LENGTH = 5_000


class DecisionError(LagdeskError):
    """A decision that contradicts the analysis (e.g. 'approved' with an order that was not suggested)."""


def checked_note(note: str) -> str:
    """``note`` when it is at most :data:`MAX_NOTE_LENGTH` characters long.

    Raises
    ------
    DecisionError
        Saying the bound and the note's length.
    """
    if len(note) > MAX_NOTE_LENGTH:
        raise DecisionError(f"a note may hold at most {MAX_NOTE_LENGTH:,} characters; this one has {len(note):,}")
    return note


def checked_order(analysis: Analysis | None, n: int, order: Sequence[int], seasonal_order: Sequence[int] | None) -> Order:
    """Validate an order for a series of ``n`` points, with the deterministic term the engine
    gives it (:meth:`app.core.analysis.Analysis.model_for`, so its criteria compare with the
    candidates').

    Raises
    ------
    OrderError
        With a message naming the bad value.
    """
    model = validate_order(order, seasonal_order, n=n)
    return analysis.model_for(model.order, model.seasonal_order)[0] if analysis else model


def fit_custom_order(db: sqlite_utils.Database, series_id: str, order: Sequence[int], seasonal_order: Sequence[int] | None) -> Candidate:
    """Fit ``order`` to the stored series on the scale the engine identified it on; nothing is saved.

    The candidate's ``source`` is ``custom`` and its ``delta_aicc`` compares it with the stored
    candidates of the same differencing (None when there is none).

    Raises
    ------
    UnknownSeries, OrderError, SeriesProblem
    """
    prepared, _ = load_prepared(db, series_id)
    analysis = load_analysis(db, series_id)
    model = checked_order(analysis, prepared.n, order, seasonal_order)
    transform = analysis.transform if analysis else TransformChoice("none")
    fit = fit_stored_order(prepared, model, transform).to_candidate()
    return replace(fit, source=("custom",), delta_aicc=delta_aicc_against(fit, analysis.candidates if analysis else ()))


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
    order if one is given; ``pending`` reopens a decided series (its order is cleared; the
    history keeps every step).

    Raises
    ------
    UnknownSeries, StaleVersion, OrderError, DecisionError
    """
    get_verdict(db, series_id)  # UnknownSeries before anything else
    checked_note(note)
    if status not in REVIEWER_STATUSES:
        raise DecisionError(f"status must be one of {', '.join(REVIEWER_STATUSES)}, not {status!r}")
    analysis = load_analysis(db, series_id)
    if status == VerdictStatus.PENDING:
        order = seasonal_order = None
    if status == VerdictStatus.APPROVED:
        if analysis is None:
            raise DecisionError(f"series {series_id!r} has no analysis, so no suggestion to approve; send 'overridden' with an order")
        suggested = analysis.suggested.order
        if order is None:
            order, seasonal_order = suggested.order, suggested.seasonal_order
        elif not suggested.same_orders(order, seasonal_order):
            raise DecisionError(
                f"'approved' means the suggested {suggested.label()}; use 'overridden' for "
                f"{validate_order(order, seasonal_order).label()}"
            )
    if status == VerdictStatus.OVERRIDDEN and order is None:
        raise OrderError("an overridden verdict needs an order [p, d, q]")
    if order is not None:
        n = analysis.n if analysis else load_prepared(db, series_id)[0].n
        model = checked_order(analysis, n, order, seasonal_order)
        order, seasonal_order = list(model.order), list(model.seasonal_order)
    return set_verdict(
        db, series_id, status=status, order=order, seasonal_order=seasonal_order,
        transform=analysis.transform.to_json() if analysis and status != VerdictStatus.PENDING else "none",
        note=note, reviewer=reviewer, version=version,
    )
