"""Ranking fitted candidates and scoring how far the suggestion can be trusted.

Ranking (measured on the seeded accuracy batch, see tests/core/test_accuracy.py and README):

1. candidates whose residuals fail the Ljung-Box test at 5%, or whose optimiser did not
   converge, are demoted below every candidate that passes;
2. the rest are ordered by the selection criterion (:data:`DEFAULT_CRITERION`);
3. parsimony breaks near-ties: among the candidates within :data:`TIE_MARGIN` of the best
   score, the one with the fewest ARMA parameters leads.

Information criteria are not comparable across different d: the likelihood of a differenced
model is the likelihood of the differences. When the differencing decision is uncertain, the
best candidate of each d is compared by :func:`common_level_bic`, a BIC computed from the
one-step prediction errors *of the levels* over the same stretch of time points, which every
model produces whatever its d.

References
----------
.. [1] Schwarz, G. (1978). Estimating the dimension of a model. *Ann. Statist.* 6, 461-464 (BIC).
.. [2] Hurvich, C.M. & Tsai, C.-L. (1989). *Biometrika* 76, 297-307 (AICc).
.. [3] Hannan, E.J. & Quinn, B.G. (1979). The determination of the order of an autoregression.
   *JRSS B* 41, 190-195 (HQIC).
"""

from __future__ import annotations

import math

from app.core.fitting import CandidateFit

CRITERIA = ("bic", "aicc", "aic", "hqic")
DEFAULT_CRITERION = "bic"
TIE_MARGIN = 1.0


def criterion_value(fit: CandidateFit, criterion: str) -> float:
    value = getattr(fit, criterion)
    return value if math.isfinite(value) else math.inf


def is_demoted(fit: CandidateFit) -> bool:
    """Failing residual tests or a fit that did not converge rank below the rest."""
    return not fit.passes_ljung_box or not fit.converged


def rank_within_d(fits: list[CandidateFit], criterion: str = DEFAULT_CRITERION) -> list[CandidateFit]:
    """Rank candidates that share d (and D) by the rules in the module notes."""
    ordered = sorted(fits, key=lambda f: (is_demoted(f), criterion_value(f, criterion), f.model.n_arma))
    if len(ordered) < 2:
        return ordered
    lead = ordered[0]
    best = criterion_value(lead, criterion)
    ties = [f for f in ordered if is_demoted(f) == is_demoted(lead) and criterion_value(f, criterion) <= best + TIE_MARGIN]
    simplest = min(ties, key=lambda f: (f.model.n_arma, criterion_value(f, criterion)))
    return [simplest] + [f for f in ordered if f is not simplest]


def common_level_bic(fit: CandidateFit, start: int) -> float:
    """BIC from the one-step level prediction errors from time ``start`` on.

    ``m * ln(SSE / m) + k * ln(m)`` with ``m`` errors and ``k`` estimated parameters (including
    the innovation variance): comparable across models with different d because every model
    predicts the same level observations.
    """
    errors = fit.level_errors[start:]
    m = errors.size
    sse = float(errors @ errors)
    if m == 0 or sse <= 0:
        return math.inf
    return m * math.log(sse / m) + fit.n_params * math.log(m)


def rank_across_d(groups: dict[int, list[CandidateFit]], criterion: str = DEFAULT_CRITERION) -> list[CandidateFit]:
    """Rank each d's candidates, then put the group whose leader predicts the levels best first."""
    ranked = {d: rank_within_d(fits, criterion) for d, fits in groups.items() if fits}
    if len(ranked) == 1:
        return next(iter(ranked.values()))
    start = max(f.model.lost_to_differencing for fits in ranked.values() for f in fits) + 1
    order = sorted(ranked, key=lambda d: (is_demoted(ranked[d][0]), common_level_bic(ranked[d][0], start)))
    return [fit for d in order for fit in ranked[d]]


def margin_to_runner_up(ranked: list[CandidateFit], criterion: str = DEFAULT_CRITERION) -> float:
    """How far the runner-up of the same d trails the leader in the criterion (inf if alone)."""
    lead = ranked[0]
    same = [f for f in ranked[1:] if f.model.lost_to_differencing == lead.model.lost_to_differencing and not is_demoted(f)]
    if not same:
        return math.inf
    return min(criterion_value(f, criterion) for f in same) - criterion_value(lead, criterion)
