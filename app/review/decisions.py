"""A reviewer's decision on one series: checking it, saving it, reopening it, and fitting a
custom order before deciding.

The pages, the JSON API and ``lagdesk decide`` all go through these functions, so a verdict
saved from a form, sent by a script or typed in a terminal is checked the same way.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from contextlib import AbstractContextManager, nullcontext
from dataclasses import dataclass, replace

import sqlite_utils

from app.core.analysis import Analysis, Candidate, Intervention, delta_aicc_against
from app.core.chosen_interventions import place_interventions
from app.core.errors import LagdeskError, OrderError
from app.core.fitting import DECISION_LJUNG_BOX_LEVEL
from app.core.interventions import sized_interventions
from app.core.order import Order, validate_order
from app.core.p_values import p_words
from app.core.prepare import PreparedSeries
from app.core.series_ids import printable
from app.core.transform import LAMBDA_BOUNDS, TransformChoice, apply_transform
from app.core.vocabulary import DECIDED, REVIEWER_STATUSES, Flag, VerdictStatus
from app.jobs.order_fits import NUMERICAL_FAILURES, data_period, fit_and_keep, fit_stored_order, load_prepared
from app.store.analyses import analysis_record, load_analysis
from app.store.database import UnknownSeries
from app.store.orders import decided_interventions
from app.store.series import unknown_series
from app.store.verdicts import StaleVersion, get_verdict, set_verdict

# A note is a reviewer's reason in a few sentences; the bound keeps a pasted file (or an
# attacker's megabytes) out of the history, which keeps every version of it.
MAX_NOTE_LENGTH = 5_000
INNOVATION_VARIANCE = "sigma2"


class DecisionError(LagdeskError):
    """A decision that contradicts the analysis (e.g. 'approved' with an order that was not suggested)."""


class OverrideNeeded(DecisionError):
    """An approval of something other than the suggestion: what was given can be saved as an
    override; each client says how in its own terms (the command line prints the command)."""


class ConfirmationNeeded(DecisionError):
    """A decision that needs ``confirm``: an order whose residuals fail the Ljung-Box test at 1%, or
    the suggestion of an analysis of earlier data."""


# Interventions as a reviewer names them: {"timestamp": ..., "kind": ...} each.
ChosenInterventions = Sequence[Mapping[str, object]]


@dataclass(frozen=True)
class CustomFit:
    """A model fitted on request: its candidate statistics and the interventions taken out of
    the series for it, ``chosen`` when they were sized with this model (a set the reviewer named,
    or the analysis' own under a model the analysis did not fit) rather than kept at the
    analysis' sizes."""

    candidate: Candidate
    interventions: tuple[Intervention, ...]
    chosen: bool

    def to_dict(self) -> dict:
        return {**self.candidate.to_dict(), "interventions": [i.to_dict() for i in self.interventions],
                "interventions_chosen": self.chosen}


def checked_note(note: str) -> str:
    """``note`` without control or format characters other than line breaks and tabs
    (:func:`app.core.series_ids.printable`: an escape sequence or a direction mark would rewrite
    a terminal or reorder a page), when it is at most :data:`MAX_NOTE_LENGTH` characters long.

    Raises
    ------
    DecisionError
        Saying the bound and the note's length.
    """
    if len(note) > MAX_NOTE_LENGTH:
        raise DecisionError(f"a note may hold at most {MAX_NOTE_LENGTH:,} characters; this one has {len(note):,}")
    return printable(note, keep="\r\n\t")


def fails_ljung_box(candidate: Candidate) -> bool:
    """Whether the candidate's residuals fail the Ljung-Box test at :data:`DECISION_LJUNG_BOX_LEVEL`."""
    return candidate.ljung_box_p is not None and candidate.ljung_box_p < DECISION_LJUNG_BOX_LEVEL


def approval_risks(candidate: Candidate, flags: Sequence[str] = ()) -> list[str]:
    """Why approving ``candidate`` with one key or click is risky, in words; empty when it is not.

    A fit that did not converge, residuals that fail the Ljung-Box test at 1%, coefficients
    without a standard error (the information matrix could not be inverted), or a series the
    analysis ``flags`` as intermittent or lumpy demand (Syntetos, Boylan & Croston 2005; a
    Gaussian ARIMA suits it poorly) or as holding a run of one repeated value (a stuck sensor
    or a frozen feed, :mod:`app.core.flat_runs`): each asks for a note saying why the order is
    approved anyway.
    """
    risks = []
    if Flag.INTERMITTENT_DEMAND in flags:
        risks.append("the series is intermittent demand, which a Gaussian ARIMA suits poorly (or record it as not an ARIMA series)")
    if Flag.FLAT_RUN in flags:
        risks.append("the series holds a run of one repeated value: a stuck sensor or a frozen feed, checked at the source?")
    if not candidate.converged:
        risks.append("the fit did not converge")
    if fails_ljung_box(candidate):
        assert candidate.ljung_box_p is not None
        risks.append(f"its residuals fail the Ljung-Box test at 1% ({p_words(candidate.ljung_box_p)})")
    # sigma2 is concentrated out of the likelihood (app.core.fitting): it never has a standard error.
    missing = [p.name for p in candidate.params if p.se is None and p.name != INNOVATION_VARIANCE]
    if missing:
        risks.append(f"no standard error for {', '.join(missing)}")
    return risks


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


def with_constant(model: Order, include_constant: bool | None) -> Order:
    """``model`` with or without its constant; None keeps the term it has.

    A constant is a mean when nothing is differenced, a drift (a linear trend in levels) after
    one difference, ordinary or seasonal; a model that already has one keeps its own (a mean
    and a trend stays so).

    Raises
    ------
    OrderError
        For a constant in a model differenced twice (it would be a quadratic trend).
    """
    if include_constant is None:
        return model
    if not include_constant:
        return replace(model, trend="n")
    if model.trend != "n":
        return model
    differences = model.d + model.D
    if differences >= 2:
        raise OrderError(
            f"{model.label()} is differenced twice: a constant there is a quadratic trend, which Lagdesk does not fit"
        )
    return replace(model, trend="c" if differences == 0 else "t")


def checked_transform(series_id: str, analysis: Analysis | None, transform: str | dict | None) -> TransformChoice:
    """The transform a decision or fit asks for: ``"none"``, ``"log"`` or ``{"box_cox": lambda}``;
    None takes the analysis' (none without an analysis).

    Raises
    ------
    DecisionError
        For anything else, naming the series.
    """
    if transform is None:
        return analysis.transform if analysis else TransformChoice("none")
    try:
        choice = TransformChoice.from_json(transform)
    except ValueError as exc:
        raise DecisionError(f"series {series_id!r}: {exc}") from None
    low, high = LAMBDA_BOUNDS
    if choice.lam is not None and not low <= choice.lam <= high:
        # Beyond these the transformed values crowd together (the fit's variance collapses to
        # zero at lambda -7 on US output) or spread by many orders of magnitude.
        raise DecisionError(f"series {series_id!r}: a Box-Cox lambda must lie between {low:g} and {high:g}, "
                            f"the range the engine searches, not {choice.lam:g}")
    return choice


def check_scale(prepared: PreparedSeries, choice: TransformChoice) -> None:
    """Refuse a log or Box-Cox transform of a series with values at or below zero.

    Raises
    ------
    OrderError
        Naming the series and how many values are not positive.
    """
    try:
        apply_transform(prepared.values, choice)
    except OrderError as exc:
        raise OrderError(f"series {prepared.series_id!r}: {exc}") from None


def fit_custom_order(
    db: sqlite_utils.Database, series_id: str, order: Sequence[int], seasonal_order: Sequence[int] | None,
    transform: str | dict | None = None, include_constant: bool | None = None,
    interventions: ChosenInterventions | None = None,
) -> CustomFit:
    """Fit ``order`` to the stored series; nothing is saved.

    ``transform`` and ``include_constant`` default to the analysis' transform and the term the
    engine gives the order; ``interventions`` (time stamp and kind of each) to the analysis' own
    on its scale. Interventions the reviewer names are sized jointly with the order
    (:func:`app.core.interventions.sized_interventions`), then taken out as the engine's
    are. The candidate's ``source`` is ``custom`` and its ``delta_aicc`` compares it with the
    stored candidates of the same differencing and transform (None when there is none, or when
    other interventions make the series another one: criteria on other data do not compare).

    Raises
    ------
    UnknownSeries, OrderError, SeriesProblem, DecisionError
    """
    prepared, _ = load_prepared(db, series_id)
    analysis = load_analysis(db, series_id)
    model = with_constant(checked_order(analysis, prepared.n, order, seasonal_order), include_constant)
    choice = checked_transform(series_id, analysis, transform)
    sized = reviewer_interventions(prepared, model, choice, analysis, interventions)
    taken_out = taken_out_with(analysis, choice, sized)
    fit = fit_stored_order(prepared, model, choice, taken_out, data_period(prepared, analysis)).to_candidate()
    comparable = analysis is not None and analysis.transform.to_json() == choice.to_json() and sized is None
    return CustomFit(
        replace(fit, source=("custom",), delta_aicc=delta_aicc_against(fit, analysis.candidates if comparable and analysis else ())),
        taken_out, sized is not None,
    )


def taken_out_with(analysis: Analysis | None, choice: TransformChoice,
                   sized: tuple[Intervention, ...] | None) -> tuple[Intervention, ...]:
    """What a fit takes out of the series: the interventions :func:`reviewer_interventions`
    sized, else the analysis' own on its scale."""
    if sized is not None:
        return sized
    return analysis.interventions_on(choice) if analysis else ()


def reviewer_interventions(
    prepared: PreparedSeries, model: Order, choice: TransformChoice, analysis: Analysis | None,
    interventions: ChosenInterventions | None,
) -> tuple[Intervention, ...] | None:
    """The interventions to take out with ``model`` on the ``choice`` scale, sized jointly with it.

    ``interventions`` names them (time stamp and kind each); None means the analysis' own. The
    analysis sized its own under its leading order, so their sizes belong to the candidates it
    fitted on its scale: for exactly such a model and exactly that set the answer is None (keep
    the analysis' sizes and candidate). Any other model or set is sized anew
    (:func:`app.core.interventions.sized_interventions`); a series without interventions
    and none named is None as well.

    Raises
    ------
    OrderError
        Naming the series and the item that does not fit it, or a fit that fails.
    """
    own = {(i.position, i.kind) for i in analysis.interventions} if analysis is not None else set()
    if interventions is None:
        placed = sorted(own, key=lambda pk: pk[0])
    else:
        placed = place_interventions(prepared.series_id, prepared.index, prepared.values, interventions)
    if set(placed) == own and (not own or _stored_candidate(analysis, model, choice) is not None):
        return None
    try:
        return tuple(sized_interventions(apply_transform(prepared.values, choice), model, placed, prepared.index))
    except NUMERICAL_FAILURES as exc:
        why = str(exc) if isinstance(exc, ValueError) else f"{type(exc).__name__}: {exc}"  # a ValueError is in words
        raise OrderError(f"series {prepared.series_id!r}: the interventions could not be sized with {model.label()} ({why})") from None


def _stored_candidate(analysis: Analysis | None, model: Order, choice: TransformChoice) -> Candidate | None:
    """The analysis' candidate of exactly this model on this scale, if it fitted one."""
    if analysis is None or analysis.transform.to_json() != choice.to_json():
        return None
    return next((c for c in analysis.candidates if c.order == model), None)



def carried_interventions(db: sqlite_utils.Database, series_id: str, decided: dict) -> tuple[Intervention, ...]:
    """The analysis' own interventions that a decided order of ``series_id`` takes out of the
    series (and the export hands on with it) when the reviewer named none; empty when the
    reviewer named them (:func:`model_words` says those) or the verdict holds no order."""
    if decided["order"] is None or decided.get("interventions") is not None:
        return ()
    return decided_interventions(load_analysis(db, series_id), TransformChoice.from_json(decided["transform"]), None)


def verdict_of(db: sqlite_utils.Database, series_id: str) -> dict:
    """The current verdict of ``series_id`` (:func:`app.store.verdicts.get_verdict`); for a series
    the database does not hold, an :class:`UnknownSeries` that says when an import rejected it."""
    try:
        return get_verdict(db, series_id)
    except UnknownSeries:
        raise unknown_series(db, series_id) from None

def decided_model(db: sqlite_utils.Database, series_id: str) -> dict | None:
    """The verdict of ``series_id`` when it decided an order (approved or overridden), the model
    the hand-off exports; None for a series not decided, or decided not to be an ARIMA series."""
    verdict = verdict_of(db, series_id)
    return verdict if verdict["status"] in DECIDED and verdict["order"] is not None else None


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
    transform: str | dict | None = None,
    include_constant: bool | None = None,
    interventions: ChosenInterventions | None = None,
    confirm: bool = False,
    computing: Callable[[], AbstractContextManager[object]] = nullcontext,
) -> dict:
    """Check and save a verdict; returns the new verdict.

    ``approved`` takes the suggestion (an order, if given, must be the suggested one, with the
    analysis' transform and term); ``overridden`` needs an order, checked against the series
    length; ``parked`` keeps an order if one is given; ``pending`` reopens a decided series and
    ``not_arima`` records that no ARIMA order should forecast it (both clear the order; the
    history keeps every step). ``transform`` and ``include_constant`` override the analysis'
    transform and the term the engine gives the order, and ``interventions`` (time stamp and kind
    of each) the analysis' outliers and level shifts (None keeps them); the reviewer's
    interventions are sized with the order and stored with the verdict.

    Three gates stop a risky decision taken in one step: approving a suggestion with
    :func:`approval_risks` needs a note, approving the suggestion of an analysis of earlier data
    (the data changed since) needs ``confirm``, and so does saving an order other than the
    suggestion whose residuals fail the Ljung-Box test at 1%. An order the analysis did not
    fit with this transform and term is fitted here (and the fit kept for the export), which
    also checks that a log or Box-Cox transform meets positive data. The checks and fits of an
    order run inside ``computing()`` (the server's computation slot; nothing on the command
    line), and the version is checked again once inside: of concurrent saves at one version,
    only the first fits.

    Raises
    ------
    UnknownSeries, StaleVersion, OrderError, DecisionError, ConfirmationNeeded
    """
    current = verdict_of(db, series_id)  # UnknownSeries before anything else
    if current["version"] != version:  # before any fit: a stale form costs no computation
        raise StaleVersion(series_id, version, current)
    note = checked_note(note)
    if status not in REVIEWER_STATUSES:
        raise DecisionError(f"status must be one of {', '.join(REVIEWER_STATUSES)}, not {status!r}")
    analysis = load_analysis(db, series_id)
    if status in (VerdictStatus.PENDING, VerdictStatus.NOT_ARIMA):
        return set_verdict(db, series_id, status=status, order=None, seasonal_order=None, note=note,
                           reviewer=reviewer, version=version)
    if status == VerdictStatus.APPROVED:
        if analysis is None:
            raise OverrideNeeded(f"series {series_id!r} has no analysis, so no suggestion to approve; give an order "
                                 "and override instead")
        suggested = analysis.suggested.order
        if order is None:
            order, seasonal_order = suggested.order, suggested.seasonal_order
        elif not suggested.same_orders(order, seasonal_order):
            other = validate_order(order, seasonal_order)
            raise OverrideNeeded(
                f"series {series_id!r}: approving takes the suggested {suggested.label()}; to save {other.label()}, "
                "override instead"
            )
    if status == VerdictStatus.OVERRIDDEN and order is None:
        raise OrderError("an overridden verdict needs an order [p, d, q]")
    if order is None:
        if transform is not None or include_constant is not None or interventions is not None:
            raise DecisionError(f"series {series_id!r}: a transform, constant or interventions go with an order")
        return set_verdict(db, series_id, status=status, order=None, seasonal_order=None, note=note,
                           reviewer=reviewer, version=version)
    with computing():
        current = verdict_of(db, series_id)
        if current["version"] != version:  # another save got there while this one waited
            raise StaleVersion(series_id, version, current)
        return _decide_order(db, series_id, analysis, status, order, seasonal_order, note, reviewer, version,
                             transform, include_constant, interventions, confirm)


def _decide_order(
    db: sqlite_utils.Database, series_id: str, analysis: Analysis | None, status: str, order: Sequence[int],
    seasonal_order: Sequence[int] | None, note: str, reviewer: str, version: int, transform: str | dict | None,
    include_constant: bool | None, interventions: ChosenInterventions | None, confirm: bool,
) -> dict:
    """The part of :func:`decide` for a verdict with an order: its checks, fits and gates."""
    prepared, fingerprint = load_prepared(db, series_id)
    model = with_constant(checked_order(analysis, prepared.n, order, seasonal_order), include_constant)
    choice = checked_transform(series_id, analysis, transform)
    if transform is not None:
        check_scale(prepared, choice)
    chosen = reviewer_interventions(prepared, model, choice, analysis, interventions)
    candidate = _stored_candidate(analysis, model, choice) if chosen is None else None
    if status == VerdictStatus.APPROVED:
        assert analysis is not None
        if chosen is not None:
            raise OverrideNeeded(
                f"series {series_id!r}: approving takes the suggested {analysis.suggested.label} with the analysis' "
                "interventions; to change them, override instead"
            )
        if candidate is None or candidate.order != analysis.suggested.order:
            raise OverrideNeeded(
                f"series {series_id!r}: approving takes the suggested {analysis.suggested.label} on the analysis' scale "
                f"({analysis.transform.name()}) with its own constant; to change them, override instead"
            )
        risks = approval_risks(candidate, analysis.flags)
        if risks and not note.strip():
            raise DecisionError(
                f"series {series_id!r}: approving {candidate.label} needs a note saying why, as {'; '.join(risks)}"
            )
        if analysis_record(db, series_id)["state"] == "stale" and not confirm:
            raise ConfirmationNeeded(
                f"series {series_id!r}: the data changed after the analysis that suggested {candidate.label}; "
                "analyse the series again first, or confirm to approve it for the earlier data"
            )
    elif status == VerdictStatus.OVERRIDDEN:
        if candidate is None:
            taken_out = taken_out_with(analysis, choice, chosen)
            candidate = fit_and_keep(db, prepared, fingerprint, model, choice, taken_out,
                                     data_period(prepared, analysis)).to_candidate(keep_residuals=False)
        if fails_ljung_box(candidate) and not confirm:
            assert candidate.ljung_box_p is not None
            raise ConfirmationNeeded(
                f"series {series_id!r}: the residuals of {model.label()} fail the Ljung-Box test at 1% "
                f"({p_words(candidate.ljung_box_p)}); confirm to save it anyway"
            )
    return set_verdict(
        db, series_id, status=status, order=list(model.order), seasonal_order=list(model.seasonal_order),
        transform=choice.to_json(), trend=model.trend, interventions=chosen, note=note, reviewer=reviewer,
        version=version,
    )


def scale_words(transform: str | dict) -> str:
    """A stored transform (``"log"``, ``{"box_cox": lambda}``) in words, as every list and page
    names it (:meth:`app.core.transform.TransformChoice.name`)."""
    return TransformChoice.from_json(transform).name()


def term_words(model: dict) -> str:
    """The deterministic term of a stored model (its ``order``, ``seasonal_order`` and ``trend``)
    in words, as the candidate table names it; empty for none."""
    return Order.of(model["order"], model["seasonal_order"], model["trend"]).term_words().strip()


def model_words(decided: dict) -> str:
    """What a decision chose besides its order, in words: the scale, the deterministic term (in
    the words the queue and the candidate table use, :meth:`app.core.order.Order.term_words`)
    and the interventions when the reviewer set them (empty for the analysis' own choices)."""
    if decided["order"] is None:
        return ""
    transform = decided["transform"]
    parts = []
    if transform != "none":
        parts.append(f"on {scale_words(transform)}")
    if decided["trend"] is not None:
        parts.append(term_words(decided) or "without a constant")
    chosen = decided.get("interventions")
    if chosen is not None:
        taken = [Intervention.from_dict(i) for i in chosen]
        parts.append("interventions: " + ("; ".join(f"{i.kind.words()} at {i.timestamp}" for i in taken) if taken else "none"))
    return ", ".join(parts)
