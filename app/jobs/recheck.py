"""Re-review when data move: does an approved order still hold on the new data?

An import that changes a series leaves its verdict alone; the verdict remembers the fingerprint
of the data it was decided on. When an analysis of *other* data than that lands for a series
whose verdict is approved or overridden, :func:`recheck_after_analysis` refits the chosen order
on the new data (or takes the analysis' own fit of it, when the analysis fitted that order with
the same transform) and sends the verdict back to the queue as ``recheck``, with the reasons in
words, when

* the differencing decision changed: the analysis now suggests another d or D than the analysis
  the order was decided on did (:func:`~app.store.verdicts.seen_differencing`), and another than
  the order has. A reviewer who chose another d than the suggestion's did so knowingly: new data
  that leave the analysis' differencing where it was are no news about it;
* the order's residuals fail the Ljung-Box test (p < :data:`~app.core.fitting.DECISION_LJUNG_BOX_LEVEL`,
  0.01, the level at which approving it asks for a note; with the lags of
  :func:`~app.core.fitting.ljung_box_lags`): at 5%, a right order would come back at one import in
  twenty;
* its AICc is more than :data:`AICC_MARGIN` (10) above that of the analysis' best candidate with
  the same differencing. Burnham & Anderson (2002, §2.6) read an AIC difference above 10 as
  "essentially no support" for the worse model, and 4-7 as "considerably less"; a verdict is
  reopened only when the evidence against the order is that strong, because a person chose
  it, perhaps for reasons the criterion does not see, and small differences come and go as data
  are added. When the order and the analysis use different transforms, both AICc values are
  first put on the scale of the original data with the Jacobian of the transform (Box & Cox
  1964), since likelihoods of differently transformed data cannot be compared as they are.

Otherwise the order still holds: the verdict keeps its status and records the new fingerprint,
with a history row saying what was checked. Unchanged data keep the verdict exactly as it is.

References
----------
.. [1] Burnham, K.P. & Anderson, D.R. (2002). *Model Selection and Multimodel Inference*, 2nd ed.,
   Springer, §2.6 (rules of thumb for AIC differences).
.. [2] Box, G.E.P. & Cox, D.R. (1964). An analysis of transformations. *JRSS B* 26, 211-252
   (the likelihood of the original data includes the Jacobian of the transform).
.. [3] Ljung, G.M. & Box, G.E.P. (1978). *Biometrika* 65, 297-303.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import sqlite_utils

from app.core.analysis import Analysis, Intervention
from app.core.engine_version import ENGINE_VERSION
from app.core.errors import OrderError
from app.core.fitting import DECISION_LJUNG_BOX_LEVEL
from app.core.order import Order
from app.core.p_values import p_words
from app.core.prepare import PreparedSeries, moment_in
from app.core.transform import TransformChoice, log_jacobian
from app.core.vocabulary import DECIDED
from app.jobs.order_fits import data_period, fit_stored_order, load_prepared
from app.store.analyses import analysis_record
from app.store.database import write_transaction
from app.store.orders import decided_interventions, save_order_fit, verdict_model
from app.store.verdicts import confirm_on_new_data, decision_fingerprint, get_verdict, mark_recheck, seen_differencing

AICC_MARGIN = 10.0


def aicc_on_original_scale(aicc: float, prepared: PreparedSeries, model: Order, transform: TransformChoice) -> float:
    """The AICc of a fit on the ``transform`` scale, as the AICc of the original data.

    The Jacobian runs over the observations the fit's likelihood covers (:func:`log_jacobian`).
    """
    return aicc - 2.0 * log_jacobian(prepared.values, transform, model)


@dataclass
class OrderCheck:
    """What the new data say about a chosen order: ``reasons`` to look again (empty when it
    holds), ``checked`` (what was found, in words), and the refit when one was made."""

    model: Order
    transform: TransformChoice
    interventions: tuple[Intervention, ...] = ()
    reasons: list[str] = field(default_factory=list)
    checked: list[str] = field(default_factory=list)
    parameters: dict[str, float] | None = None


def check_order(prepared: PreparedSeries, verdict: dict, analysis: Analysis,
                seen: tuple[int, int] | None = None) -> OrderCheck:
    """Judge the verdict's order on ``prepared`` against the ``analysis`` of the same data;
    ``seen`` is the differencing (d, D) of the analysis the verdict was decided on, when known."""
    transform = TransformChoice.from_json(verdict["transform"])
    model, candidate = verdict_model(analysis, verdict["order"], verdict["seasonal_order"], verdict.get("trend"))
    chosen = verdict.get("interventions")
    interventions = decided_interventions(analysis, transform, chosen)
    check = OrderCheck(model, transform, interventions)
    label = model.label()
    now = (analysis.d, analysis.D)
    if now != (model.d, model.D) and now != seen:
        before = f" (d = {seen[0]}, D = {seen[1]} when it was decided)" if seen is not None else ""
        check.reasons.append(
            f"the analysis now differences d = {analysis.d}, D = {analysis.D}{before}; {label} has d = {model.d}, D = {model.D}"
        )
    elif now != (model.d, model.D):
        check.checked.append(f"the analysis still differences d = {analysis.d}, D = {analysis.D}, as when {label} was chosen")
    if candidate is not None and analysis.transform.to_json() == transform.to_json() and chosen is None:
        lb_p, lb_lags, aicc = candidate.ljung_box_p, candidate.ljung_box_lags, candidate.aicc
    else:
        try:
            fit = fit_stored_order(prepared, model, transform, interventions,
                                   data_period(prepared, analysis)).to_candidate(keep_residuals=False)
        except OrderError as exc:
            check.reasons.append(f"{label} can no longer be fitted: {exc}")
            return check
        lb_p, lb_lags, aicc = fit.ljung_box_p, fit.ljung_box_lags, fit.aicc
        check.parameters = fit.parameter_values()
    if lb_p is not None and lb_p < DECISION_LJUNG_BOX_LEVEL:
        check.reasons.append(f"the residuals of {label} fail the Ljung-Box test ({p_words(lb_p)} at {lb_lags} lags)")
    else:
        check.checked.append("Ljung-Box " + (p_words(lb_p) if lb_p is not None else "not computable"))
    _compare_aicc(check, prepared, analysis, aicc)
    return check


def _compare_aicc(check: OrderCheck, prepared: PreparedSeries, analysis: Analysis, aicc: float) -> None:
    model = check.model
    rivals = [c for c in analysis.candidates if c.order.differencing_key() == model.differencing_key()]
    if not rivals:
        return
    best = min(rivals, key=lambda c: c.aicc)
    gap = (aicc_on_original_scale(aicc, prepared, model, check.transform)
           - aicc_on_original_scale(best.aicc, prepared, model, analysis.transform))
    if gap > AICC_MARGIN:
        check.reasons.append(
            f"the AICc of {model.label()} is {gap:.1f} above that of {best.label}, the best candidate with "
            f"the same differencing (margin {AICC_MARGIN:g})"
        )
    elif gap > 0:
        check.checked.append(f"AICc {gap:.1f} above the best candidate {best.label} (margin {AICC_MARGIN:g})")
    else:
        check.checked.append("the lowest AICc of the candidates with the same differencing")


def recheck_after_analysis(db: sqlite_utils.Database, series_id: str, result: Analysis | None) -> str | None:
    """After an analysis of ``series_id`` was stored (``result``, or None for a failed one):
    re-check an approved or overridden order decided on other data (see the module notes).
    Returns the reason when the verdict was sent to ``recheck``, else None.

    Call it after the analysis is committed, outside any transaction: the refit runs without
    holding the write lock. Nothing is done when the verdict is not decided, when the stored
    analysis is not of the series' current data (an import landed since: the next analysis
    decides), when the verdict was decided on this data, or when a reviewer changes the verdict
    while the check runs. A failed analysis of new data sends the verdict to ``recheck`` with
    the failure's message.
    """
    verdict = get_verdict(db, series_id)
    if verdict["status"] not in DECIDED:
        return None
    record = analysis_record(db, series_id)
    if record["state"] not in ("current", "failed") or decision_fingerprint(db, series_id) == record["fingerprint"]:
        return None
    if record["state"] == "failed" or result is None:
        return _reopen(db, series_id, verdict, f"the analysis of the new data failed: {record['message']}")
    prepared, fingerprint = load_prepared(db, series_id)
    if fingerprint != record["fingerprint"]:
        return None
    check = check_order(prepared, verdict, result, seen_differencing(db, series_id))
    data = f"the data changed (now {prepared.n} points to {moment_in(prepared.index, -1)})"
    if check.reasons:
        return _reopen(db, series_id, verdict, f"{data}: " + "; ".join(check.reasons))
    with write_transaction(db):
        confirmed = confirm_on_new_data(
            db, series_id, fingerprint, f"{data}; {check.model.label()} still holds: " + ", ".join(check.checked),
            verdict["version"],
        )
        if confirmed and check.parameters is not None:
            save_order_fit(db, series_id, fingerprint, check.model, check.transform, check.parameters, ENGINE_VERSION,
                           check.interventions)
    return None


def _reopen(db: sqlite_utils.Database, series_id: str, verdict: dict, reason: str) -> str | None:
    """Send the verdict to ``recheck`` unless a reviewer changed it since ``verdict`` was read."""
    with write_transaction(db):
        if get_verdict(db, series_id)["version"] != verdict["version"]:
            return None
        mark_recheck(db, series_id, reason)
    return reason
