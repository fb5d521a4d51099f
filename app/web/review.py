"""The review page of one series, as a plain dict for its template (the view model).

The page shows the series, the series the model was identified on, the differencing tests in
words, the ACF and PACF, the candidates with their statistics, the selected candidate's
residuals, the decision form and the verdict history. Each chart comes with its numbers as a
table.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import pandas as pd
import sqlite_utils

from app.core.analysis import Analysis, Candidate, Correlation, Intervention, UnitRootTest
from app.core.correlogram import correlogram
from app.core.engine_version import ENGINE_VERSION
from app.core.errors import SeriesProblem
from app.core.fitting import difference
from app.core.identify import FURTHER_DIFFERENCE, TREND_TOGGLE
from app.core.p_values import p_text
from app.core.prepare import PreparedSeries, frequency_words, has_time_of_day, moment, prepare_series
from app.core.ranking import PATTERN_BONUS, TIE_MARGIN
from app.core.seasonality import seasonal_lags
from app.core.transform import apply_transform
from app.core.vocabulary import InterventionKind
from app.review.decisions import CustomFit, fails_ljung_box, model_words
from app.review.filters import SeriesFilter
from app.review.forecast_check import remembered_checks
from app.store.analyses import analysis_record, load_analysis
from app.store.database import UnknownSeries
from app.store.series import load_series, series_neighbours
from app.store.verdicts import get_verdict, verdict_history
from app.web.charts import lag_bar_figure, line_figure, series_figure
from app.web.templating import number

# The series a test ran on (app.core.stationarity.LEVEL_NAMES, SEASONAL_LEVEL_NAMES) and its regression, in words.
ON_WORDS = {"levels": "the series as observed", "first difference": "the first difference",
            "second difference": "the second difference", "seasonal difference": "the seasonal difference",
            "seasonal and first difference": "the seasonal and first differences",
            "seasonal and second difference": "the seasonal difference and two first differences"}
REGRESSION_WORDS = {"c": "around a constant", "ct": "around a linear trend"}
CUSTOM_FIELDS = ("p", "d", "q", "P", "D", "Q", "s")
# What proposed a candidate (Candidate.source: the readings of app.core.patterns and the
# search steps of app.core.identify), in words.
SOURCE_WORDS = {
    "white noise": "read as white noise: no ACF or PACF lag stands out",
    "PACF cut-off": "read from the PACF cut-off",
    "ACF cut-off": "read from the ACF cut-off",
    "both tail off": "read from the ACF and PACF both tailing off",
    "EACF vertex": "read from the vertex of the extended ACF",
    "neighbour": "one step in p or q from a reading",
    "no seasonal spike": "no spike at the seasonal lags: no seasonal term",
    "seasonal ACF cut-off": "read from the ACF at the seasonal lags",
    "seasonal PACF cut-off": "read from the PACF at the seasonal lags",
    "seasonal both tail off": "both tail off at the seasonal lags",
    "seasonal decay": "a decay at the seasonal lags in the ACF or the PACF",
    "seasonal spikes in both": "seasonal spikes in both the ACF and the PACF",
    "seasonal grid": "seasonal grid: every seasonal P, Q within the limits",
    "local search": "stepwise search: one step from the leading order",
    TREND_TOGGLE: "stepwise search: the leading order with the constant or drift toggled",
    "alternative d": "the other d the tests left open",
    "alternative D": "the other seasonal differencing the two strength measures left open",
    FURTHER_DIFFERENCE: "one more difference: a close fit with one fewer has an AR root at 1",
}
FITTED_BY_HAND = "fitted by hand"
# The first line of each comparison of the scales (app.core.transform.transform_alternatives):
# the engine writes it again, the same on the same data, before every comparison.
COMPARISON_START = "Guerrero's lambda"
# A ticked intervention travels in the decision form as "TIMESTAMP|KIND".
INTERVENTION_SEPARATOR = "|"


def intervention_value(timestamp: str, kind: str) -> str:
    """The decision form's value of one intervention's checkbox."""
    return f"{timestamp}{INTERVENTION_SEPARATOR}{kind}"


def source_words(source: tuple[str, ...]) -> list[str]:
    """The readings and search steps that proposed a candidate, in words, each once."""
    return [SOURCE_WORDS.get(code, code) for code in dict.fromkeys(source)] or [FITTED_BY_HAND]


@dataclass
class FormState:
    """What the decision form holds when the page is drawn again (after an error or a custom fit)."""

    choice: str | None = None  # "1".."N" (candidate rank) or "custom"; None: from the verdict
    custom: dict = field(default_factory=dict)  # p, d, q, P, D, Q, s as typed
    note: str | None = None
    reviewer: str = ""
    error: str | None = None
    custom_fit: dict | None = None  # a candidate view of the fitted custom order


def time_labels(index: pd.Index) -> list:
    """Timestamps as the charts and tables show them: dates, with the time of day when the
    series has times of day (:func:`app.core.prepare.has_time_of_day`)."""
    if isinstance(index, pd.DatetimeIndex):
        return list(index.strftime("%Y-%m-%d %H:%M" if has_time_of_day(index) else "%Y-%m-%d"))
    return [int(v) for v in index]


def span_words(analysis: Analysis, index: pd.Index) -> tuple[str, str]:
    """The first and last time of an analysis as the page's heading names them: read as the
    stored series ``index`` writes its times (:func:`app.core.prepare.moment`), a date without
    a midnight time for daily or coarser data."""
    timed = has_time_of_day(index)

    def words(stamp: str) -> str:
        return moment(pd.Timestamp(stamp) if isinstance(index, pd.DatetimeIndex) else stamp, timed)

    return words(analysis.start), words(analysis.end)


def transform_lines(explanation: Sequence[str]) -> list[dict]:
    """The transform's explanation as the page lists it, ``{"label", "text"}`` a line: with two
    comparisons of the scales or more, each labelled at its first line ("Comparison 2 of 3"),
    and Guerrero's lambda, which opens each, said again only when it changed (on the series
    with interventions taken out)."""
    count = sum(line.startswith(COMPARISON_START) for line in explanation)
    lines: list[dict] = []
    label, opened, said = "", 0, None
    for line in explanation:
        if line.startswith(COMPARISON_START):
            opened += 1
            label = f"Comparison {opened} of {count}" if count > 1 else ""
            if line == said:
                continue
            said = line
        lines.append({"label": label, "text": line})
        label = ""
    return lines


def _last(labels: list, count: int) -> list:
    """The time labels of the last ``count`` points (a differenced series loses its first ones);
    plain positions when the stored index is shorter (data changed since the analysis)."""
    return labels[len(labels) - count:] if count <= len(labels) else list(range(1, count + 1))


def line_chart(chart_id: str, x: list, y: list, y_title: str, zero_line: bool = False) -> dict:
    return {
        "id": chart_id,
        "figure": line_figure(x, y, y_title, zero_line=zero_line),
        "columns": ["time", y_title],
        "rows": [(t, number(v, 4)) for t, v in zip(x, y)],
    }


def intervention_chart(x: list, y: list[float], analysis: Analysis) -> dict:
    """The series chart with the analysis' interventions marked, and a numbers table that lists
    them beside the values."""
    scale = analysis.transform.name() if analysis.transform.kind != "none" else ""
    marks = {i.position: i for i in analysis.interventions}
    return {
        "id": "series",
        "figure": series_figure(x, y, "value", analysis.interventions, scale),
        "columns": ["time", "value", "intervention", "size" + (f" ({scale})" if scale else ""), "t"],
        "rows": [
            (t, number(v, 4), *((marks[k].kind.words(), number(marks[k].size, 4), f"{marks[k].t_stat:+.1f}")
                                if k in marks else ("", "", "")))
            for k, (t, v) in enumerate(zip(x, y))
        ],
    }


def lag_chart(chart_id: str, correlation: Correlation, period: int | None, y_title: str) -> dict:
    lags = correlation.lags
    marked = seasonal_lags(period, len(lags))
    return {
        "id": chart_id,
        "figure": lag_bar_figure(correlation, marked, y_title),
        "columns": ["lag", y_title, "band ±", "outside band", "seasonal lag"],
        "rows": [
            (k, number(v, 3), number(b, 3), "yes" if abs(v) > b else "", "yes" if k in marked else "")
            for k, v, b in zip(lags, correlation.values, correlation.band)
        ],
        "seasonal_lags": marked,
        "n_lags": len(lags),
    }


def observed_correlograms(prepared: PreparedSeries, analysis: Analysis) -> tuple[Correlation, Correlation]:
    """The ACF and PACF of the series as observed, on the analysis' scale and differencing: what
    the correlograms would show had the interventions been left in (the analysis keeps those of
    the series with them taken out). Same lags and band rule as the analysis' own."""
    model = analysis.suggested.order
    w = difference(apply_transform(prepared.values, analysis.transform), model)
    cg = correlogram(w, len(analysis.acf.lags))
    lags = tuple(int(k) for k in cg.lags)
    return (Correlation(lags, tuple(cg.acf.tolist()), tuple(cg.acf_band.tolist())),
            Correlation(lags, tuple(cg.pacf.tolist()), tuple(cg.pacf_band.tolist())))


def candidate_view(candidate: Candidate, rank: int | str, labels: list, period: int | None,
                   check: dict | None = None) -> dict:
    """One candidate as the table and its detail panel show it (stored or custom-fitted), with
    the MASE of its forecast check when one was run (``check``)."""
    key = str(rank)
    residuals = candidate.residuals
    return {
        **vars(candidate),
        "order": list(candidate.order.order),
        "seasonal_order": list(candidate.order.seasonal_order),
        "rank": rank,
        "key": key,
        "label": candidate.full_label,
        "source_words": source_words(candidate.source),
        "mase": check["mase"] if check else None,
        "fails_ljung_box": fails_ljung_box(candidate),
        "residual_acf_chart": lag_chart(f"resid-acf-{key}", candidate.residual_acf, period, "residual ACF"),
        "residuals_chart": (
            line_chart(f"resid-{key}", _last(labels, len(residuals)), list(residuals), "residual", zero_line=True)
            if residuals else None
        ),
    }


def test_rows(tests: tuple[UnitRootTest, ...]) -> list[dict]:
    """The unit-root and stationarity tests, each with its outcome in words."""
    return [
        {
            **vars(t),
            "on_words": ON_WORDS.get(t.on, t.on),
            "p_text": p_text(t.p_value, t.name) if math.isfinite(t.p_value) else "—",
            "regression_words": REGRESSION_WORDS.get(t.regression, t.regression),
        }
        for t in tests
    ]


def chosen_key(verdict: dict, candidates: list[dict]) -> str:
    """The candidate the form starts on: the verdict's order if it has one, else the suggestion."""
    if verdict["order"] is None:
        return "1"
    for c in candidates:
        if c["order"] == verdict["order"] and c["seasonal_order"] == (verdict["seasonal_order"] or [0, 0, 0, 0]):
            return c["key"]
    return "custom"


def custom_defaults(verdict: dict, analysis: Analysis | None) -> dict:
    """The custom-order fields before anything is typed: the verdict's order, else the suggestion's."""
    if verdict["order"] is not None:
        values = [*verdict["order"], *(verdict["seasonal_order"] or [0, 0, 0, 0])]
    elif analysis is not None:
        values = [*analysis.suggested.order.order, *analysis.suggested.order.seasonal_order]
    else:
        return dict.fromkeys(CUSTOM_FIELDS, "")
    return dict(zip(CUSTOM_FIELDS, values))


def review_page(
    db: sqlite_utils.Database, series_id: str, flt: SeriesFilter, selected: str | None = None, form: FormState | None = None
) -> dict:
    """Everything the review page shows for ``series_id``.

    Raises
    ------
    UnknownSeries
    """
    form = form or FormState()
    verdict = get_verdict(db, series_id)
    raw = load_series(db, series_id)
    if raw is None:
        raise UnknownSeries(series_id)
    analysis = load_analysis(db, series_id)
    record = analysis_record(db, series_id)
    previous_id, next_id = series_neighbours(db, series_id, **flt.store_kwargs())
    try:
        prepared = prepare_series(raw, series_id)
        labels = time_labels(prepared.index)
        observed = raw.reindex(prepared.index).to_numpy()
        preparation_problem = None
    except SeriesProblem as exc:
        labels, observed, preparation_problem = time_labels(raw.index), raw.to_numpy(), str(exc)
    page = {
        "series_id": series_id,
        "filter": flt,
        "previous_id": previous_id,
        "next_id": next_id,
        "verdict": verdict,
        "verdict_words": model_words(verdict),
        "history": [{**h, "model_words": model_words(h)} for h in reversed(verdict_history(db, series_id))],
        "record": record,
        "analysis": analysis,
        "earlier_engine": analysis is not None and analysis.engine_version != ENGINE_VERSION,
        "engine_version": ENGINE_VERSION,
        "preparation_problem": preparation_problem,
        "series_chart": line_chart("series", labels, [float(v) for v in observed], "value"),
        "form": form,
    }
    if analysis is None:
        page.update(candidates=[], selected=None, choice="custom", custom=form.custom or custom_defaults(verdict, None),
                    intervention_choices=intervention_choices(None, verdict, form))
        return page
    observed_acf = observed_pacf = None
    if analysis.interventions and preparation_problem is None:
        page["series_chart"] = intervention_chart(labels, [float(v) for v in observed], analysis)
        observed_acf, observed_pacf = observed_correlograms(prepared, analysis)
    period = analysis.marked_period
    identified = list(analysis.identified_on)
    checks = remembered_checks(db, series_id, analysis)
    candidates = [candidate_view(c, i + 1, labels, period, checks.get(c.order)) for i, c in enumerate(analysis.candidates)]
    choice = form.choice or chosen_key(verdict, candidates)
    keys = [c["key"] for c in candidates]
    page.update(
        # Nothing to show beyond the series chart when the model was identified on the series itself.
        identified_chart=(
            line_chart("identified", _last(labels, len(identified)), identified, "value")
            if analysis.is_transformed_or_differenced else None
        ),
        frequency_words=frequency_words(analysis.freq),
        span=span_words(analysis, raw.index),
        transform_lines=transform_lines(analysis.transform.explanation),
        acf_chart=lag_chart("acf", analysis.acf, period, "ACF"),
        pacf_chart=lag_chart("pacf", analysis.pacf, period, "PACF"),
        observed_acf_chart=lag_chart("acf-observed", observed_acf, period, "ACF") if observed_acf else None,
        observed_pacf_chart=lag_chart("pacf-observed", observed_pacf, period, "PACF") if observed_pacf else None,
        intervention_choices=intervention_choices(analysis, verdict, form),
        tests=test_rows(analysis.differencing.tests),
        candidates=candidates,
        choice=choice,
        selected=selected if selected in keys else (choice if choice in keys else "1"),
        custom=form.custom or custom_defaults(verdict, analysis),
        pattern_bonus=PATTERN_BONUS,
        tie_margin=TIE_MARGIN,
    )
    return page


def custom_fit_view(db: sqlite_utils.Database, series_id: str, fit: CustomFit, model_query: str = "") -> dict:
    """A custom-fitted order as a candidate view, on the same time axis as the stored ones, with
    the interventions taken out for it; ``model_query`` carries its transform, constant and
    interventions to its forecast check."""
    raw = load_series(db, series_id)
    labels = time_labels(prepare_series(raw, series_id).index)
    analysis = load_analysis(db, series_id)
    return {
        **candidate_view(fit.candidate, "custom", labels, analysis.marked_period if analysis else None),
        "interventions": list(fit.interventions),
        "interventions_chosen": fit.chosen,
        "model_query": model_query,
    }


def intervention_choices(analysis: Analysis | None, verdict: dict, form: FormState) -> list[dict]:
    """The interventions the decision form offers to keep or drop, each ``{value, words,
    checked}``: the analysis' own, the verdict's, and those of the form being redrawn.

    Ticked are those of the custom fit just made, else those the form sent, else the
    verdict's own choice, else the analysis' own.
    """
    known: dict[str, str] = {}

    def add(found: Intervention) -> str:
        value = intervention_value(found.timestamp, str(found.kind))
        known.setdefault(value, found.words())
        return value

    own = {add(i) for i in analysis.interventions} if analysis else set()
    decided = {add(Intervention.from_dict(i)) for i in verdict["interventions"]} if verdict.get("interventions") is not None else None
    fitted = form.custom_fit.get("interventions") if form.custom_fit else None
    from_fit = {add(i) for i in fitted} if fitted is not None else None
    sent = set(form.custom.get("interventions", ())) if form.custom.get("interventions_shown") else None
    for value in sorted(sent or ()):
        timestamp, _, kind = value.rpartition(INTERVENTION_SEPARATOR)
        known.setdefault(value, f"{_kind_words(kind)} at {timestamp}")
    ticked = next(chosen for chosen in (from_fit, sent, decided, own) if chosen is not None)
    return [{"value": value, "words": words, "checked": value in ticked} for value, words in known.items()]


def _kind_words(kind: str) -> str:
    try:
        return InterventionKind(kind).words()
    except ValueError:
        return kind
