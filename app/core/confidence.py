"""How far a suggestion can be trusted: ``firm``, ``tentative`` or ``weak``.

``firm`` is a promise that the suggestion can be approved in bulk. It is given only when
every check is clean: the differencing tests agree, the series is long enough and has no long
gap, the suggested model converged, passes the Ljung-Box test, has no root on the edge and no
nearly cancelling roots, and it leads the next candidate of the same d by at least
:data:`FIRM_MARGIN` in the selection criterion. ``weak`` means the reviewer must look: the best
model still leaves autocorrelation in its residuals, did not converge, has nearly cancelling
roots, or the series is too short. Everything else is ``tentative``.

The thresholds were tuned on the seeded accuracy batch (tests/core/test_accuracy.py) so that
``firm`` suggestions are right far more often than not; README gives the measured figures.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from app.core.fitting import CandidateFit
from app.core.ranking import is_demoted, margin_to_runner_up
from app.core.stationarity import DifferencingDecision

LEVELS = ("firm", "tentative", "weak")
FIRM_MARGIN = 2.0
WEAK_FLAGS = {"too_short", "no_convergence", "redundant_roots", "residual_autocorrelation"}
NOT_FIRM_FLAGS = {"long_gap", "near_unit_root", "uncertain_differencing", "trend_stationary"}


@dataclass
class Confidence:
    level: str
    reasons: list[str] = field(default_factory=list)


def score_confidence(ranked: list[CandidateFit], decision: DifferencingDecision, flags: list[str], criterion: str) -> Confidence:
    """Score the leading candidate of ``ranked`` (see the module notes)."""
    best = ranked[0]
    reasons = []
    weak = sorted(WEAK_FLAGS.intersection(flags))
    if weak or is_demoted(best):
        reasons += [f"flag: {f}" for f in weak] or ["the best model fails its residual checks"]
        return Confidence("weak", reasons)
    not_firm = sorted(NOT_FIRM_FLAGS.intersection(flags))
    reasons += [f"flag: {f}" for f in not_firm]
    margin = margin_to_runner_up(ranked, criterion)
    if margin < FIRM_MARGIN:
        reasons.append(f"the runner-up is within {margin:.1f} {criterion.upper()} of the suggestion")
    if reasons:
        return Confidence("tentative", reasons)
    return Confidence("firm", [f"clean checks; the runner-up trails by {margin:.1f} {criterion.upper()}" if margin != float("inf") else "clean checks"])
