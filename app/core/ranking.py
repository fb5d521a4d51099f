"""Ranking fitted candidates and scoring how far the suggestion can be trusted.

Ranking (measured on the seeded accuracy batch, see tests/core/test_accuracy.py and README):

1. candidates whose residuals clearly fail the Ljung-Box test (p below
   :data:`DEMOTION_LEVEL`), whose optimiser did not converge, or whose AR and MA roots nearly
   cancel (an over-specified order; no change on the batch, but it keeps such fits of real
   series such as log lynx from leading), are demoted below every candidate that passes (a p-value between 1% and 5% is flagged but not demoted: the true model
   fails a 5% test one time in twenty, and demoting it cost exact hits on the batch);
2. the rest are ordered by their *rank score*: the selection criterion
   (:data:`DEFAULT_CRITERION`, BIC) minus :data:`PATTERN_BONUS` for every independent reading
   of the correlograms that proposed the order (PACF cut-off, ACF cut-off, EACF vertex, both
   tailing off, white noise). The correlogram evidence breaks the near-ties between orders that
   fit about equally well (AR(2) against ARMA(1,1), AR(3) against MA(1) at n = 120) in favour of
   the one the patterns point to;
3. parsimony breaks near-ties: among the candidates within :data:`TIE_MARGIN` of the best
   score, the one with the fewest ARMA parameters leads.

On the batch (10 replications of 21 processes, tuning seed; README has the final figures)
this raised the exact-order hit rate over plain BIC ranking from 0.605 to 0.62-0.63 at n = 120
and from 0.933 to 0.948 at n = 500; HQIC and AICc ranked worse at both lengths.

Information criteria are not comparable across different d: the likelihood of a differenced
model is the likelihood of the differences. When the differencing decision is uncertain, the
best candidate of each d is compared by :func:`common_level_bic`, a BIC computed from the
one-step prediction errors over the same final stretch of time points, which are level
prediction errors whatever the model's d (on a series with gaps, those of the filter of the
levels, :func:`level_errors`).

Rivals of the leader, for the confidence (:mod:`app.core.confidence`), are of two kinds. A
candidate that *nests* the leader (:func:`nests`: the leader with terms added, the deterministic
term included) is compared with it by a likelihood-ratio test (:func:`likelihood_ratio_p`),
the textbook comparison of nested models; every other candidate of the same differencing, a
smaller or a non-nested order, by its gap in rank score (:func:`margin_to_rival`).

References
----------
.. [1] Schwarz, G. (1978). Estimating the dimension of a model. *Ann. Statist.* 6, 461-464 (BIC).
.. [2] Hurvich, C.M. & Tsai, C.-L. (1989). *Biometrika* 76, 297-307 (AICc).
.. [3] Hannan, E.J. & Quinn, B.G. (1979). The determination of the order of an autoregression.
   *JRSS B* 41, 190-195 (HQIC).
.. [4] Wilks, S.S. (1938). The large-sample distribution of the likelihood ratio for testing
   composite hypotheses. *Ann. Math. Statist.* 9, 60-62.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Iterable, Mapping

import numpy as np
from scipy.special import chdtrc

from app.core.fitting import CandidateFit

CRITERIA = ("bic", "aicc", "aic", "hqic")
DEFAULT_CRITERION = "bic"
TIE_MARGIN = 1.0
DEMOTION_LEVEL = 0.01
PATTERN_BONUS = 1.0
PATTERN_SOURCES = frozenset({
    "PACF cut-off", "ACF cut-off", "EACF vertex", "both tail off", "white noise",
    "seasonal ACF cut-off", "seasonal PACF cut-off", "seasonal both tail off", "seasonal decay", "seasonal spikes in both",
    "no seasonal spike",
})


def rank_score(value: float, sources: Iterable[str]) -> float:
    """A criterion ``value`` less the bonus for the correlogram readings among ``sources``."""
    if not math.isfinite(value):
        return math.inf
    return value - PATTERN_BONUS * len(PATTERN_SOURCES.intersection(sources))


def criterion_value(fit: CandidateFit, criterion: str) -> float:
    """The rank score of a fit: its criterion less the bonus for correlogram readings (module notes)."""
    return rank_score(getattr(fit, criterion), fit.source)


def is_demoted(fit: CandidateFit) -> bool:
    """Clearly failing residual tests, no convergence or nearly cancelling roots rank below the rest."""
    clear_failure = fit.ljung_box_p is not None and math.isfinite(fit.ljung_box_p) and fit.ljung_box_p < DEMOTION_LEVEL
    return clear_failure or not fit.converged or "redundant_roots" in fit.flags


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


def level_errors(fit: CandidateFit, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The fit's one-step prediction errors of the levels ``y`` it was fitted to, one per point
    of ``y`` (NaN where there is none), and their variances over the innovation variance.

    The one-step prediction error of a level equals that of its difference (the previous levels
    are known), so on a complete series these are the fit's residuals, the first ``d + sD``
    points having none, all taken at one variance. Past a gap that is no longer so: the
    residuals of a differenced fit skip every difference that reaches the gap (the likelihood of
    the differences observed, :mod:`app.core.fitting`), so the more a model differences, the
    more it forgets there, and after one missing month of the airline passengers (log, 1949-1960,
    the sixty-first point missing) d = 0 took the lead from d = 1 by it. With missing points the
    errors are those of the exact filter of the levels at the fit's estimates, the differencing
    in the state (statsmodels ``ARIMA``, the model :func:`app.core.backtest.forecast_order` forecasts with),
    which predicts across the gap from every level observed, with their variances ``F_t``
    (Harvey 1989, §3.4; Durbin & Koopman 2012, §4.10 and ch. 5, the exact diffuse start; from
    memory); the points its diffuse start spends have none. On a complete series the filter's
    errors equal the residuals (to 1e-9, whatever the units).
    """
    lost = y.size - fit.residuals.size
    residuals = np.r_[np.full(lost, np.nan), fit.residuals], np.ones(y.size)
    if fit.estimate is None or not np.isnan(y).any():
        return residuals
    # Imported here: only series with gaps need them, and every start of the engine would pay.
    from statsmodels.tsa.arima.model import ARIMA
    from statsmodels.tsa.statespace.initialization import Initialization

    model = fit.model
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            levels = ARIMA(y, order=model.order, seasonal_order=model.seasonal_order, trend=model.trend)
            # The differencing states exactly diffuse (an approximate prior of variance 1e6 is
            # not diffuse for data in the thousands: the errors then depended on the units), the
            # ARMA part at its stationary covariance, as the engine's likelihood starts it.
            start = Initialization(levels.k_states)
            differenced = levels._k_states_diff
            if differenced:
                start.set((0, differenced), "diffuse")
            start.set((differenced, differenced + levels._k_order), "stationary")
            levels.ssm.initialization = start
            filtered = levels.filter(fit.estimates())
    except (ValueError, np.linalg.LinAlgError):
        return residuals
    errors = np.array(filtered.forecasts_error[0], dtype=float)
    ratios = np.array(filtered.forecasts_error_cov[0, 0], dtype=float) / fit.estimate.sigma2
    # The diffuse start lasts longer when a gap falls in it; its errors say nothing of the model.
    errors[:max(lost, int(filtered.filter_results.nobs_diffuse))] = np.nan
    kept = ~np.isnan(errors)
    if not (np.isfinite(errors[kept]).all() and (ratios[kept] > 0).all() and np.isfinite(ratios[kept]).all()):
        return residuals  # parameters on the edge, where the filter gives no exception but no numbers either
    return errors, ratios


def common_level_bic(errors: np.ndarray, ratios: np.ndarray, k: int, window: np.ndarray) -> float:
    """BIC from the one-step level prediction errors (:func:`level_errors`) in ``window``.

    ``m * ln(SSE / m) + k * ln(m)`` over the ``m`` points of the window, ``k`` the estimated
    parameters (including the innovation variance, and any the fit does not count, such as
    those of effects taken out of the series before it was fitted). Every model's errors are
    level prediction errors, so the criterion is comparable across models with different d, as
    long as all use the same points: the window holds the final points where every compared
    model has an error. Where the errors' variances differ (``ratios``, past a gap), the
    criterion is the Gaussian likelihood of errors of variances ``r_t sigma^2``, sigma^2
    profiled out: ``m ln(sum(e_t^2 / r_t) / m) + sum(ln r_t) + k ln(m)``, the plain form when
    every ``r_t`` is 1 (the prediction error decomposition, Harvey 1989, §3.4; from memory).
    """
    e, r = errors[window], ratios[window]
    count = e.size
    sse = float(e**2 @ (1.0 / r)) if count else 0.0
    if count <= 0 or sse <= 0:
        return math.inf
    return count * math.log(sse / count) + float(np.log(r).sum()) + k * math.log(count)


def final_window(size: int, m: int, errors: Iterable[np.ndarray]) -> np.ndarray:
    """The last ``m`` of ``size`` points where every one of ``errors`` is present."""
    window = np.zeros(size, dtype=bool)
    if m > 0:
        window[-m:] = True
    for e in errors:
        window &= ~np.isnan(e)
    return window


def rank_across_differencing(groups: Mapping[tuple[int, int], list[CandidateFit]], y: np.ndarray,
                             criterion: str = DEFAULT_CRITERION) -> list[CandidateFit]:
    """Rank the candidates of each differencing (D, d), fitted to the levels ``y``, then put
    the group whose leader predicts the levels best first (:func:`common_level_bic`); a group
    whose leader is demoted (:func:`is_demoted`) goes after those whose leader is not.

    The comparison runs over the final points where every group has a prediction error. When
    the groups differ in D it also leaves out the first season of those: a seasonally
    differenced model starts its filter one season later, and its errors there carry the
    start-up's larger variance (with a seasonal MA, ``F_t`` near ``1 + Theta^2``), which a
    model without the seasonal difference has left behind. In a review simulation (random-walk
    level, slowly changing season and noise, n = 120, 80 series, D = 1 true; seeded) those errors
    were 1.49 times the later ones' mean square, and the D = 1 group came first in 16 of 80
    series with them in the window, 38 of 80 without; on non-seasonal series neither window took D = 1.
    """
    ranked = {key: rank_within_d(fits, criterion) for key, fits in groups.items() if fits}
    if len(ranked) == 1:
        return next(iter(ranked.values()))
    seasonal_start = max(f.model.s * f.model.D for fits in ranked.values() for f in fits)
    start_differs = len({D for D, _ in ranked}) > 1
    m = min(f.residuals.size for fits in ranked.values() for f in fits) - 1 - (seasonal_start if start_differs else 0)
    errors = {key: level_errors(fits[0], y) for key, fits in ranked.items()}
    window = final_window(y.size, m, (e for e, _ in errors.values()))
    order = sorted(ranked, key=lambda key: (is_demoted(ranked[key][0]),
                                            common_level_bic(*errors[key], ranked[key][0].n_params, window)))
    return [fit for key in order for fit in ranked[key]]


def likelihood_ratio_p(smaller: CandidateFit, larger: CandidateFit) -> float:
    """p-value of the likelihood-ratio test of ``smaller`` against a ``larger`` model nesting it.

    Twice the rise in maximised log-likelihood is referred to chi-square with as many degrees
    of freedom as ``larger`` has extra parameters (Wilks' theorem). Both fits are exact
    likelihoods of the same differenced series. A ``larger`` fit below ``smaller`` (an optimiser
    that stopped short) counts as no rise.

    Parameters
    ----------
    smaller, larger : CandidateFit
        Fits of two orders, ``larger.model`` nesting ``smaller.model`` (:func:`nests`).

    Returns
    -------
    float
        The upper tail probability of ``2 (l_larger - l_smaller)``.

    References
    ----------
    .. [1] Wilks, S.S. (1938). The large-sample distribution of the likelihood ratio for testing
       composite hypotheses. *Ann. Math. Statist.* 9, 60-62.
    """
    statistic = max(0.0, 2.0 * (larger.loglik - smaller.loglik))
    return float(chdtrc(larger.n_params - smaller.n_params, statistic))


def strongest_nesting_rival(ranked: list[CandidateFit]) -> tuple[CandidateFit, float] | None:
    """The candidate nesting the leader that the likelihood-ratio test favours most.

    Parameters
    ----------
    ranked : list of CandidateFit
        Candidates best first; ``ranked[0]`` is the leader.

    Returns
    -------
    tuple of (CandidateFit, float) or None
        The undemoted candidate that nests the leader (:func:`nests`) with the smallest
        :func:`likelihood_ratio_p`, and that p-value; None when no candidate nests the leader.
    """
    lead = ranked[0]
    tested = [(f, likelihood_ratio_p(lead, f)) for f in ranked[1:] if not is_demoted(f) and f.model.contains(lead.model)]
    return min(tested, key=lambda t: t[1], default=None)


def margin_to_rival(ranked: list[CandidateFit], criterion: str = DEFAULT_CRITERION) -> float:
    """How far the best *rival* of the same d trails the leader in rank score (inf if none).

    A rival here is a candidate that does not nest the leader (:func:`nests`): a smaller order
    or a non-nested one (AR(3) against MA(1)). A model that nests the leader trails it by about
    its extra penalty (ln n per parameter under BIC) whatever the data, so its gap in rank score
    says nothing; such models are judged by :func:`strongest_nesting_rival` instead.
    """
    lead = ranked[0]
    rivals = [
        f for f in ranked[1:]
        if f.model.differencing_key() == lead.model.differencing_key() and not is_demoted(f) and not f.model.contains(lead.model)
    ]
    if not rivals:
        return math.inf
    return min(criterion_value(f, criterion) for f in rivals) - criterion_value(lead, criterion)
