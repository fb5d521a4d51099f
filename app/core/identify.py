"""The identification engine: one series in, a ranked set of candidate models out.

The steps are those a practitioner does by hand (Box, Jenkins, Reinsel & Ljung 2015, ch. 6):
prepare the series, choose the differencing, read the ACF and PACF of the differenced series,
propose candidate orders from their patterns and the extended ACF, fit every candidate by
maximum likelihood, check its residuals, rank, and say how far the suggestion can be trusted.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from app import __version__
from app.core.confidence import Confidence, score_confidence
from app.core.correlogram import Correlogram, correlogram, lag_count
from app.core.fitting import MAX_ORDER, CandidateFit, ModelOrder, fit_candidate
from app.core.patterns import eacf_table, eacf_vertex, read_patterns, with_neighbours
from app.core.prepare import PreparedSeries, prepare_series
from app.core.ranking import DEFAULT_CRITERION, criterion_value, rank_across_d, rank_within_d
from app.core.stationarity import DifferencingDecision, choose_differencing

ENGINE_VERSION = __version__
DRIFT_Z = 1.96
RESIDUALS_KEPT = 3
LOCAL_SEARCH_ROUNDS = 2


@dataclass(frozen=True)
class EngineOptions:
    """Settings of one identification run (the defaults are the documented ones)."""

    max_p: int = MAX_ORDER
    max_q: int = MAX_ORDER
    criterion: str = DEFAULT_CRITERION
    alpha: float = 0.05


@dataclass
class Identification:
    """Everything the engine found for one series."""

    prepared: PreparedSeries
    differencing: DifferencingDecision
    trend: str
    correlogram: Correlogram
    identified_on: np.ndarray
    pattern_words: list[str]
    candidates: list[CandidateFit]
    confidence: Confidence
    criterion: str
    flags: list[str] = field(default_factory=list)

    @property
    def suggested(self) -> CandidateFit:
        return self.candidates[0]

    def to_dict(self) -> dict:
        best = self.suggested
        index = self.prepared.index
        return {
            "series_id": self.prepared.series_id,
            "n": self.prepared.n,
            "freq": self.prepared.freq,
            "start": str(index[0]),
            "end": str(index[-1]),
            "d": best.model.order[1],
            "D": best.model.seasonal_order[1],
            "period": best.model.seasonal_order[3] or None,
            "transform": "none",
            "trend": best.model.trend,
            "suggested": {"order": list(best.model.order), "seasonal_order": list(best.model.seasonal_order)},
            "confidence": self.confidence.level,
            "confidence_reasons": list(self.confidence.reasons),
            "flags": list(self.flags),
            "differencing": self.differencing.to_dict(),
            **self.correlogram.to_dict(),
            "seasonal_lags": [],
            "patterns": list(self.pattern_words),
            "identified_on": {"values": [float(v) for v in self.identified_on], "label": _identified_label(self.differencing.d)},
            "gaps_filled": self.prepared.gaps_filled,
            "criterion": self.criterion,
            "candidates": [
                _candidate_dict(c, criterion_value(c, self.criterion), keep_residuals=i < RESIDUALS_KEPT)
                for i, c in enumerate(self.candidates)
            ],
            "engine_version": ENGINE_VERSION,
        }


def _candidate_dict(fit: CandidateFit, rank_score: float, keep_residuals: bool) -> dict:
    out = fit.to_dict()
    out["rank_score"] = rank_score
    if not keep_residuals:
        out["residuals"] = None
    return out


def _identified_label(d: int) -> str:
    return {0: "series as observed", 1: "first difference", 2: "second difference"}[d]


def choose_trend(y: np.ndarray, decision: DifferencingDecision, d: int) -> str:
    """The deterministic term: a constant (or constant + trend) at d = 0, a drift at d = 1 when
    the mean difference is significant (|t| > 1.96, common practice), none at d = 2."""
    if d == 0:
        return "ct" if decision.trend_stationary else "c"
    if d == 1:
        diff = np.diff(y)
        se = diff.std(ddof=1) / math.sqrt(diff.size)
        return "t" if se > 0 and abs(diff.mean()) / se > DRIFT_Z else "n"
    return "n"


def candidate_fits_for_d(y: np.ndarray, d: int, trend: str, options: EngineOptions) -> tuple[list[CandidateFit], Correlogram, np.ndarray, list[str]]:
    """Read the correlogram of the d-times differenced series, propose orders and fit them."""
    w = np.diff(y, n=d) if d else y
    cg = correlogram(w, lag_count(w.size), options.alpha)
    _, significant = eacf_table(w, options.max_p, options.max_q)
    reading = read_patterns(cg, options.max_p, options.max_q, eacf_vertex(significant))
    proposals = with_neighbours(reading.proposals, options.max_p, options.max_q)
    fitted: dict[tuple[int, int], CandidateFit] = {}
    _fit_orders(y, d, trend, proposals, fitted)
    for _ in range(LOCAL_SEARCH_ROUNDS):
        lead = rank_within_d(list(fitted.values()), options.criterion)[0]
        p, _, q = lead.model.order
        around = with_neighbours({(p, q): []}, options.max_p, options.max_q)
        fresh = {pq: ["local search"] for pq in around if pq not in fitted}
        if not fresh:
            break
        _fit_orders(y, d, trend, fresh, fitted)
    return list(fitted.values()), cg, w, reading.words


def _fit_orders(y: np.ndarray, d: int, trend: str, orders: dict[tuple[int, int], list[str]], fitted: dict) -> None:
    for (p, q), sources in sorted(orders.items()):
        model = ModelOrder((p, d, q), (0, 0, 0, 0), trend)
        if (p, q) in fitted or y.size - d < model.n_arma + 8:
            continue
        fit = fit_candidate(y, model)
        fit.source = sources
        fitted[(p, q)] = fit


def identify_prepared(prepared: PreparedSeries, options: EngineOptions = EngineOptions()) -> Identification:
    """Run the identification on a series already on its regular grid."""
    y = prepared.values
    decision = choose_differencing(y)
    ds = [decision.d] + ([decision.alternative_d] if decision.uncertain and decision.alternative_d is not None else [])
    groups, shown = {}, None
    for d in ds:
        trend = choose_trend(y, decision, d)
        fits, cg, w, words = candidate_fits_for_d(y, d, trend, options)
        if d != decision.d:
            for f in fits:
                f.source = f.source + ["alternative d"]
        groups[d] = fits
        if shown is None:
            shown = (cg, w, words, trend)
    ranked = rank_across_d(groups, options.criterion)
    cg, w, words, trend = shown
    flags = list(prepared.flags)
    if decision.uncertain:
        flags.append("uncertain_differencing")
    if decision.trend_stationary:
        flags.append("trend_stationary")
    best = ranked[0]
    for flag in best.flags + ([] if best.passes_ljung_box else ["residual_autocorrelation"]):
        if flag not in flags:
            flags.append(flag)
    confidence = score_confidence(ranked, decision, flags, options.criterion)
    if best.model.order[1] != decision.d:
        w = np.diff(y, n=best.model.order[1]) if best.model.order[1] else y
        cg = correlogram(w, lag_count(w.size), options.alpha)
    return Identification(prepared, decision, trend, cg, w, words, ranked, confidence, options.criterion, flags)


def identify_series(series: pd.Series, series_id: str | None = None, options: EngineOptions = EngineOptions(), lines: np.ndarray | None = None) -> Identification:
    """Prepare and identify one series.

    Raises
    ------
    app.core.errors.SeriesProblem
        When the series cannot be analysed (too short, constant, bad values ...).
    """
    return identify_prepared(prepare_series(series, series_id, lines), options)
