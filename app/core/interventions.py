"""Outliers and level shifts: found in a fitted model's residuals and estimated jointly with it.

A spike, a recalibration or a promotion is not part of the ARIMA process, yet it distorts
every estimate the engine makes from the data: a level shift looks like a unit root, a spike
inflates the variance and bends the correlograms. Chen & Liu (1993) find such interventions
from the residuals of a tentative model and then estimate them jointly with it; this module
follows their two stages.

* **Kinds.** The series is ``y_t = z_t + ω ξ(B) I_t(T)``, with ``z`` the ARIMA process and
  ``I_t(T)`` the indicator of time ``T``: an additive outlier (``ξ = 1``, one point off), a level
  shift (``ξ = 1 / (1 − B)``, every point from ``T`` on moved by ``ω``) and a temporary change
  (``ξ = 1 / (1 − δB)``, a jump that dies away geometrically; ``δ = 0.7`` as Chen & Liu chose).
  Innovational outliers are left out: their effect is that of a shock the model already has.
* **Statistics.** The model's residuals are ``e_t = π(B) y_t`` with ``π(B) = φ(B) Φ(B^s) ∇^d
  ∇_s^D / (θ(B) Θ(B^s))``, so an intervention adds ``ω x_t`` with ``x = π(B) ξ(B) I(T)``. Least
  squares gives ``ω̂(T) = Σ x_t e_t / Σ x_t²`` and the statistic ``τ(T) = ω̂(T) (Σ x_t²)^½ / σ̂``
  (Chen & Liu 1993, §2), for every ``T`` at once by one correlation of the residuals with the
  kind's response. ``σ̂`` is the robust scale of the residuals (the median absolute deviation),
  so that the outliers do not hide themselves by inflating it, as Chen & Liu advise.
* **Stage I, detection.** The largest ``|τ|`` over all times and kinds is compared with the
  critical value; when beyond it, its effect is removed from the residuals and the series and
  the search goes on. When no statistic passes, the model is fitted again to the adjusted
  series and the search repeats on its residuals (at most :data:`ROUNDS` times).
* **Stage II, joint estimation.** The model is fitted to the original series with one
  regression column per intervention, passed through the same Kalman filter as the mean (so
  the estimates are generalised least squares within the exact likelihood); the least
  significant intervention whose ``|t|`` is below the critical value is dropped and the fit
  repeated until every one is beyond it.
* **Critical value.** :func:`detection_threshold`, the Bonferroni bound for the largest of
  ``3n`` Gaussian statistics (three kinds at each time) at a family level of 5%: 3.76 at
  ``n = 100``, 4.1 at 400, 4.3 at 1,000, rising with the length as Chen & Liu recommend (they
  studied 3.0, 3.5 and 4.0; at a fixed 3.0, 400 independent statistics would pass it by
  chance with probability 1 − (1 − 0.0027)^400 ≈ 0.66). Stage II, which decides what is kept,
  takes the same tail of Student's t with the joint fit's residual degrees of freedom, as the
  variance is estimated: with the Gaussian bound 10–16% of clean series of 20–60 points kept an
  intervention (a review's simulation, 2026-12-05), twice the family level.

References
----------
.. [1] Chen, C. & Liu, L.-M. (1993). Joint estimation of model parameters and outlier effects
   in time series. *Journal of the American Statistical Association* 88, 284-297.
.. [2] Box, G.E.P. & Tiao, G.C. (1975). Intervention analysis with applications to economic
   and environmental problems. *JASA* 70, 70-79.
.. [3] Tsay, R.S. (1988). Outliers, level shifts, and variance changes in time series.
   *Journal of Forecasting* 7, 1-20.
.. [4] Perron, P. (1989). The great crash, the oil price shock, and the unit root hypothesis.
   *Econometrica* 57, 1361-1401 (a level shift makes a stationary series look integrated).
.. [5] Dunn, O.J. (1961). Multiple comparisons among means. *JASA* 56, 52-64.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np
import pandas as pd
from scipy.signal import correlate, lfilter
from scipy.special import stdtrit

from app.core.analysis import Intervention
from app.core.fitting import difference, trend_design
from app.core.likelihood import ArmaFit, fit_arma
from app.core.order import Order
from app.core.prepare import moment_in
from app.core.residual_outliers import FAMILY_LEVEL, outlier_threshold, robust_scale
from app.core.vocabulary import InterventionKind

TC_DECAY = 0.7
"""``δ`` of a temporary change (Chen & Liu 1993, §2)."""

ROUNDS = 3
"""Refits of the model on the adjusted series in stage I."""

GAPS_OFFERED = 3
"""Gaps after which a level shift is offered to stage II (:func:`_shifts_after_gaps`), the longest."""

MAX_SHARE = 0.1
"""Stage I stops after this share of the points (a series that is mostly interventions is not
one an ARIMA model describes; the confidence says so)."""


def effect_column(kind: InterventionKind, position: int, n: int) -> np.ndarray:
    """``ξ(B) I_t(position)`` for ``t = 0..n-1``: a single 1, a step, or a geometric decay."""
    column = np.zeros(n)
    if kind is InterventionKind.ADDITIVE:
        column[position] = 1.0
    elif kind is InterventionKind.LEVEL_SHIFT:
        column[position:] = 1.0
    else:
        column[position:] = TC_DECAY ** np.arange(n - position)
    return column


def adjusted(y: np.ndarray, interventions: Sequence[Intervention | _Found]) -> np.ndarray:
    """The series with the interventions' effects taken out."""
    out = np.asarray(y, dtype=float).copy()
    for found in interventions:
        out -= found.size * effect_column(found.kind, found.position, out.size)
    return out


def pi_weights(estimate: ArmaFit, model: Order, m: int) -> np.ndarray:
    """The first ``m`` weights of ``π(B) = φ(B) Φ(B^s) ∇^d ∇_s^D / (θ(B) Θ(B^s))``."""
    ar = estimate.ar_polynomial
    for _ in range(model.order[1]):
        ar = np.convolve(ar, [1.0, -1.0])
    s = model.seasonal_order[3]
    for _ in range(model.seasonal_order[1]):
        ar = np.convolve(ar, np.r_[1.0, np.zeros(s - 1), -1.0])
    impulse = np.zeros(m)
    impulse[0] = 1.0
    return np.asarray(lfilter(ar, estimate.ma_polynomial, impulse))


def residual_response(kind: InterventionKind, pi: np.ndarray) -> np.ndarray:
    """``π(B) ξ(B)`` applied to an impulse: the trace an intervention of size one leaves in the
    residuals from its time on."""
    if kind is InterventionKind.ADDITIVE:
        return pi
    if kind is InterventionKind.LEVEL_SHIFT:
        return np.cumsum(pi)
    return np.asarray(lfilter([1.0], [1.0, -TC_DECAY], pi))


@dataclass(frozen=True)
class _Partialled:
    """Statistics of one kind at every start, with the deterministic terms partialled out."""

    size: np.ndarray
    tau: np.ndarray
    cross: np.ndarray | None  # cross[k] = Σ_j x_j z_{k+j} for each deterministic column z

    def trace(self, response: np.ndarray, k: int, m: int, terms: _Terms | None) -> np.ndarray:
        """The residual trace of the intervention starting at ``k``, orthogonal to the terms."""
        x = np.zeros(m)
        x[k:] = response[:m - k]
        if terms is not None and self.cross is not None:
            x -= terms.z @ (terms.gram_inv @ self.cross[k])
        return x


@dataclass(frozen=True)
class _Terms:
    """The deterministic terms' traces in the residuals (``z``, ``m x k``) and ``(z'z)^-1``."""

    z: np.ndarray
    gram_inv: np.ndarray


def effect_statistics(residuals: np.ndarray, response: np.ndarray, scale: float, terms: _Terms | None = None) -> _Partialled:
    """``ω̂`` and ``τ`` of an intervention starting at each residual (Chen & Liu 1993, §2).

    ``ω̂[k] = Σ_j x_j e_{k+j} / Σ_j x_j²`` over the residuals from ``k`` on, and
    ``τ[k] = ω̂[k] (Σ_j x_j²)^½ / scale``. With deterministic terms (a mean, a drift) the
    intervention's trace is first made orthogonal to theirs (Frisch-Waugh-Lovell): a mean
    estimated over the whole series has already taken up part of a level shift, and without
    this the shift's statistic is understated.
    """
    e = np.asarray(residuals, dtype=float)
    m = e.size
    x = response[:m]
    # correlate(e, x)[k + m - 1] = sum_j e[k + j] x[j]
    numerator = correlate(e, x, mode="full")[m - 1:]
    energy = np.cumsum(x * x)[::-1]  # energy[k] = sum of x_j^2 for j < m - k
    cross = None
    if terms is not None:
        cross = np.column_stack([correlate(col, x, mode="full")[m - 1:] for col in terms.z.T])
        numerator = numerator - cross @ (terms.gram_inv @ (terms.z.T @ e))
        energy = energy - np.einsum("ti,ij,tj->t", cross, terms.gram_inv, cross)
    with np.errstate(divide="ignore", invalid="ignore"):
        size = np.where(energy > 1e-9, numerator / energy, 0.0)
        tau = size * np.sqrt(np.clip(energy, 0.0, None)) / scale
    return _Partialled(np.nan_to_num(size), np.nan_to_num(tau), cross)


@dataclass(frozen=True)
class _Found:
    """An intervention found in stage I, with its statistic there."""

    kind: InterventionKind
    position: int
    size: float
    t_stat: float


def detection_threshold(n: int, dof: int | None = None) -> float:
    """The critical value for a series of ``n`` points: the Bonferroni bound over the ``3n``
    statistics (three kinds at each time) at a family level of 5%
    (:func:`app.core.residual_outliers.outlier_threshold`): 3.76 at n = 100, 4.1 at 400; with
    ``dof``, the same tail of Student's t with ``dof`` degrees of freedom (3.93 at n = 100 with
    90 of them)."""
    tests = len(InterventionKind) * n
    if dof is None:
        return outlier_threshold(tests)
    return float(stdtrit(max(dof, 1), 1.0 - FAMILY_LEVEL / (2.0 * tests)))


def conditional_residuals(y: np.ndarray, model: Order, fit: ArmaFit) -> np.ndarray:
    """``π(B) (y_t − deterministic terms)`` at the fit's parameters, the pre-sample values set to
    zero: the residuals Chen & Liu's statistics are computed from (§2)."""
    _, trend = trend_design(y.size, model)
    w = difference(y, model)
    if trend is not None:
        w = w - trend @ fit.beta[:trend.shape[1]]
    return np.asarray(lfilter(fit.ar_polynomial, fit.ma_polynomial, w))


def _terms(y: np.ndarray, model: Order, fit: ArmaFit) -> _Terms | None:
    """The deterministic terms' traces in the residuals at the fit's parameters."""
    _, trend = trend_design(y.size, model)
    if trend is None:
        return None
    z = np.asarray(lfilter(fit.ar_polynomial, fit.ma_polynomial, trend, axis=0)).reshape(trend.shape[0], -1)
    return _Terms(z, np.linalg.pinv(z.T @ z))


def _early_traces(n: int, model: Order, fit: ArmaFit, terms: _Terms | None) -> dict[tuple[InterventionKind, int], np.ndarray]:
    """The residual traces ``π(B) ξ(B) I(T)`` of interventions at the points the differencing
    uses up (``T`` below ``d + sD``), orthogonal to the deterministic terms.

    Their effect reaches the differenced series only in part: an outlier in the first season
    of a seasonally differenced series shows only in the difference a season later, where,
    without its own trace, it was read as an outlier of the opposite sign at that later point.
    A shift at the first point is a mean and is left out, as in the rest of the series.
    """
    traces = {}
    for kind in InterventionKind:
        for position in range(1 if kind is InterventionKind.LEVEL_SHIFT else 0, model.lost_to_differencing):
            x = np.asarray(lfilter(fit.ar_polynomial, fit.ma_polynomial, difference(effect_column(kind, position, n), model)))
            if terms is not None:
                x = x - terms.z @ (terms.gram_inv @ (terms.z.T @ x))
            if x @ x > 1e-9:
                traces[(kind, position)] = x
    return traces


def _detect(y: np.ndarray, model: Order, fit: ArmaFit, threshold: float, room: int) -> list[_Found]:
    """Stage I's inner loop at one fit's parameters: the interventions of ``y`` beyond
    ``threshold``, largest first, each removed from the residuals before the next is sought
    (at the points the differencing uses up too, :func:`_early_traces`)."""
    e = conditional_residuals(y, model, fit)
    m, lost = e.size, y.size - e.size
    scale = robust_scale(e)
    if m < 3 or not scale > 0.0:
        return []
    pi = pi_weights(fit, model, m)
    terms = _terms(y, model, fit)
    responses = {kind: residual_response(kind, pi) for kind in InterventionKind}
    allowed = {kind: np.ones(m, dtype=bool) for kind in InterventionKind}
    allowed[InterventionKind.LEVEL_SHIFT][[0, -1]] = False  # a shift at either end is a mean or an outlier
    early = _early_traces(y.size, model, fit, terms)
    found: list[_Found] = []
    while len(found) < room:
        best: tuple[float, InterventionKind, int, float, np.ndarray] | None = None
        for kind, response in responses.items():
            stats = effect_statistics(e, response, scale, terms)
            tau = np.where(allowed[kind], stats.tau, 0.0)
            k = int(np.argmax(np.abs(tau)))
            if best is None or abs(tau[k]) > abs(best[0]):
                best = (float(tau[k]), kind, k + lost, float(stats.size[k]), stats.trace(response, k, m, terms))
        for (kind, position), x in early.items():
            size = float(x @ e / (x @ x))
            tau_early = size * float(np.sqrt(x @ x)) / scale
            if best is None or abs(tau_early) > abs(best[0]):
                best = (tau_early, kind, position, size, x)
        if best is None or abs(best[0]) <= threshold:
            break
        tau_k, kind, position, size, trace = best
        e -= size * trace
        if position >= lost:
            for mask in allowed.values():
                mask[position - lost] = False
        early = {key: x for key, x in early.items() if key[1] != position}
        found.append(_Found(kind, position, size, tau_k))
    return found


def _fit(y: np.ndarray, model: Order, columns: list[np.ndarray], start: np.ndarray) -> ArmaFit:
    """``model`` fitted to ``y`` with its deterministic terms and the given regression columns
    (levels; differenced like the series), from ``start``."""
    _, trend = trend_design(y.size, model)
    extra = difference(np.column_stack(columns), model) if columns else None
    blocks = [b for b in (trend, extra) if b is not None]
    design = np.column_stack(blocks) if blocks else None
    return fit_arma(difference(y, model), model.arma_spec(), design, [start] if start.size else [])


def identifiable(y: np.ndarray, model: Order, kind: InterventionKind, position: int) -> bool:
    """Whether the effect of ``kind`` at ``position`` reaches a point of the differenced series
    that is observed, so that the exact likelihood can size it: under one difference, an
    outlier on a lone point between two missing ones leaves nothing but missing differences."""
    reached = difference(effect_column(kind, position, y.size), model) != 0.0
    return bool(np.any(reached & ~np.isnan(difference(y, model))))


def detect_interventions(y: np.ndarray, model: Order, estimate: ArmaFit, index: pd.Index) -> list[Intervention]:
    """Find the outliers, level shifts and temporary changes of ``y`` under ``model`` and
    estimate them jointly with it (the module notes give the procedure).

    Stage I runs on the residuals of the original series at the latest parameters, so that an
    intervention first read as a temporary change under parameters the shift itself distorted
    (an AR coefficient pulled towards 1) is read again as a level shift once the parameters are
    estimated on the adjusted series; it ends when a round finds the same set as the last.

    Parameters
    ----------
    y : ndarray
        The (transformed) series in levels.
    model : Order
        The leading order.
    estimate : ArmaFit
        Its fit to ``y`` (residuals, polynomials, optimum).
    index : pandas.Index
        The series' time index, to say when each intervention falls.

    Returns
    -------
    list of Intervention
        In time order; empty for a series without any beyond the critical value.

    References
    ----------
    .. [1] Chen, C. & Liu, L.-M. (1993). Joint estimation of model parameters and outlier
       effects in time series. *JASA* 88, 284-297, §3.
    """
    y = np.asarray(y, dtype=float)
    threshold = detection_threshold(y.size)
    room = max(1, int(MAX_SHARE * y.size))
    missing = np.isnan(y)
    # The residual filter needs every point: a gap is bridged by interpolation to locate the
    # interventions (none is placed in a gap, nor where only bridged points would size it, and a
    # shift after each of the longest gaps is offered besides); the joint fit then uses the
    # exact likelihood.
    located = pd.Series(y).interpolate(limit_direction="both").to_numpy() if missing.any() else y
    found: list[_Found] = []
    fit = estimate
    for _ in range(ROUNDS):
        new = [f for f in _detect(located, model, fit, threshold, room)
               if not missing[f.position] and (not missing.any() or identifiable(y, model, f.kind, f.position))]
        if {(f.kind, f.position) for f in new} == {(f.kind, f.position) for f in found}:
            break
        found = new
        if not found:
            break
        fit = _fit(adjusted(located, found), model, [], fit.unconstrained)
    found = found + _shifts_after_gaps(y, model, found)
    return estimate_jointly(y, model, found, fit.unconstrained, index) if found else []


def _shifts_after_gaps(y: np.ndarray, model: Order, found: list[_Found]) -> list[_Found]:
    """A level shift at the first observed point after each of the :data:`GAPS_OFFERED` longest
    gaps of two points or more, offered to stage II, which keeps it only past the bound.

    Stage I reads a bridged series, where a shift that began in a gap is a ramp: its statistic
    is spread over the gap and the points after it, and a shift of four innovation SDs right
    after a five-point gap was found in none of 30 simulated series (a statistics review),
    though the exact likelihood sizes it at a t of 8 to 10."""
    missing = np.isnan(y)
    starts = np.flatnonzero(missing[:-1] & ~missing[1:]) + 1  # the first observed point after a gap
    taken = {f.position for f in found}
    gaps = []
    for start in starts:
        before = np.flatnonzero(~missing[:start])
        length = start - (int(before[-1]) + 1 if before.size else 0)
        if before.size and length >= 2 and start not in taken and identifiable(y, model, InterventionKind.LEVEL_SHIFT, int(start)):
            gaps.append((length, int(start)))
    return [_Found(InterventionKind.LEVEL_SHIFT, start, 0.0, 0.0) for _, start in sorted(gaps, reverse=True)[:GAPS_OFFERED]]


def sized_interventions(
    y: np.ndarray, model: Order, placed: Sequence[tuple[int, InterventionKind]], index: pd.Index,
    start: np.ndarray | None = None,
) -> list[Intervention]:
    """The ``placed`` interventions (position, kind) with their sizes and ``t`` from one joint
    fit with ``model`` (stage II of Chen & Liu 1993, §3, without dropping any).

    ``y`` is the (transformed) series in levels, NaN where a value is missing; ``start`` an
    optional start for the optimiser. ``t`` is the size over its standard error by generalised
    least squares at the ARMA optimum (:attr:`app.core.likelihood.ArmaFit.regression_standard_errors`),
    NaN where there is none. In the order given.
    """
    if not placed:
        return []
    y = np.asarray(y, dtype=float)
    for position, kind in placed:
        if not identifiable(y, model, kind, position):
            why = "the points around it are missing" if np.isnan(y).any() else "the differencing uses up the points it reaches"
            raise ValueError(f"the {kind.words()} at {moment_in(index, position)} reaches no observed point once the series "
                             f"is differenced for {model.label()} ({why}), so its size cannot be estimated")
    columns = [effect_column(kind, position, y.size) for position, kind in placed]
    _refuse_the_same_effect(y, model, placed, columns, index)
    fit = _fit(y, model, columns, np.zeros(0) if start is None else start)
    n_trend = len(trend_design(y.size, model)[0])
    sizes = fit.beta[n_trend:]
    errors = fit.regression_standard_errors[n_trend:]
    return [
        Intervention(position, moment_in(index, position), kind, float(size),
                     float(size / error) if np.isfinite(error) and error > 0 else float("nan"))
        for (position, kind), size, error in zip(placed, sizes, errors)
    ]


def _refuse_the_same_effect(y: np.ndarray, model: Order, placed: Sequence[tuple[int, InterventionKind]],
                            columns: list[np.ndarray], index: pd.Index) -> None:
    """A ``ValueError`` naming the first intervention whose effect, once the series is
    differenced for ``model``, the model's mean or drift and the interventions before it
    already make (a level shift at the first point is the mean; an outlier and a temporary
    change at the last point are one column): their sizes cannot be told apart."""
    _, trend = trend_design(y.size, model)
    observed = ~np.isnan(difference(y, model))
    design = difference(np.column_stack(columns), model)[observed]
    before = trend[observed] if trend is not None else np.zeros((int(observed.sum()), 0))
    for i, (position, kind) in enumerate(placed):
        grown = np.column_stack([before, design[:, i]])
        if np.linalg.matrix_rank(grown) <= (np.linalg.matrix_rank(before) if before.shape[1] else 0):
            others = [f"the {k.words()} at {moment_in(index, p)}" for p, k in placed[:i]] + (["the mean or drift"] if trend is not None else [])
            raise ValueError(f"the {kind.words()} at {moment_in(index, position)} has the same effect on {model.label()} as "
                             f"{' and '.join(others) or 'nothing'}, so its size cannot be estimated apart from theirs; leave one out")
        before = grown


def estimate_jointly(
    y: np.ndarray, model: Order, found: Sequence[Intervention | _Found], start: np.ndarray, index: pd.Index
) -> list[Intervention]:
    """Stage II: fit ``model`` to ``y`` with every intervention as a regression column, drop the
    least significant whose ``|t|`` is below :func:`detection_threshold` (Student's t with the
    fit's residual degrees of freedom), repeat until all pass.

    ``t`` comes from the generalised least-squares standard error of the joint fit
    (:func:`sized_interventions`; the stage I statistic where there is none). ``start`` is a
    start for the optimiser (the model's optimum on the adjusted series). A set the joint fit
    cannot estimate (columns that the missing points around them leave nearly collinear) loses
    its weakest member by the stage I statistic, as a set with a weak member does. Returns the
    interventions kept, in time order, with their joint sizes.
    """
    y = np.asarray(y, dtype=float)
    observed = int(np.count_nonzero(~np.isnan(difference(y, model))))
    estimated = model.n_arma + len(trend_design(y.size, model)[0]) + 1  # the variance too
    kept = sorted(found, key=lambda f: f.position)
    while kept:
        threshold = detection_threshold(y.size, observed - estimated - len(kept))
        try:
            sized = sized_interventions(y, model, [(f.position, f.kind) for f in kept], index, start)
        except (np.linalg.LinAlgError, ValueError):
            kept.pop(int(np.argmin([abs(f.t_stat) for f in kept])))
            continue
        t = np.array([s.t_stat if np.isfinite(s.t_stat) else f.t_stat for s, f in zip(sized, kept)])
        weakest = int(np.argmin(np.abs(t)))
        if abs(t[weakest]) > threshold:
            return [replace(s, t_stat=float(ti)) for s, ti in zip(sized, t)]
        kept.pop(weakest)
    return []
