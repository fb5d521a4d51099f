"""The identification engine: one series in, a ranked set of candidate models out.

The steps are those a practitioner does by hand (Box, Jenkins, Reinsel & Ljung 2015, ch. 6
and 9): prepare the series; fix the seasonal period and decide on a variance-stabilising
transform; choose the seasonal differencing D and then d; read the ACF and PACF of the
differenced series; propose candidate orders from their patterns at the low lags, at the
seasonal lags and from the extended ACF; fit every candidate by maximum likelihood, check its
residuals; rank; say how far the suggestion can be trusted. Where the unit-root tests leave
the differencing open, or where the fits of the d they chose still hold a unit root
(:func:`unit_root_fit`), every differencing in question is searched and the fits decide.

Candidate search. The orders read from the correlograms and their +-1 neighbours are fitted
in two stages when the model is seasonal: first every seasonal (P, Q) up to the limits
(:func:`seasonal_grid`) with the leading non-seasonal reading, then each non-seasonal (p, q)
proposal with the best seasonal part. Then :data:`LOCAL_SEARCH_ROUNDS` rounds of a local
search fit the untried +-1 neighbours (in p, q, P and Q) of the current leader and the leader
with the other deterministic term (:func:`trend_choices`): whether a model has a mean, a trend
or a drift is decided by the same criterion as its order, on the same data.

Screening. Every order a stage proposes is first looked at cheaply
(:func:`app.core.fitting.screen_candidate`: the quasi-Newton steps of the full fit's best start,
stopped once the rise the optimiser still predicts is below half a log-likelihood unit). Its
*hope* is the rank score it would have if the full fit rose above the screen by that predicted
rise plus :data:`SCREEN_SLACK`. The most hopeful order is fitted first, the rest in order of
size (so smaller orders are there to start larger ones from); an order whose hope trails the
best fitted, undemoted candidate by more than :data:`SCREEN_MARGIN` is not fitted and is listed
in ``screened_out`` instead. The margin is the confidence's firm margin, so an order screened out
could not have made the suggestion less than firm had its hope come true. A screen that has not
settled is never used to leave an order out.

A screen is a lower bound for its own start only: the full fit also starts from white noise,
two Hannan-Rissanen estimates and the optimum of a smaller order, and another start can lead to
a higher optimum. :data:`SCREEN_SLACK` (2 log-likelihood units) and the margin absorb most of
that. tests/core/test_screening.py checks on a sample of the seeded accuracy batch
(tests/core/accuracy_batch.py) that screening keeps every suggestion and confidence and that
what it leaves out trails the leader by more than the margin when fitted in full; README's
accuracy section gives the batch figures with and without screening.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from typing import Protocol

import numpy as np
import pandas as pd

from app.core.analysis import Analysis, Correlation, DifferencingSummary, Intervention, SeasonalSummary, with_deltas
from app.core.confidence import FIRM_MARGIN, SEASONAL_MA_BOUNDARY, ConfidenceScore, score_confidence, seasonal_ma_modulus
from app.core.correlogram import DEFAULT_ALPHA, Correlogram, correlogram, lag_count
from app.core.defaults import AUTO_PERIOD
from app.core.demand import classify_demand
from app.core.engine_version import ENGINE_VERSION
from app.core.errors import OrderError, SeriesProblem
from app.core.fitting import NEAR_UNIT_ROOT, CandidateFit, ScreenedCandidate, factor_roots, fit_candidate, screen_candidate
from app.core.flat_runs import longest_flat_run
from app.core.interventions import adjusted, detect_interventions, estimate_jointly
from app.core.longer_cycle import longer_cycle
from app.core.order import MAX_ORDER, MAX_SEASONAL_ORDER, Order
from app.core.patterns import eacf_table, eacf_vertex, read_patterns, read_seasonal_patterns, with_neighbours
from app.core.prepare import PreparedSeries, moment_in, prepare_series
from app.core.ranking import (
    CRITERIA,
    DEFAULT_CRITERION,
    common_level_bic,
    criterion_value,
    final_window,
    is_demoted,
    level_errors,
    rank_across_differencing,
    rank_score,
    rank_within_d,
)
from app.core.residual_outliers import largest_residual, prediction_variance_ratios
from app.core.seasonality import (
    SeasonalDifferencing,
    choose_seasonal_differencing,
    default_period,
    exact_repeat,
    seasonal_lags,
    seasonal_structure_present,
    validate_period,
)
from app.core.stationarity import MAX_D, DifferencingDecision, choose_differencing, long_run_t
from app.core.transform import (
    LAMBDA_BOUNDS,
    TransformChoice,
    apply_transform,
    choose_transform,
    invert_transform,
    order_before_search,
    simplicity,
)
from app.core.vocabulary import Flag, InterventionKind

DRIFT_Z = 1.96
RESIDUALS_KEPT = 3
LOCAL_SEARCH_ROUNDS = 2
TREND_TOGGLE = "deterministic term toggled"
FURTHER_DIFFERENCE = "further difference"
MIN_RESIDUAL_DF = 8
SCREEN_SLACK = 2.0
SCREEN_MARGIN = FIRM_MARGIN
TRANSFORM_PASSES = 2
# Long series (identify_prepared): measured on 14 hourly series of 1,344 points (README).
LONG_SERIES = 1_000
SEARCH_WINDOW = 672
REFITTED = 5

Orders = tuple[int, int, int, int, str]  # (p, q, P, Q, trend)


@dataclass(frozen=True)
class EngineOptions:
    """Settings of one identification run (the defaults are the documented ones).

    ``period`` is ``"auto"`` (from the sampling frequency), a whole number >= 2, or ``None``
    (treat every series as non-seasonal).
    """

    max_p: int = MAX_ORDER
    max_q: int = MAX_ORDER
    max_P: int = MAX_SEASONAL_ORDER
    max_Q: int = MAX_SEASONAL_ORDER
    criterion: str = DEFAULT_CRITERION
    alpha: float = DEFAULT_ALPHA
    period: int | str | None = AUTO_PERIOD
    screening: bool = True

    def __post_init__(self) -> None:
        limits = (("max_p", self.max_p, MAX_ORDER), ("max_q", self.max_q, MAX_ORDER),
                  ("max_P", self.max_P, MAX_SEASONAL_ORDER), ("max_Q", self.max_Q, MAX_SEASONAL_ORDER))
        for name, value, high in limits:
            if not 0 <= value <= high:
                raise OrderError(f"{name} ({value}) must be between 0 and {high}")
        if self.criterion not in CRITERIA:
            raise OrderError(f"criterion must be one of {', '.join(CRITERIA)}, not {self.criterion!r}")
        if not 0 < self.alpha < 0.5:
            raise OrderError(f"the band level alpha ({self.alpha}) must be between 0 and 0.5")


@dataclass
class SeasonalSetup:
    """What the engine decided about seasonality before reading the correlograms."""

    examined: int | None
    differencing: SeasonalDifferencing | None
    words: list[str] = field(default_factory=list)
    flags: list[str] = field(default_factory=list)

    @property
    def D(self) -> int:
        return self.differencing.D if self.differencing else 0

    def summary(self) -> SeasonalSummary:
        sd = self.differencing
        return SeasonalSummary(
            examined_period=self.examined, D=self.D,
            seasonal_strength=sd.strength if sd else None, trend_strength=sd.trend_strength if sd else None,
            threshold=sd.threshold if sd else None, seasons=sd.seasons if sd else None,
            enough_seasons=sd.enough_seasons if sd else None, seasonal_terms_possible=sd.seasonal_terms_possible if sd else None,
            flags=tuple(sd.flags) if sd else (), explanation=tuple(sd.explanation) if sd else (), words=tuple(self.words),
            stability_statistic=sd.stability.statistic if sd and sd.stability else None,
            stability_p=sd.stability.p_value if sd and sd.stability else None,
        )


@dataclass
class Identification:
    """Everything the engine found for one series."""

    prepared: PreparedSeries
    transform: TransformChoice
    seasonal: SeasonalSetup
    differencing: DifferencingDecision
    correlogram: Correlogram
    identified_on: np.ndarray
    identified_label: str
    pattern_words: list[str]
    candidates: list[CandidateFit]
    confidence: ConfidenceScore
    criterion: str
    flags: list[str] = field(default_factory=list)
    screened_out: list[Order] = field(default_factory=list)
    data_notes: list[str] = field(default_factory=list)
    interventions: list[Intervention] = field(default_factory=list)
    demand_class: str | None = None

    @property
    def suggested(self) -> CandidateFit:
        return self.candidates[0]

    def across_differencing_words(self) -> list[tuple[str, str]]:
        """What decided d or D when the tests left it open, in words drawn from the ranking itself
        (:func:`app.core.ranking.rank_across_differencing`): pairs of ``("d" or "D", sentence)``."""
        leaders: dict[tuple[int, int], CandidateFit] = {}
        for c in self.candidates:
            leaders.setdefault((c.model.D, c.model.d), c)
        lead, *others = leaders
        same_D = next((g for g in others if g[0] == lead[0]), None)
        other_D = next((g for g in others if g[0] != lead[0]), None)
        words = []
        for which, other, name in (("d", same_D, "d = {1}"), ("D", other_D, "D = {0}, d = {1}")):
            if other is None:
                continue
            ours, theirs = name.format(*lead), name.format(*other)
            if which == "d":
                words += [("d", w) for w in self._further_difference_words(leaders, lead, other)]
            if is_demoted(leaders[other]) and not is_demoted(leaders[lead]):
                why = (f"the best model with {theirs}, {leaders[other].model.label()}, fails a check that demotes it "
                       "(clear residual autocorrelation, no convergence or nearly cancelling roots)")
            else:
                why = (f"the best model with {ours} predicts the levels better than the best with {theirs} (a BIC of "
                       "their one-step prediction errors over the same final stretch)")
            words.append((which, f"{why[0].upper()}{why[1:]}, so the suggestion has {ours}."))
        return words

    def _further_difference_words(self, leaders: dict[tuple[int, int], CandidateFit], *keys: tuple[int, int]) -> list[str]:
        """Why a d beyond the tests' was searched (:func:`unit_root_fit`), when it was."""
        further = next((k for k in keys if FURTHER_DIFFERENCE in leaders[k].source), None)
        if further is None:
            return []
        below = (further[0], further[1] - 1)
        group = [c for c in self.candidates if (c.model.D, c.model.d) == below]
        fit = unit_root_fit(group, self.criterion)
        root = root_at_one(fit) if fit is not None else None
        if fit is None or root is None:
            return []
        return [f"{fit.model.label()} fits the series with d = {below[1]} at least as well as the best model there, and its "
                f"autoregressive factor has a root at {root.real:.3f}, next to 1: a unit root the differencing left in, so "
                f"d = {further[1]} was searched as well."]

    def _trend_left_words(self) -> list[str]:
        """Why a trend the tests read is not in the suggestion, when it is not: the deterministic
        term is chosen by the criterion like the order (:func:`trend_choices`)."""
        model = self.suggested.model
        if not self.differencing.trend_stationary or model.d or "t" in model.trend:
            return []
        kept = model.term_words().strip() or "without a deterministic term"
        return [f"The criterion preferred {model.label()} {kept} to the linear trend the tests read: "
                "the suggestion has no trend to extrapolate."]

    def to_analysis(self) -> Analysis:
        """The typed result every other layer reads (:class:`app.core.analysis.Analysis`)."""
        best = self.suggested
        index = self.prepared.index
        decision = self.differencing
        cg = self.correlogram
        lags = tuple(cg.lags.tolist())
        across = self.across_differencing_words()
        seasonal = self.seasonal.summary()
        candidates = [
            c.to_candidate(criterion_value(c, self.criterion), keep_residuals=i < RESIDUALS_KEPT)
            for i, c in enumerate(self.candidates)
        ]
        return Analysis(
            series_id=self.prepared.series_id, n=self.prepared.n, freq=self.prepared.freq,
            start=str(index[0]), end=str(index[-1]),
            # What a stored analysis keeps of the transform: the choice and its words.
            transform=TransformChoice(self.transform.kind, self.transform.lam, explanation=list(self.transform.explanation)),
            confidence=self.confidence.level, confidence_reasons=tuple(self.confidence.reasons), flags=tuple(self.flags),
            differencing=DifferencingSummary(
                d=decision.d, uncertain=decision.uncertain, alternative_d=decision.alternative_d,
                trend_stationary=decision.trend_stationary,
                tests=tuple(decision.tests),
                explanation=(*decision.explanation, *(w for _, w in across), *self._trend_left_words()),
            ),
            seasonal=replace(seasonal, explanation=(*seasonal.explanation, *(w for which, w in across if which == "D"))),
            acf=Correlation(lags, tuple(cg.acf.tolist()), tuple(cg.acf_band.tolist())),
            pacf=Correlation(lags, tuple(cg.pacf.tolist()), tuple(cg.pacf_band.tolist())),
            seasonal_lags=tuple(seasonal_lags(best.model.period or self.seasonal.examined, len(lags))),
            patterns=tuple(self.pattern_words), identified_on=tuple(float(v) for v in self.identified_on),
            identified_label=self.identified_label, gaps_filled=self.prepared.gaps_filled, criterion=self.criterion,
            candidates=with_deltas(candidates), screened_out=tuple(self.screened_out), screen_margin=SCREEN_MARGIN,
            engine_version=ENGINE_VERSION, data_notes=tuple(self.data_notes), interventions=tuple(self.interventions),
            demand_class=self.demand_class,
        )


def resolve_period(prepared: PreparedSeries, option: int | str | None) -> tuple[int | None, list[str]]:
    """The seasonal period to examine, and words about it.

    ``"auto"`` takes the period from the sampling frequency and quietly drops it when the
    series is not even one season long; an explicit period that makes no sense for the series
    is a :class:`SeriesProblem`.
    """
    if option == AUTO_PERIOD:
        period = default_period(prepared.freq)
        if period is None:
            return None, []
        if period >= prepared.n:
            return None, [f"Sampled {prepared.frequency_words}, the series is shorter than one season "
                          f"({period} points): treated as non-seasonal."]
        return period, [f"Seasonal period {period} from the sampling frequency: {prepared.frequency_words}."]
    if isinstance(option, str):
        raise SeriesProblem(prepared.series_id, f"period {option!r} is not auto, none or a whole number", flag="bad_period")
    try:
        # The problem names the series; the period's own message need not name it again.
        return validate_period(option, prepared.n), ([f"Seasonal period {option} as requested."] if option else [])
    except OrderError as exc:
        raise SeriesProblem(prepared.series_id, str(exc), flag="bad_period") from None


def seasonal_difference(y: np.ndarray, period: int | None, D: int) -> np.ndarray:
    return y[period:] - y[:-period] if D and period else y


def trend_choices(w: np.ndarray, decision: DifferencingDecision, d: int, D: int) -> tuple[str, ...]:
    """The deterministic terms the search compares for differencing ``(d, D)``, the one it
    starts from first; ``w`` is the differenced series.

    With nothing differenced, a mean with or without a linear trend (the trend first when the
    tests found trend-stationarity), and no mean at all when the tests found the series
    stationary without doubt and its mean is not clearly away from 0 (|t| > 1.96 with the
    long-run standard error of :func:`app.core.stationarity.long_run_t`, common practice): a
    stationary model without a mean reverts towards 0, which suits a series around 0 (an index
    of anomalies, a growth rate) and not one whose level lies far from it (a price, a sales
    level), nor a series that may hold a unit root, where an AR without a mean and a root near
    1 mimics the random walk (a simulated ARIMA(1,1,0) that wandered near 0 was read so). After
    one difference, ordinary or seasonal, none or a drift (a linear trend in levels), the drift
    first when the mean of ``w`` is clearly away from 0 by the t of independent values (common
    practice; a start only). After two, none. The criterion decides between the terms on the
    same data, as the stepwise search of Hyndman & Khandakar (2008, §3.2) toggles the constant,
    instead of a pre-test deciding alone.

    Measured on the real series of README's Accuracy section (573 forecasts, three origins): as
    adopted, 3 forecasts changed, 2 for the better (the Southern Oscillation Index, now without
    a mean). No mean offered on every undifferenced series changed 8, 6 for the better (the Rio
    Negro's level anomalies at Manaus too), but gave a tea price an AR(2) without a mean.
    Ordering the drift's starts by the long-run t as well changed 13 forecasts, 7 for the
    worse, one a disaster (a daily flight count whose search went another way): not taken.
    """
    present = w[~np.isnan(w)]  # the differences that reach a missing point are missing
    if d + D == 0:
        with_mean = ("ct", "c") if decision.trend_stationary else ("c", "ct")
        return with_mean if decision.uncertain or long_run_t(present) > DRIFT_Z else with_mean + ("n",)
    if d + D == 1:
        se = present.std(ddof=1) / math.sqrt(present.size) if present.size > 1 else 0.0
        return ("t", "n") if se > 0 and abs(present.mean()) / se > DRIFT_Z else ("n", "t")
    return ("n",)


def identified_label(transform: TransformChoice, period: int | None, D: int, d: int) -> str:
    steps = [] if transform.kind == "none" else ["log"] if transform.kind == "log" else [f"Box-Cox (lambda {transform.lam:g})"]
    if D and period:
        steps.append(f"seasonal difference at lag {period}")
    steps += {0: [], 1: ["first difference"], 2: ["second difference"]}[d]
    return ", ".join(steps) if steps else "series as observed"


@dataclass
class _Search:
    """The fits of one differencing choice (d, D) and how they were found."""

    y: np.ndarray
    d: int
    D: int
    period: int | None
    trends: tuple[str, ...]
    options: EngineOptions
    fitted: dict[Orders, CandidateFit] = field(default_factory=dict)
    failed: list[str] = field(default_factory=list)
    failed_keys: set[Orders] = field(default_factory=set)
    screened_out: dict[Orders, Order] = field(default_factory=dict)

    def tried(self, key: Orders) -> bool:
        return key in self.fitted or key in self.failed_keys or key in self.screened_out

    def model(self, key: Orders) -> Order | None:
        """The model of ``key``, or None when the series is too short to fit it."""
        p, q, P, Q, trend = key
        seasonal = (P, self.D, Q, self.period) if self.period and (P or Q or self.D) else (0, 0, 0, 0)
        model = Order.of((p, self.d, q), seasonal, trend)
        usable = self.y.size - model.lost_to_differencing
        if usable < model.n_arma + max(p + (self.period or 0) * P, q + (self.period or 0) * Q) + MIN_RESIDUAL_DF:
            return None
        return model

    def fit(self, orders: dict[Orders, list[str]]) -> None:
        """Screen the untried ``orders`` and fit those that can still compete (module notes)."""
        models = {key: m for key in orders if not self.tried(key) and (m := self.model(key)) is not None}
        screens = {key: self._screen(m) for key, m in models.items()} if self.options.screening else {}
        hopes = {key: rank_score(c.optimistic_criteria(SCREEN_SLACK)[self.options.criterion], orders[key])
                 for key, c in screens.items() if c is not None and c.screen.settled}
        first = min(hopes, key=lambda k: hopes[k]) if hopes else None
        # The bar: the best rank score of a fitted candidate that is not demoted.
        bar = min((criterion_value(f, self.options.criterion) for f in self.fitted.values() if not is_demoted(f)), default=math.inf)
        # The most promising order first, so the bar is set early; then in order of size, so a
        # smaller order's optimum is there to start a larger one from.
        for key in sorted(models, key=lambda k: (k != first, k)):
            if key in hopes and hopes[key] > bar + SCREEN_MARGIN:
                self.screened_out[key] = models[key]
                continue
            try:
                # The residuals of every order, seasonal terms or not, are checked at the seasonal
                # lags of data that show a season (fitting.ljung_box_lags).
                fit = fit_candidate(self.y, models[key], self.fitted.values(), screens.get(key), period=self.period)
            except (np.linalg.LinAlgError, ValueError) as exc:
                # One order the optimiser cannot handle costs that candidate only.
                self.failed.append(f"{models[key].label()} could not be fitted ({type(exc).__name__}: {exc})")
                self.failed_keys.add(key)
                continue
            fit.source = list(orders[key])
            self.fitted[key] = fit
            if not is_demoted(fit):
                bar = min(bar, criterion_value(fit, self.options.criterion))

    def _screen(self, model: Order) -> ScreenedCandidate | None:
        try:
            return screen_candidate(self.y, model, self.fitted.values())
        except (np.linalg.LinAlgError, ValueError):
            return None  # the full fit will say what is wrong

    def leader(self) -> CandidateFit:
        return rank_within_d(list(self.fitted.values()), self.options.criterion)[0]

    def seed(self, p: int, q: int, P: int, Q: int) -> Orders:
        """The key of an order read from the correlograms: with the default deterministic term."""
        return (p, q, P, Q, self.trends[0])

    def neighbours(self, key: Orders) -> dict[Orders, list[str]]:
        """The +-1 moves in p, q, P and Q of ``key``, and ``key`` with each other deterministic term."""
        limits = (self.options.max_p, self.options.max_q, self.options.max_P if self.period else 0, self.options.max_Q if self.period else 0)
        *orders, trend = key
        out: dict[Orders, list[str]] = {}
        for axis in range(4):
            for step in (-1, 1):
                moved = list(orders)
                moved[axis] += step
                if 0 <= moved[axis] <= limits[axis]:
                    out[(moved[0], moved[1], moved[2], moved[3], trend)] = ["local search"]
        for other in self.trends:
            if other != trend:
                out[(orders[0], orders[1], orders[2], orders[3], other)] = [TREND_TOGGLE]
        return out


def _key(fit: CandidateFit) -> Orders:
    m = fit.model
    return (m.p, m.q, m.P, m.Q, m.trend)


@dataclass
class SearchResult:
    """What the search of one differencing choice found: the fitted candidates, the correlogram
    read and the series it was read on, the words of the readings, and the orders screening
    left out."""

    fits: list[CandidateFit]
    correlogram: Correlogram
    identified_on: np.ndarray
    words: list[str]
    screened_out: list[Order]
    period: int | None  # the seasonal period searched: None when the data showed no season


def search_candidates(
    series_id: str, y: np.ndarray, d: int, seasonal: SeasonalSetup, decision: DifferencingDecision, options: EngineOptions
) -> SearchResult:
    """Read the correlograms of the differenced series, propose orders and fit them."""
    D = seasonal.D
    w = seasonal_difference(y, seasonal.examined, D)
    w = np.diff(w, n=d) if d else w
    nlags = lag_count(w.size, seasonal.examined)
    cg = correlogram(w, nlags, options.alpha)
    words: list[str] = []
    period = seasonal.examined
    if period and not D:
        if nlags < period or not seasonal_structure_present(cg.acf, cg.acf_band, period):
            words.append(f"No seasonal structure at lag {period} in the ACF: a non-seasonal model is proposed.")
            period = None
    if period and Flag.TOO_FEW_SEASONS in seasonal.flags and seasonal.differencing and not seasonal.differencing.seasonal_terms_possible:
        period = None
    _, significant = eacf_table(w, options.max_p, options.max_q)
    reading = read_patterns(cg, options.max_p, options.max_q, eacf_vertex(significant), period)
    words += reading.words
    D = D if period else 0
    search = _Search(y, d, D, period, trend_choices(w, decision, d, D), options)
    nonseasonal = with_neighbours(reading.proposals, options.max_p, options.max_q)
    if period:
        seasonal_props, seasonal_words = read_seasonal_patterns(cg, period, options.max_P, options.max_Q)
        words += seasonal_words
        lead_pq = max(reading.proposals, key=lambda pq: (len(reading.proposals[pq]), -sum(pq)))
        seasonal_all = seasonal_grid(seasonal_props, options.max_P, options.max_Q)
        search.fit({search.seed(*lead_pq, P, Q): reading.proposals[lead_pq] + src for (P, Q), src in seasonal_all.items()})
        best_PQ = _key(search.leader())[2:4] if search.fitted else (0, 0)
        search.fit({search.seed(p, q, *best_PQ): src + seasonal_all.get(best_PQ, []) for (p, q), src in nonseasonal.items()})
    else:
        search.fit({search.seed(p, q, 0, 0): src for (p, q), src in nonseasonal.items()})
    for _ in range(LOCAL_SEARCH_ROUNDS if search.fitted else 0):
        fresh = {k: v for k, v in search.neighbours(_key(search.leader())).items() if not search.tried(k)}
        if not fresh:
            break
        search.fit(fresh)
    if not search.fitted:
        why = "; ".join(search.failed[:3]) or (f"with d = {d}" + (f" and D = {D}" if D else "")
                                               + " too few observed values are left for any order")
        raise SeriesProblem(series_id, "no candidate model could be fitted: " + why, flag="no_fit")
    screened = sorted(search.screened_out.values(), key=lambda m: m.label())
    return SearchResult(best_term_per_order(list(search.fitted.values()), options.criterion), cg, w, words + search.failed, screened,
                        period)


def best_term_per_order(fits: list[CandidateFit], criterion: str) -> list[CandidateFit]:
    """One fit per ARIMA order: of the same order fitted with different deterministic terms,
    the one that ranks better (an order names one candidate for the reviewer and the export)."""
    best: dict[tuple, CandidateFit] = {}
    for fit in sorted(fits, key=lambda f: (is_demoted(f), criterion_value(f, criterion))):
        best.setdefault((fit.model.order, fit.model.seasonal_order), fit)
    return list(best.values())


def seasonal_grid(proposals: dict[tuple[int, int], list[str]], max_P: int, max_Q: int) -> dict[tuple[int, int], list[str]]:
    """Every seasonal (P, Q) up to the limits, with the readings that proposed it.

    Lags s and 2s carry little information on a short series, so the seasonal correlogram
    readings alone often miss the seasonal part a fit prefers (a (1, 1) read as (2, 0) or
    (0, 2)); the whole small grid is screened instead, the readings kept as sources for the
    rank bonus. Hyndman & Khandakar (2008, §3.2) search P, Q <= 2 as well.
    """
    return {(P, Q): list(proposals.get((P, Q), ["seasonal grid"])) for P in range(max_P + 1) for Q in range(max_Q + 1)}


def fixed_seasonality_words(leader: CandidateFit, seasonal: SeasonalSetup) -> str | None:
    """Words for a seasonal difference that looks one too many, or None.

    Two independent signs must agree: the Canova-Hansen test did not reject a fixed seasonal
    pattern (:mod:`app.core.seasonal_stability`), and the leader, fitted after the seasonal
    difference, has a seasonal MA inverse root of modulus at least :data:`SEASONAL_MA_BOUNDARY`
    (0.9, our choice). A seasonal difference of fixed seasonal means leaves exactly the factor
    ``1 − B^s`` in the MA part, an inverse root on the unit circle: the classical sign of
    over-differencing (Box, Jenkins, Reinsel & Ljung 2015, §4.1.3 and §9.2, from memory; Abraham
    & Ledolter 1983, §6.5, from memory). The forecasts of such a model are close to those of
    fixed seasonal means, so the order still serves; the flag tells the reviewer that seasonal
    dummies with D = 0 are the more direct model.
    """
    sd = seasonal.differencing
    if leader.model.D != 1 or not sd or not sd.stability or not sd.stability.fixed:
        return None
    if seasonal_ma_modulus(leader) < SEASONAL_MA_BOUNDARY:
        return None
    return (f"The seasonal pattern looks fixed: the Canova-Hansen test did not reject it (p = {sd.stability.p_value:.2f}) "
            f"and the seasonal MA of {leader.model.label()} sits near the unit circle, the trace a seasonal difference "
            "of fixed seasonal means leaves. Its forecasts are close to fixed seasonal means; seasonal dummies "
            "with D = 0 model that more directly.")


@dataclass
class _Identified:
    """The differencing decisions and the ranked candidates of one (possibly adjusted) series.

    ``setups`` holds, for each seasonal difference D searched (two when the seasonal
    differencing is uncertain), its seasonal setup and ordinary differencing decision;
    ``searches`` the search of each (D, d) pair searched.
    """

    setups: dict[int, tuple[SeasonalSetup, DifferencingDecision]]
    searches: dict[tuple[int, int], SearchResult]
    ranked: list[CandidateFit]

    @property
    def seasonal(self) -> SeasonalSetup:
        return self._chosen[0]

    @property
    def decision(self) -> DifferencingDecision:
        return self._chosen[1]

    @property
    def _chosen(self) -> tuple[SeasonalSetup, DifferencingDecision]:
        """The setup of the leader's D: it names what was decided."""
        return self.setups.get(self.ranked[0].model.D) or next(iter(self.setups.values()))


def _differencing(series_id: str, y: np.ndarray, period: int | None, period_words: list[str],
                  chosen: SeasonalDifferencing | None) -> dict[int, tuple[SeasonalSetup, DifferencingDecision]]:
    """The seasonal setup and the ordinary differencing decision of ``y`` for each D its
    seasonal differencing decision ``chosen`` (None without a period) leaves open, the
    decision's own D first."""
    demand = classify_demand(y)
    repeat = exact_repeat(y) if demand is None or not demand.sparse else None
    if repeat is not None:
        raise SeriesProblem(series_id, f"repeats itself exactly every {repeat} points: after a difference at that lag "
                            "nothing is left for an ARIMA model to describe", flag="exactly_periodic")
    setups: dict[int, tuple[SeasonalSetup, DifferencingDecision]] = {}
    for D in chosen.choices if chosen else (0,):
        differencing = replace(chosen, D=D) if chosen else None
        seasonal = SeasonalSetup(period, differencing, list(period_words))
        if differencing:
            seasonal.words += differencing.explanation
            seasonal.flags += differencing.flags
        w = seasonal_difference(y, period, D)
        setups[D] = (seasonal, choose_differencing(w, seasonally_differenced=D > 0))
    return setups


def _search_on(
    series_id: str, y: np.ndarray, period: int | None, period_words: list[str], options: EngineOptions,
    kept: dict[int, tuple[SeasonalSetup, DifferencingDecision]] | None = None,
) -> _Identified:
    """Seasonal and ordinary differencing, correlograms and ranked candidates of ``y``; with
    ``kept``, the differencing of an earlier search (every D and d it searched) is kept.

    Every (D, d) an uncertain decision leaves open is searched, and the groups are ranked by
    how well their leaders predict the levels (:func:`app.core.ranking.rank_across_differencing`)."""
    setups = kept if kept is not None else _differencing(
        series_id, y, period, period_words, choose_seasonal_differencing(y, period) if period else None)
    first_D = next(iter(setups))
    searches: dict[tuple[int, int], SearchResult] = {}
    unfitted: list[SeriesProblem] = []
    for D, (seasonal, decision) in setups.items():
        ds = [decision.d] + ([decision.alternative_d] if decision.uncertain and decision.alternative_d is not None else [])
        for d in ds:
            marks = (["alternative d"] if d != decision.d else []) + (["alternative D"] if D != first_D else [])
            found = _search_marked(series_id, y, d, seasonal, decision, options, marks)
            if isinstance(found, SeriesProblem):
                unfitted.append(found)
            else:
                searches[(D, d)] = found
    if not searches:
        raise unfitted[0]
    ranked = rank_across_differencing({key: found.fits for key, found in searches.items()}, y, options.criterion)
    D, d = next(key for key, found in searches.items() if any(f is ranked[0] for f in found.fits))
    if d < MAX_D and (D, d + 1) not in searches and unit_root_fit(rank_within_d(searches[(D, d)].fits, options.criterion), options.criterion):
        further = _search_marked(series_id, y, d + 1, *setups[D], options, [FURTHER_DIFFERENCE])
        if not isinstance(further, SeriesProblem):
            searches[(D, d + 1)] = further
            ranked = rank_across_differencing({key: found.fits for key, found in searches.items()}, y, options.criterion)
    return _Identified(setups, searches, ranked)


def _search_marked(series_id: str, y: np.ndarray, d: int, seasonal: SeasonalSetup, decision: DifferencingDecision,
                   options: EngineOptions, marks: list[str]) -> SearchResult | SeriesProblem:
    """:func:`search_candidates` with ``marks`` added to every fit's source; the problem instead
    when this differencing leaves too little to fit (more differencing can do that to a short
    series with gaps, and another differencing searched still decides)."""
    try:
        found = search_candidates(series_id, y, d, seasonal, decision, options)
    except SeriesProblem as problem:
        if problem.flag != "no_fit":
            raise
        return problem
    for f in found.fits:
        f.source = f.source + marks
    return found


def unit_root_fit(group: list[CandidateFit], criterion: str) -> CandidateFit | None:
    """The first fit of a ranked ``group`` of one differencing (its leader first) that scores at
    least as well as the leader and whose ordinary AR factor has a root within
    ``NEAR_UNIT_ROOT - 1`` of ``z = 1``; None if there is none.

    Such a root is a unit root the differencing left in: the order that fits the differences
    best is in effect integrated once more, and one more difference is the Box-Jenkins remedy
    (an estimated autoregressive factor near ``1 - B`` calls for differencing, not for an AR
    coefficient of 1). Demoted fits count: an ARIMA(1,1,1) with drift whose AR root sits at 1
    and whose MA root nearly cancels it is demoted for the cancellation, yet it is the trace of
    ARIMA(0,2,1). The search with one more difference is then ranked beside the others by how
    well its leader predicts the levels (:func:`app.core.ranking.rank_across_differencing`), so
    the root only opens the question.

    References
    ----------
    .. [1] Box, G.E.P., Jenkins, G.M., Reinsel, G.C. & Ljung, G.M. (2015). *Time Series
       Analysis: Forecasting and Control*, 5th ed., Wiley, ch. 6 (identification: an
       autoregressive operator with a root on the unit circle is a difference; chapter from memory).
    """
    if not group:
        return None
    bar = criterion_value(group[0], criterion)
    for fit in sorted(group, key=lambda f: criterion_value(f, criterion)):
        if criterion_value(fit, criterion) > bar:
            break
        if root_at_one(fit) is not None:
            return fit
    return None


def root_at_one(fit: CandidateFit) -> complex | None:
    """The root of ``fit``'s ordinary AR factor within ``NEAR_UNIT_ROOT - 1`` of ``z = 1``
    (the nearest, if several), or None."""
    if fit.estimate is None:
        return None
    roots = factor_roots(fit.estimate.spec, fit.estimate.coefficients)[0]
    near = roots[np.abs(roots - 1.0) < NEAR_UNIT_ROOT - 1.0]
    return complex(near[np.argmin(np.abs(near - 1.0))]) if near.size else None


ADJUSTMENT_ROUNDS = 3
"""Searches of the series adjusted by the interventions found, until the joint fit under the
new leader keeps the same set at sizes within half a standard error of those adjusted by."""


def _with_interventions(
    prepared: PreparedSeries, y: np.ndarray, first: _Identified, period: int | None, period_words: list[str], options: EngineOptions
) -> tuple[_Identified, list[Intervention]]:
    """Outliers and level shifts under the leading order (Chen & Liu 1993); when there are any,
    the series is identified again with their effects taken out and they are estimated jointly
    with the new leader. The differencing is decided again after a level shift (so that the
    shift is not read as a unit root) and when the adjusted series takes another seasonal
    difference (an outlier hides a season from the strength measure); otherwise only the ARMA
    orders are read again."""
    leader = first.ranked[0]
    if leader.estimate is None:
        return first, []
    found = detect_interventions(y, leader.model, leader.estimate, prepared.index)
    shifted = any(i.kind is InterventionKind.LEVEL_SHIFT for i in found)
    if not shifted:
        seen = _shift_instead(prepared, y, first, found)
        if seen:
            found, shifted = seen, True
    if not found:
        return first, []
    if leader.model.d and shifted:
        # Its size for the adjustment is the one under the stationary alternative; the
        # unit-root tests of the adjusted series decide whether a difference is still needed.
        found = estimate_jointly(y, _one_difference_less(leader.model), found, np.zeros(0), prepared.index) or found
    # Without a level shift the ordinary differencing decision stays: an outlier or a temporary
    # change is not a change of level, and the unit-root tests on the adjusted series would only
    # add their noise to it. An uncertain decision stays uncertain: both its d are searched again,
    # and the ranking weighs them on the adjusted series. The seasonal strength is another matter:
    # a ratio of variances, one spike three times the level takes it from 0.97 to 0.05 and the
    # season is lost; when the adjusted series decides D otherwise, the differencing is decided
    # again in full. The ARMA orders are read again. The search is repeated when the joint fit
    # under the new leader keeps a different set, or the same set at sizes more than half a
    # standard error from those the series was adjusted by (:data:`ADJUSTMENT_ROUNDS` in all);
    # a set that still moves is not one to adjust the series by, and the series is left as it is.
    current: list[Intervention] = found
    for round_ in range(ADJUSTMENT_ROUNDS):
        shifted = any(i.kind is InterventionKind.LEVEL_SHIFT for i in current)
        cleaned = adjusted(y, current)
        chosen = choose_seasonal_differencing(cleaned, period) if period else None
        same = not shifted and (chosen is None or chosen.choices == tuple(first.setups))
        differencing = first.setups if same else _differencing(prepared.series_id, cleaned, period, period_words, chosen)
        again = _search_on(prepared.series_id, cleaned, period, period_words, options, differencing)
        best = again.ranked[0]
        start = best.estimate.unconstrained if best.estimate is not None else np.zeros(0)
        kept = estimate_jointly(y, best.model, current, start, prepared.index)
        if not kept:
            break
        if {(i.kind, i.position) for i in kept} == {(i.kind, i.position) for i in current} and (
                _sizes_settled(current, kept) or round_ == ADJUSTMENT_ROUNDS - 1):
            # The sizes the series was adjusted by (the candidates were fitted to that series,
            # so the hand-off's parameters and sizes belong together), the t of the joint fit:
            # within half a standard error of its sizes, so the two belong together too (a size
            # taken under the stationary alternative of a shift moves to the leader's first).
            by_place = {(i.kind, i.position): i.t_stat for i in kept}
            return again, [replace(i, t_stat=by_place[(i.kind, i.position)]) for i in sorted(current, key=lambda i: i.position)]
        current = kept
    return first, []


def _shift_instead(prepared: PreparedSeries, y: np.ndarray, first: _Identified, found: list[Intervention]
                   ) -> list[Intervention]:
    """The interventions, a level shift among them, of a model the leader of ``first`` reads the
    shift into, when that model with them predicts the levels better than the leader with its
    own (``found``) (:func:`_shift_predicts_better`); empty when there is no such model.

    A level shift makes a stationary series look integrated (Perron 1989: the unit-root tests
    then fail to reject), and under a differenced model it is only one step: the stationary
    alternative of a differenced leader (one difference fewer) is searched for a shift, whatever
    the tests said. (Searched only when the tests had left d open, a shift of 4 SDs right after
    five missing points of an AR(1) was found in none of 20 seeded series, with it in 19; on
    the real benchmark no order changed.) A shift also looks like a linear
    trend to a stationary model with one (Perron 1989's "crash" against "changing growth"), and
    an autoregression with a root pulled towards 1 absorbs the step: such a leader is searched
    again without its trend, and, when that reads no shift either, as a mean alone (the Nile's
    flow to 1954, Cobb 1978: ARIMA(1,0,0) with a trend before). Fitted to an integrated or
    trending series, a stationary model reads its wandering as shifts, so a shift is taken only
    when the alternative, the leader's own ARMA orders without the difference or the trend,
    predicts the levels better with it than the leader does (Perron's crash model is an
    autoregression with a shift, not white noise with one: judged as white noise, a shift found
    by the mean alone won in none of 170 simulated series with autocorrelation; judged so, an
    AR(1) with phi = 0.5 and a 3-SD shift keeps it in 38 of 50, integrated series in 1 of 80 —
    a review's simulation). Searched whatever the tests said, clean IMA(1,1) series (theta -0.8
    and -0.5) lost their difference to a false shift in 11 of 600 more than before, while 30 of
    600 AR(1) series with a shift newly got it.

    References
    ----------
    .. [1] Perron, P. (1989). The great crash, the oil price shock, and the unit root hypothesis.
       *Econometrica* 57, 1361-1401.
    .. [2] Cobb, G.W. (1978). The problem of the Nile: conditional solution to a changepoint
       problem. *Biometrika* 65, 243-251.
    """
    model = first.ranked[0].model
    if model.d:
        alternative = _one_difference_less(model)
        searches = [alternative]
    elif model.d + model.D == 0 and model.trend == "ct":
        alternative = replace(model, trend="c")
        searches = [alternative, Order(0, 0, 0, trend="c")]
    else:
        return []
    for searched in searches:
        fit = fit_candidate(y, searched)
        if fit.estimate is None:
            continue
        seen = detect_interventions(y, searched, fit.estimate, prepared.index)
        if (any(i.kind is InterventionKind.LEVEL_SHIFT for i in seen)
                and _shift_predicts_better(y, first.ranked[0], found, alternative, seen)):
            return seen
    return []


def _sizes_settled(adjusted_by: list[Intervention], joint: list[Intervention]) -> bool:
    """Whether each size the series was adjusted by is within half a standard error (size over
    t) of the joint fit's size of the same intervention."""
    by_place = {(i.kind, i.position): i.size for i in adjusted_by}
    return all(not math.isfinite(i.t_stat) or i.t_stat == 0
               or abs(by_place[(i.kind, i.position)] - i.size) <= 0.5 * abs(i.size / i.t_stat) for i in joint)


def _shift_predicts_better(y: np.ndarray, leader: CandidateFit, found: list[Intervention], alternative: Order,
                           seen: list[Intervention]) -> bool:
    """Whether ``alternative`` (one difference fewer) on ``y`` with the interventions ``seen``
    (a level shift among them) taken out predicts the levels better than the ``leader`` with
    its own (``found``), by the BIC of their one-step prediction errors on the same points
    (:func:`app.core.ranking.common_level_bic`). Each intervention counts two parameters, its
    size and its time, as a change point's time counts in Schwarz's criterion (Yao 1988).

    Without the comparison, clean integrated series (IMA(1,1), theta = -0.5, n = 100, 300
    series) came out with an intervention in 21% (a level shift in 18%) and without their
    difference in 31%; with it, 7%, 4% and 16%. A true shift of 5 innovation SDs in an AR(1)
    with phi = 0.5 is found as before (64% against 66%).

    References
    ----------
    .. [1] Yao, Y.-C. (1988). Estimating the number of change-points via Schwarz' criterion.
       *Statistics & Probability Letters* 6, 181-189.
    """
    ours_y, theirs_y = (adjusted(y, found) if found else y), adjusted(y, seen)
    ours = fit_candidate(ours_y, leader.model, warm=leader) if found else leader
    theirs = fit_candidate(theirs_y, alternative)
    ours_errors, theirs_errors = level_errors(ours, ours_y), level_errors(theirs, theirs_y)
    window = final_window(y.size, min(ours.residuals.size, theirs.residuals.size) - 1, (ours_errors[0], theirs_errors[0]))
    return (common_level_bic(*theirs_errors, theirs.n_params + 2 * len(seen), window)
            < common_level_bic(*ours_errors, ours.n_params + 2 * len(found), window))


def _one_difference_less(model: Order) -> Order:
    """``model`` with one ordinary difference fewer, a mean where no difference is left."""
    trend = model.trend if model.d - 1 + model.D else ("ct" if "t" in model.trend else "c")
    return replace(model, d=model.d - 1, trend=trend)


def _intervention_words(found: list[Intervention], transform: TransformChoice) -> str:
    scale = "" if transform.kind == "none" else f" Their sizes are on {_scale_words(transform)}."
    return ("Interventions found in the residuals of the leading order and estimated jointly with it (Chen & Liu 1993): "
            + "; ".join(i.words() for i in found)
            + f".{scale} The differencing, the correlograms and the candidates were read from the series with their "
            "effects taken out; the forecasting job must model them too.")


def _identify_on(
    prepared: PreparedSeries, transform: TransformChoice, period: int | None, period_words: list[str], options: EngineOptions,
    kept: dict[int, tuple[SeasonalSetup, DifferencingDecision]] | None = None,
) -> tuple[Identification, _Identified]:
    """One identification pass: differencing (``kept``'s when given), correlograms and
    candidates of the series under ``transform``; also the search itself, for
    :func:`_with_interventions`."""
    y = apply_transform(prepared.values, transform)
    search = _search_on(prepared.series_id, y, period, period_words, options, kept)
    return _finished(prepared, transform, search, [], options), search


class _Finding(Protocol):
    """What a check on the data found (a large residual, a longer cycle, a flat run): its words
    for the page and its reason for the confidence."""

    def words(self) -> str: ...

    def doubt(self) -> str: ...


def _finished(
    prepared: PreparedSeries, transform: TransformChoice, search: _Identified, interventions: list[Intervention], options: EngineOptions
) -> Identification:
    """The identification of a search: flags, data checks, confidence.

    References
    ----------
    .. [1] Self, S.G. & Liang, K.-Y. (1987). Asymptotic properties of maximum likelihood
       estimators and likelihood ratio tests under nonstandard conditions. *JASA* 82, 605-610
       (an estimate on the boundary of the parameter space is not an interior optimum; the
       usual inference does not hold there).
    """
    seasonal, decision, ranked = search.seasonal, search.decision, search.ranked
    best = ranked[0]
    shown = search.searches[(best.model.D, best.model.d)]
    flags = list(prepared.flags) + seasonal.flags
    if transform.kind != "none":
        flags.append(Flag.TRANSFORMED)
    further = any(FURTHER_DIFFERENCE in f.source for f in ranked)
    if decision.uncertain or further:
        flags.append(Flag.UNCERTAIN_DIFFERENCING)
    if decision.trend_stationary and best.model.d == 0 and "t" in best.model.trend:
        flags.append(Flag.TREND_STATIONARY)
    for flag in best.flags + ([] if best.passes_ljung_box else [Flag.RESIDUAL_AUTOCORRELATION]):
        if flag not in flags:
            flags.append(flag)
    fixed = fixed_seasonality_words(best, seasonal)
    if fixed:
        flags.append(Flag.FIXED_SEASONALITY)
        seasonal = replace(seasonal, words=[*seasonal.words, fixed])
    # ``leading``: doubts about whether the data can be modelled at all (a stuck stretch, demand
    # too sparse for a Gaussian ARIMA) lead the reasons, so the queue shows them first.
    data_notes, doubts, leading = [], [], []
    if decision.uncertain or further:
        both = sorted({decision.d, decision.d if decision.alternative_d is None else decision.alternative_d})
        doubts.append(
            f"the unit-root tests left d open between {both[0]} and {both[-1]}; the fits chose d = {best.model.d}"
            if decision.uncertain else f"a unit root left in the fits opened d = {decision.d + 1}; the fits chose d = {best.model.d}"
        )
    if transform.kind == "box_cox" and transform.lam in LAMBDA_BOUNDS:
        # An estimate on the edge of its range is no interior optimum (Self & Liang 1987): the
        # data would go further than allowed, or a few large values drove it there. Spikes of 8
        # SD in 5-10% of a white noise made lambda = -1 win by 130-165 in AIC, and on that scale
        # they hid from the intervention search: 7 of 10 such suggestions were firm (a review).
        doubts.append(f"Box-Cox lambda = {transform.lam:g} lies at the end of the range searched "
                      f"[{LAMBDA_BOUNDS[0]:g}, {LAMBDA_BOUNDS[1]:g}]: a few extreme values may have chosen that scale "
                      "and be hidden on it; look at the series as observed")
    if interventions:
        data_notes.append(_intervention_words(interventions, transform))
        kinds = {i.kind for i in interventions}
        if InterventionKind.LEVEL_SHIFT in kinds:
            flags.append(Flag.LEVEL_SHIFT)
        if kinds - {InterventionKind.LEVEL_SHIFT}:
            flags.append(Flag.OUTLIERS)
        doubts.append(f"{len(interventions)} intervention{'s' if len(interventions) > 1 else ''} "
                      f"({interventions[0].words()}{', ...' if len(interventions) > 1 else ''}) the forecasting job must model")
    demand = classify_demand(prepared.values)
    if demand and demand.sparse:  # smooth and erratic series are left to the ARIMA without comment
        data_notes.append(demand.words())
        flags.append(Flag.INTERMITTENT_DEMAND)
        leading.append(f"{demand.label} demand: a Gaussian ARIMA suits it poorly")
    ratios = (prediction_variance_ratios(best.estimate.ar_polynomial, best.estimate.ma_polynomial, best.residuals.size,
                                         np.isnan(best.residuals))
              if best.estimate is not None else None)
    checks: tuple[tuple[_Finding | None, Flag], ...] = (
        (largest_residual(best.residuals, prepared.index, ratios), Flag.LARGE_RESIDUAL),
        (longer_cycle(best.residuals, prepared.freq, best.model.period or 0), Flag.LONGER_CYCLE),
        (longest_flat_run(prepared.values, prepared.index, demand is not None and demand.sparse), Flag.FLAT_RUN),
    )
    for found, flag in checks:
        if found:
            flags.append(flag)
            # A stuck stretch is the first thing a reviewer of a sensor channel must read.
            data_notes.insert(0 if flag is Flag.FLAT_RUN else len(data_notes), found.words())
            if flag is Flag.FLAT_RUN:
                leading.insert(0, found.doubt())
            else:
                doubts.append(found.doubt())
    return Identification(
        prepared=prepared, transform=transform, seasonal=seasonal, differencing=decision,
        correlogram=shown.correlogram, identified_on=shown.identified_on,
        identified_label=identified_label(transform, best.model.period, best.model.D, best.model.d)
        + (", interventions taken out" if interventions else ""),
        pattern_words=seasonal.words + shown.words, candidates=ranked, data_notes=data_notes,
        confidence=score_confidence(ranked, flags, options.criterion, doubts, leading), criterion=options.criterion, flags=flags,
        screened_out=[m for found in search.searches.values() for m in found.screened_out], interventions=interventions,
        demand_class=demand.label if demand else None,
    )


def _loglik_on(values: np.ndarray, model: Order, known: tuple[TransformChoice, float] | None = None
               ) -> Callable[[TransformChoice], float]:
    """The maximised log-likelihood of ``model`` for ``values`` under a transform (``known``'s
    when it names that transform, a leader's own on its scale; NaN when the order cannot be
    fitted)."""

    def loglik(choice: TransformChoice) -> float:
        if known is not None and choice.to_json() == known[0].to_json():
            return known[1]
        try:
            fit = fit_candidate(apply_transform(values, choice), model)
        except (np.linalg.LinAlgError, ValueError):
            return math.nan
        # A fit whose filter broke down at every start has no likelihood to weigh.
        return fit.loglik if fit.estimate is None or fit.estimate.evaluated else math.nan

    return loglik


def identify_prepared(prepared: PreparedSeries, options: EngineOptions = EngineOptions()) -> Identification:
    """Run the identification on a series already on its regular grid.

    A series longer than :data:`LONG_SERIES` points is searched on its most recent
    :data:`SEARCH_WINDOW` points and its best candidates are refitted on the whole series
    (:func:`_on_whole_series`); a shorter one as follows.

    The transform is chosen by the likelihoods of the original data under one order
    (:func:`app.core.transform.choose_transform`, Box & Cox 1964), first under
    :func:`app.core.transform.order_before_search` with the differencing the tests choose on the
    series as observed. The series is identified on the scale that comparison chooses, so the
    correlograms, the differencing and the candidates are those of the series actually modelled,
    and the comparison is repeated under the leader found there (an order found on one scale
    favours that scale). When that moves to another scale, the series is identified again. It
    stops when the comparison keeps the scale the leader was found on; when the comparisons go
    round instead, or have not settled after ``TRANSFORM_PASSES + 1`` identifications, the
    simplest scale identified is kept (:meth:`_Scales.settled`). Starting on the scale the first
    comparison chooses, rather than always on the series as observed, saves the identification
    that a transformed series would otherwise pay for on a scale it leaves.

    On the scale chosen, outliers, level shifts and temporary changes are sought in the leading
    order's residuals (:mod:`app.core.interventions`, Chen & Liu 1993); when any is found, the
    series is identified again with their effects taken out and they are estimated jointly with
    the new leader.

    References
    ----------
    .. [1] Box, G.E.P. & Cox, D.R. (1964). An analysis of transformations. *JRSS B* 26, 211-252.
    .. [2] Chen, C. & Liu, L.-M. (1993). Joint estimation of model parameters and outlier effects
       in time series. *JASA* 88, 284-297.
    """
    if prepared.n <= LONG_SERIES:
        return _identify_whole(prepared, options)[0]
    recent, start = prepared.recent(SEARCH_WINDOW)
    found, search = _identify_whole(recent, options, first=start + 1, smallest=float(np.nanmin(prepared.values)))
    return _on_whole_series(prepared, start, found, search, options)


def _identify_whole(prepared: PreparedSeries, options: EngineOptions, first: int = 1, smallest: float = math.inf
                    ) -> tuple[Identification, _Identified]:
    """The identification of :func:`identify_prepared` on all of ``prepared``, and the search
    that ranked its candidates; ``first`` numbers its first point in the words (the recent
    stretch of a long series starts later) and ``smallest`` is the smallest value of the whole
    series it is a stretch of (:func:`app.core.transform.choose_transform`)."""
    period, period_words = resolve_period(prepared, options.period)
    observed = _differencing(prepared.series_id, prepared.values, period, period_words,
                             choose_seasonal_differencing(prepared.values, period) if period else None)
    D, (_, decision) = next(iter(observed.items()))
    before = order_before_search(decision.d, D, period)
    choice = choose_transform(prepared.values, period, before, "the order weighed before any search",
                              _loglik_on(prepared.values, before), first, smallest)
    words = [*choice.explanation, f"The search starts on {_scale_words(choice)}."]
    found, search = _identify_on(prepared, choice, period, period_words, options, observed if choice.kind == "none" else None)
    scales = _Scales(prepared, period, period_words, options, first, smallest, words)
    # A series with a value <= 0 is not transformed (the first comparison said so): no second one.
    if min(float(np.nanmin(prepared.values)), smallest) > 0:
        found, search = scales.settled(found, search)
    # Outliers and level shifts are sought on the scale chosen: on the wrong one, the larger
    # swings of a multiplicative series would read as outliers. Not on intermittent or lumpy
    # demand: against the smooth level a Gaussian ARIMA fits there, every period with a demand
    # reads as an outlier and the adjusted series goes below zero (the data note says so).
    y = apply_transform(prepared.values, found.transform)
    demand = classify_demand(prepared.values)
    adjusted_search, interventions = ((search, []) if demand is not None and demand.sparse
                                      else _with_interventions(prepared, y, search, period, period_words, options))
    if interventions and found.transform.kind != "none":
        found, search, adjusted_search, interventions = scales.without_interventions(found, search, adjusted_search, interventions)
    if interventions:
        weighed_under = found.suggested.model
        found = _finished(prepared, found.transform, adjusted_search, interventions, options)
        if found.transform.kind == "none" and found.suggested.model != weighed_under:
            words.append(f"These comparisons were made before the interventions were sought. With them taken out the leader "
                         f"is {found.suggested.model.label()}{found.suggested.model.term_words()}, under which the transforms "
                         "were not weighed again: that is done only when a transform was taken, whose scale the "
                         "interventions could have decided.")
    found.transform = TransformChoice(found.transform.kind, found.transform.lam, explanation=words)
    return found, (adjusted_search if interventions else search)


@dataclass
class _Scales:
    """The transform decided by identifications on the scales the comparisons pick
    (:func:`identify_prepared`); ``words`` collects what each step found."""

    prepared: PreparedSeries
    period: int | None
    period_words: list[str]
    options: EngineOptions
    first: int
    smallest: float
    words: list[str]

    def weighed(self, values: np.ndarray, transform: TransformChoice, leader: CandidateFit, taken_out: str = "") -> TransformChoice:
        """The transform the comparison under ``leader`` (found on the ``transform`` scale) picks for ``values``."""
        role = f"the leader on {_scale_words(transform)}{taken_out}"
        return choose_transform(values, self.period, leader.model, role,
                                _loglik_on(values, leader.model, (transform, leader.loglik)), self.first, self.smallest)

    def weighed_without(self, scale: TransformChoice, found: Identification, adjusted_search: _Identified,
                        interventions: list[Intervention], taken_out: str) -> TransformChoice:
        """The comparison on the series with the ``interventions`` found on ``scale`` taken out,
        under the leader of the search on the adjusted series (``adjusted_search``); with none
        found, on the series as observed under ``found``'s leader."""
        if not interventions:
            return self.weighed(self.prepared.values, scale, found.suggested, ", where no interventions were found")
        y = apply_transform(self.prepared.values, scale)
        return self.weighed(invert_transform(adjusted(y, interventions), scale), scale, adjusted_search.ranked[0], taken_out)

    def settled(self, found: Identification, search: _Identified) -> tuple[Identification, _Identified]:
        """Identify again on each scale the comparison under the last leader picks, until one
        picks its own. When the comparisons go round (a scale identified before is picked again)
        or :data:`TRANSFORM_PASSES` identifications more have not settled it, no scale is
        picked by its own leader, and the simplest of those identified is kept (:func:`app.core.transform.simplicity`:
        a transform counts as a parameter, and no comparison here has earned it)."""
        passes = {str(found.transform.to_json()): (found, search)}
        while True:
            choice = self.weighed(self.prepared.values, found.transform, found.suggested)
            self.words.extend(choice.explanation)
            key = str(choice.to_json())
            if choice.to_json() == found.transform.to_json():
                return found, search
            if key in passes or len(passes) > TRANSFORM_PASSES:
                simplest = min(passes.values(), key=lambda done: simplicity(done[0].transform))
                named = ", ".join(_scale_words(done.transform) for done, _ in passes.values())
                self.words.append(f"The comparisons did not settle: under the leader of each scale identified ({named}) "
                                  f"another scale did better. The simplest of them, {_scale_words(simplest[0].transform)}, is kept.")
                return simplest
            self.words.append(f"Identified again on {_scale_words(choice)}.")
            found, search = _identify_on(self.prepared, choice, self.period, self.period_words, self.options)
            passes[key] = (found, search)

    def without_interventions(
        self, found: Identification, search: _Identified, adjusted_search: _Identified, interventions: list[Intervention]
    ) -> tuple[Identification, _Identified, _Identified, list[Intervention]]:
        """A spike alone can make a transform that shrinks it win the comparison: the transforms
        are weighed again on the series with the ``interventions`` found on ``found``'s scale
        taken out, under the leader found there. When that picks another scale, the series is
        identified there (interventions sought again) and the move stands only if the comparison
        under the new leader, on the series as it is then adjusted, keeps the new scale."""
        scale = found.transform
        choice = self.weighed_without(scale, found, adjusted_search, interventions, ", the interventions taken out")
        self.words.extend([f"With the interventions found on {_scale_words(scale)} taken out, the transforms were weighed "
                           "again:", *choice.explanation])
        if choice.to_json() == scale.to_json():
            self.words.append(f"{_capitalised(_scale_words(scale))} kept.")
            return found, search, adjusted_search, interventions
        moved, moved_search = _identify_on(self.prepared, choice, self.period, self.period_words, self.options)
        moved_y = apply_transform(self.prepared.values, choice)
        moved_adjusted, moved_interventions = _with_interventions(self.prepared, moved_y, moved_search, self.period,
                                                                  self.period_words, self.options)
        check = self.weighed_without(choice, moved, moved_adjusted, moved_interventions, ", the interventions found there taken out")
        self.words.extend([f"Identified again on {_scale_words(choice)}:", *check.explanation])
        if check.to_json() == choice.to_json():
            self.words.append(f"{_capitalised(_scale_words(choice))} kept.")
            return moved, moved_search, moved_adjusted, moved_interventions
        self.words.append(f"That comparison does not keep {_scale_words(choice)}: the identification on "
                          f"{_scale_words(scale)} stands.")
        return found, search, adjusted_search, interventions


def _scale_words(transform: TransformChoice) -> str:
    return "the series as observed" if transform.kind == "none" else f"the {transform.name()} scale"


def _capitalised(text: str) -> str:
    return text[:1].upper() + text[1:]


def _on_whole_series(
    prepared: PreparedSeries, start: int, found: Identification, search: _Identified, options: EngineOptions
) -> Identification:
    """The identification ``found`` on the stretch of ``prepared`` from ``start`` on, with its
    :data:`REFITTED` best candidates refitted on the whole series (each also started from its
    optimum on the stretch); the refits are ranked again and give the residual checks, the
    flags and the confidence. The transform, the differencing, the correlograms, the pattern
    readings and the interventions (moved to their places in the whole series, at the sizes
    estimated on the stretch) stay those of the stretch.

    The rule trades a little of the evidence for speed: every fit of the search costs in
    proportion to the length, and on long series little of the order's evidence is in the
    oldest points, while structural change makes them the least like the future (Pesaran &
    Timmermann 2007, on estimation windows under breaks). README's performance section gives
    the measurement behind :data:`LONG_SERIES` and :data:`SEARCH_WINDOW`.

    References
    ----------
    .. [1] Pesaran, M.H. & Timmermann, A. (2007). Selection of estimation window in the presence
       of breaks. *J. Econometrics* 137, 134-161.
    """
    interventions = [replace(i, position=i.position + start) for i in found.interventions]
    y = apply_transform(prepared.values, found.transform)
    if interventions:
        y = adjusted(y, interventions)
    groups: dict[tuple[int, int], list[CandidateFit]] = {}
    for candidate in found.candidates[:REFITTED]:
        try:
            fit = fit_candidate(y, candidate.model, warm=candidate, period=search.searches[(candidate.model.D, candidate.model.d)].period)
        except (np.linalg.LinAlgError, ValueError):
            continue  # the order stays out of the whole-series ranking
        fit.source = candidate.source
        groups.setdefault((candidate.model.D, candidate.model.d), []).append(fit)
    if not groups:
        raise SeriesProblem(prepared.series_id, "none of the candidates found on the recent points could be fitted "
                            "to the whole series", flag="no_fit")
    ranked = rank_across_differencing(groups, y, options.criterion)
    whole = _finished(prepared, found.transform, replace(search, ranked=ranked), interventions, options)
    whole.identified_label += f"; last {found.prepared.n} points"
    whole.data_notes.insert(0, (
        f"Long series ({prepared.n} points, more than {LONG_SERIES}): the transform, the differencing, the correlograms, "
        f"the interventions and the candidate search used the most recent {found.prepared.n} points "
        f"(from {moment_in(found.prepared.index, 0)}); the {sum(map(len, groups.values()))} best candidates were then refitted "
        "on the whole series, which ranks them, checks their residuals and sets the confidence."
    ))
    return whole


def identify_series(
    series: pd.Series, series_id: str | None = None, options: EngineOptions = EngineOptions(), lines: np.ndarray | None = None
) -> Identification:
    """Prepare and identify one series.

    Raises
    ------
    app.core.errors.SeriesProblem
        When the series cannot be analysed (too short, constant, bad values, a period that
        does not fit ...).
    """
    return identify_prepared(prepare_series(series, series_id, lines), options)
