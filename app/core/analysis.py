"""The typed result of one series' identification, as every layer reads it.

The engine (:mod:`app.core.identify`) works with live fits (numpy arrays, optimiser state);
when it is done it hands out an :class:`Analysis`: frozen dataclasses of plain values that the
store saves as JSON (:meth:`Analysis.to_dict`) and reads back (:meth:`Analysis.from_dict`), and
that the jobs, the review service, the web pages and the command line read by attribute.

The JSON carries :data:`SCHEMA_VERSION`. Version 1 (before the version was written) is read as
well: it kept the orders that screening left out as labels, and had no ``delta_aicc``.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, replace
from typing import Any

from app.core.order import Order, validate_order
from app.core.transform_choice import TransformChoice
from app.core.vocabulary import Confidence, InterventionKind

SCHEMA_VERSION = 2


def _finite_or_none(value: float | None) -> float | None:
    return None if value is None or not math.isfinite(value) else float(value)


@dataclass(frozen=True)
class Correlation:
    """One correlogram panel: a correlation per lag and the half-width of its band."""

    lags: tuple[int, ...]
    values: tuple[float, ...]
    band: tuple[float, ...]

    def to_dict(self) -> dict[str, list]:
        return {"lags": list(self.lags), "values": list(self.values), "band": list(self.band)}

    @classmethod
    def from_dict(cls, data: dict[str, Sequence]) -> Correlation:
        return cls(tuple(int(k) for k in data["lags"]), tuple(float(v) for v in data["values"]),
                   tuple(float(b) for b in data["band"]))


@dataclass(frozen=True)
class Parameter:
    """A fitted coefficient by statsmodels' name (``const``, ``drift``, ``ar.L1``, ``sigma2`` ...)."""

    name: str
    value: float
    se: float | None

    def to_dict(self) -> dict[str, Any]:
        return {"name": self.name, "value": self.value, "se": self.se}

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> Parameter:
        return cls(str(data["name"]), float(data["value"]), _finite_or_none(data.get("se")))


@dataclass(frozen=True)
class Intervention:
    """An outlier or a level shift found in the series and estimated with the suggested order
    (:mod:`app.core.interventions`): where (``position``, 0-based, and ``timestamp``), what kind,
    its size on the modelled scale and its t statistic in the joint fit."""

    position: int
    timestamp: str
    kind: InterventionKind
    size: float
    t_stat: float

    def words(self) -> str:
        return f"{self.kind.words()} at {self.timestamp} (size {self.size:+.3g}, t = {self.t_stat:+.1f})"

    def to_dict(self) -> dict[str, Any]:
        return {"position": self.position, "timestamp": self.timestamp, "kind": str(self.kind),
                "size": self.size, "t_stat": _finite_or_none(self.t_stat)}

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> Intervention:
        t_stat = data.get("t_stat")
        return cls(int(data["position"]), str(data["timestamp"]), InterventionKind(data["kind"]),
                   float(data["size"]), float("nan") if t_stat is None else float(t_stat))


@dataclass(frozen=True)
class Candidate:
    """One fitted candidate order with its statistics and residual checks.

    ``source`` names the readings or search steps that proposed the order; ``rank_score`` is
    the criterion less the correlogram bonus that orders the candidates
    (:func:`app.core.ranking.rank_score`; None for an order fitted by hand); ``delta_aicc`` is
    its AICc less the smallest AICc among the candidates of the same differencing
    (:func:`aicc_deltas`). ``residuals`` are kept for the leading few candidates only.
    """

    order: Order
    source: tuple[str, ...]
    loglik: float
    aic: float
    aicc: float
    bic: float
    hqic: float
    nobs: int
    n_params: int
    converged: bool
    params: tuple[Parameter, ...]
    ljung_box_p: float | None
    ljung_box_lags: int
    residual_acf: Correlation
    residuals: tuple[float, ...] | None
    flags: tuple[str, ...]
    rank_score: float | None = None
    delta_aicc: float | None = None

    @property
    def label(self) -> str:
        return self.order.label()

    @property
    def full_label(self) -> str:
        """The label with the deterministic term in words (:meth:`Order.full_label`): what tells
        two candidates of the same orders apart on a page."""
        return self.order.full_label()

    def parameter_values(self) -> dict[str, float]:
        """The fitted coefficients by name, as the export hands them on."""
        return {p.name: p.value for p in self.params}

    def to_dict(self) -> dict[str, Any]:
        return {
            **self.order.to_json(),
            "label": self.label,
            "source": list(self.source),
            "loglik": self.loglik,
            **{name: _finite_or_none(getattr(self, name)) for name in ("aic", "aicc", "bic", "hqic")},
            "nobs": self.nobs, "n_params": self.n_params, "converged": self.converged,
            "ljung_box_p": _finite_or_none(self.ljung_box_p), "ljung_box_lags": self.ljung_box_lags,
            "params": [p.to_dict() for p in self.params],
            "residual_acf": self.residual_acf.to_dict(),
            "residuals": [_finite_or_none(v) for v in self.residuals] if self.residuals is not None else None,  # NaN (missing) as null
            "flags": list(self.flags),
            "rank_score": self.rank_score,
            "delta_aicc": self.delta_aicc,
        }

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> Candidate:
        residuals = data.get("residuals")
        return cls(
            order=Order.from_json(data), source=tuple(data.get("source", ())),
            loglik=float(data["loglik"]), aic=_float(data["aic"]), aicc=_float(data["aicc"]),
            bic=_float(data["bic"]), hqic=_float(data["hqic"]), nobs=int(data["nobs"]),
            n_params=int(data["n_params"]), converged=bool(data["converged"]),
            params=tuple(Parameter.from_dict(p) for p in data["params"]),
            ljung_box_p=_finite_or_none(data.get("ljung_box_p")), ljung_box_lags=int(data["ljung_box_lags"]),
            residual_acf=Correlation.from_dict(data["residual_acf"]),
            residuals=tuple(math.nan if v is None else float(v) for v in residuals) if residuals is not None else None,
            flags=tuple(data.get("flags", ())), rank_score=_finite_or_none(data.get("rank_score")),
            delta_aicc=_finite_or_none(data.get("delta_aicc")),
        )


def _float(value: float | None) -> float:
    """A criterion read back from JSON, where an infinite value was written as null (JSON has
    no infinity; an impossible AICc or BIC is +inf)."""
    return math.inf if value is None else float(value)


def aicc_deltas(candidates: Sequence[Candidate]) -> list[float | None]:
    """Each candidate's AICc less the smallest AICc among the candidates with the same
    differencing (:meth:`Order.differencing_key`); None where the AICc is not finite."""
    best: dict[tuple[int, int, int], float] = {}
    for c in candidates:
        key = c.order.differencing_key()
        best[key] = min(best.get(key, math.inf), c.aicc)
    return [c.aicc - best[c.order.differencing_key()] if math.isfinite(c.aicc) else None for c in candidates]


def delta_aicc_against(candidate: Candidate, others: Iterable[Candidate]) -> float | None:
    """``candidate``'s AICc less the smallest AICc among ``others`` of the same differencing
    (None when there is none: criteria of different differencing are not comparable)."""
    key = candidate.order.differencing_key()
    comparable = [c.aicc for c in others if c.order.differencing_key() == key and math.isfinite(c.aicc)]
    return candidate.aicc - min(comparable) if comparable and math.isfinite(candidate.aicc) else None


@dataclass(frozen=True)
class UnitRootTest:
    """One unit-root (ADF) or stationarity (KPSS) test as the reviewer sees it; ``on`` names
    the series tested (``levels``, ``first difference`` ...)."""

    name: str
    regression: str
    on: str
    statistic: float
    p_value: float
    lags: int
    rejects: bool
    null: str

    def to_dict(self) -> dict[str, Any]:
        return {"name": self.name, "regression": self.regression, "on": self.on,
                "statistic": _finite_or_none(self.statistic), "p_value": _finite_or_none(self.p_value), "lags": self.lags, "rejects": self.rejects, "null": self.null}

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> UnitRootTest:
        return cls(str(data["name"]), str(data["regression"]), str(data["on"]), _float(data["statistic"]),
                   _float(data["p_value"]), int(data["lags"]), bool(data["rejects"]), str(data.get("null", "")))


@dataclass(frozen=True)
class DifferencingSummary:
    """The choice of d: the tests behind it, in words and figures."""

    d: int
    uncertain: bool
    alternative_d: int | None
    trend_stationary: bool
    tests: tuple[UnitRootTest, ...]
    explanation: tuple[str, ...]

    def to_dict(self) -> dict[str, Any]:
        return {"d": self.d, "uncertain": self.uncertain, "alternative_d": self.alternative_d,
                "trend_stationary": self.trend_stationary, "tests": [t.to_dict() for t in self.tests],
                "explanation": list(self.explanation)}

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> DifferencingSummary:
        return cls(int(data["d"]), bool(data["uncertain"]), data.get("alternative_d"), bool(data["trend_stationary"]),
                   tuple(UnitRootTest.from_dict(t) for t in data["tests"]), tuple(data.get("explanation", ())))


@dataclass(frozen=True)
class SeasonalSummary:
    """What was decided about seasonality: the period examined (None: non-seasonal), D, the
    STL strengths behind D, and the words and flags it produced."""

    examined_period: int | None
    D: int
    seasonal_strength: float | None
    trend_strength: float | None
    threshold: float | None
    seasons: int | None
    enough_seasons: bool | None
    seasonal_terms_possible: bool | None
    flags: tuple[str, ...]
    explanation: tuple[str, ...]
    words: tuple[str, ...]
    stability_statistic: float | None = None
    stability_p: float | None = None

    def to_dict(self) -> dict[str, Any]:
        return {"D": self.D, "period": self.examined_period,
                "stability_statistic": self.stability_statistic, "stability_p": self.stability_p,
                "seasonal_strength": self.seasonal_strength, "trend_strength": self.trend_strength,
                "threshold": self.threshold, "seasons": self.seasons, "enough_seasons": self.enough_seasons,
                "seasonal_terms_possible": self.seasonal_terms_possible, "flags": list(self.flags),
                "explanation": list(self.explanation), "examined_period": self.examined_period,
                "words": list(self.words)}

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> SeasonalSummary:
        return cls(data.get("examined_period"), int(data.get("D", 0)), data.get("seasonal_strength"),
                   data.get("trend_strength"), data.get("threshold"), data.get("seasons"), data.get("enough_seasons"),
                   data.get("seasonal_terms_possible"), tuple(data.get("flags", ())),
                   tuple(data.get("explanation", ())), tuple(data.get("words", ())),
                   data.get("stability_statistic"), data.get("stability_p"))


@dataclass(frozen=True)
class Analysis:
    """Everything the engine found for one series.

    ``candidates`` are ranked, the suggestion first; ``identified_on`` is the transformed,
    differenced series whose correlograms (``acf``, ``pacf``) were read, described by
    ``identified_label``; ``screened_out`` are the orders a cheap look put too far behind to fit
    (``screen_margin``); ``demand_class`` is the Syntetos-Boylan-Croston class (smooth, erratic,
    intermittent, lumpy) of a non-negative series with zeros (:mod:`app.core.demand`), None for
    any other.
    """

    series_id: str
    n: int
    freq: str
    start: str
    end: str
    transform: TransformChoice
    confidence: Confidence
    confidence_reasons: tuple[str, ...]
    flags: tuple[str, ...]
    differencing: DifferencingSummary
    seasonal: SeasonalSummary
    acf: Correlation
    pacf: Correlation
    seasonal_lags: tuple[int, ...]
    patterns: tuple[str, ...]
    identified_on: tuple[float, ...]
    identified_label: str
    gaps_filled: int
    criterion: str
    candidates: tuple[Candidate, ...]
    screened_out: tuple[Order, ...]
    screen_margin: float
    engine_version: str
    data_notes: tuple[str, ...] = ()
    interventions: tuple[Intervention, ...] = ()
    demand_class: str | None = None

    @property
    def suggested(self) -> Candidate:
        return self.candidates[0]

    @property
    def d(self) -> int:
        return self.suggested.order.d

    @property
    def D(self) -> int:
        return self.suggested.order.D

    @property
    def period(self) -> int | None:
        """The seasonal period of the suggested model (None without seasonal terms)."""
        return self.suggested.order.period

    @property
    def marked_period(self) -> int | None:
        """The period whose lags the charts mark: the model's, else the one examined (a series
        can have a season the model needed no terms for)."""
        return self.period or self.seasonal.examined_period

    @property
    def is_transformed_or_differenced(self) -> bool:
        """Whether the series the model was identified on differs from the series as observed
        (transformed, differenced or with interventions taken out)."""
        return bool(self.d or self.D or self.transform.kind != "none" or self.interventions)

    def interventions_on(self, transform: TransformChoice) -> tuple[Intervention, ...]:
        """The interventions a fit on the ``transform`` scale takes out of the series: the
        analysis' own on its own scale, none on another (their sizes are on the analysis' scale)."""
        return self.interventions if transform.to_json() == self.transform.to_json() else ()

    def candidate_of(self, order: Sequence[int], seasonal_order: Sequence[int] | None) -> Candidate | None:
        """The candidate of that order, None when the engine did not fit it."""
        return next((c for c in self.candidates if c.order.same_orders(order, seasonal_order)), None)

    def model_for(self, order: Sequence[int], seasonal_order: Sequence[int] | None = None) -> tuple[Order, Candidate | None]:
        """The model of a chosen order, with the deterministic term the engine gives it, and the
        candidate of that order (None for an order the engine did not fit).

        A candidate keeps its own term; another order takes the term of the candidates with the
        same differencing (so their criteria can be compared), else the default of
        :func:`app.core.order.validate_order`.

        Raises
        ------
        OrderError
            When the order is not a valid one.
        """
        model = validate_order(order, seasonal_order)
        candidate = self.candidate_of(model.order, model.seasonal_order)
        if candidate is not None:
            return candidate.order, candidate
        same = next((c.order.trend for c in self.candidates if c.order.differencing_key() == model.differencing_key()), None)
        return (replace(model, trend=same) if same is not None else model), None

    def to_dict(self) -> dict[str, Any]:
        best = self.suggested
        return {
            "schema_version": SCHEMA_VERSION,
            "series_id": self.series_id,
            "n": self.n,
            "freq": self.freq,
            "start": self.start,
            "end": self.end,
            "d": self.d,
            "D": self.D,
            "period": self.period,
            "transform": self.transform.to_json(),
            "transform_words": list(self.transform.explanation),
            "trend": best.order.trend,
            "suggested": {"order": list(best.order.order), "seasonal_order": list(best.order.seasonal_order)},
            "confidence": str(self.confidence),
            "confidence_reasons": list(self.confidence_reasons),
            "flags": list(self.flags),
            "differencing": self.differencing.to_dict(),
            "seasonal": self.seasonal.to_dict(),
            "acf": self.acf.to_dict(),
            "pacf": self.pacf.to_dict(),
            "seasonal_lags": list(self.seasonal_lags),
            "patterns": list(self.patterns),
            "identified_on": {"values": [_finite_or_none(v) for v in self.identified_on], "label": self.identified_label},
            "gaps_filled": self.gaps_filled,
            "criterion": self.criterion,
            "candidates": [c.to_dict() for c in self.candidates],
            "screened_out": [o.to_json() for o in self.screened_out],
            "screen_margin": self.screen_margin,
            "engine_version": self.engine_version,
            "data_notes": list(self.data_notes),
            "interventions": [i.to_dict() for i in self.interventions],
            "demand_class": self.demand_class,
        }

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> Analysis:
        """Read what :meth:`to_dict` wrote, in this schema version or the first.

        Raises
        ------
        KeyError, TypeError, ValueError
            When ``data`` is not an analysis of a known version.
        """
        version = data.get("schema_version", 1)
        if version not in (1, SCHEMA_VERSION):
            raise ValueError(f"analysis schema version {version!r} is not one this Lagdesk reads (1, {SCHEMA_VERSION})")
        candidates = [Candidate.from_dict(c) for c in data["candidates"]]
        if not candidates:
            raise ValueError("an analysis without candidates")
        if version == 1:
            screened = tuple(Order.from_label(label) for label in data.get("screened_out", ()))
        else:
            screened = tuple(Order.from_json(o) for o in data.get("screened_out", ()))
        transform = TransformChoice.from_json(data["transform"])
        transform.explanation = list(data.get("transform_words", ()))
        return cls(
            series_id=str(data["series_id"]), n=int(data["n"]), freq=str(data["freq"]),
            start=str(data["start"]), end=str(data["end"]), transform=transform,
            confidence=Confidence(data["confidence"]), confidence_reasons=tuple(data.get("confidence_reasons", ())),
            flags=tuple(data.get("flags", ())), differencing=DifferencingSummary.from_dict(data["differencing"]),
            seasonal=SeasonalSummary.from_dict(data.get("seasonal") or {}),
            acf=Correlation.from_dict(data["acf"]), pacf=Correlation.from_dict(data["pacf"]),
            seasonal_lags=tuple(int(k) for k in data.get("seasonal_lags", ())),
            patterns=tuple(data.get("patterns", ())),
            identified_on=tuple(math.nan if v is None else float(v) for v in data["identified_on"]["values"]),
            identified_label=str(data["identified_on"]["label"]), gaps_filled=int(data.get("gaps_filled", 0)),
            criterion=str(data.get("criterion", "bic")), candidates=with_deltas(candidates),
            screened_out=screened, screen_margin=float(data.get("screen_margin", 0.0)),
            engine_version=str(data.get("engine_version", "")), data_notes=tuple(data.get("data_notes", ())),
            interventions=tuple(Intervention.from_dict(i) for i in data.get("interventions", ())),
            demand_class=data.get("demand_class"),
        )


def with_deltas(candidates: Sequence[Candidate]) -> tuple[Candidate, ...]:
    """The candidates with their ``delta_aicc`` (:func:`aicc_deltas`) filled in."""
    return tuple(replace(c, delta_aicc=delta) for c, delta in zip(candidates, aicc_deltas(candidates)))
