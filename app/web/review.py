"""The review page of one series, as a plain dict for its template.

The page shows the series, the series the model was identified on, the differencing tests in
words, the ACF and PACF, the candidates with their statistics, the selected candidate's
residuals, the decision form and the verdict history. Each chart comes with its numbers as a
table.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import pandas as pd
import sqlite_utils

from app.core.errors import SeriesProblem
from app.core.prepare import prepare_series
from app.core.seasonality import seasonal_lags
from app.store.analyses import analysis_record, load_analysis
from app.store.series import load_series, series_neighbours
from app.store.verdicts import get_verdict, verdict_history
from app.web.charts import lag_bar_figure, line_figure
from app.web.queue import QueueFilter
from app.web.templating import number, order_label, p_value

ON_WORDS = {"levels": "the series as observed", "diff1": "the first difference", "diff2": "the second difference"}
REGRESSION_WORDS = {"c": "around a constant", "ct": "around a linear trend"}
TEST_LEVEL = "5%"
CUSTOM_FIELDS = ("p", "d", "q", "P", "D", "Q", "s")


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
    """Timestamps as the charts and tables show them (dates without a midnight time)."""
    if isinstance(index, pd.DatetimeIndex):
        midnight = bool((index == index.normalize()).all())
        return list(index.strftime("%Y-%m-%d" if midnight else "%Y-%m-%d %H:%M"))
    return [int(v) for v in index]


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


def lag_chart(chart_id: str, correlation: dict, period: int | None, y_title: str) -> dict:
    lags = correlation["lags"]
    marked = seasonal_lags(period, len(lags))
    return {
        "id": chart_id,
        "figure": lag_bar_figure(correlation, marked, y_title),
        "columns": ["lag", y_title, "band ±", "outside band", "seasonal lag"],
        "rows": [
            (k, number(v, 3), number(b, 3), "yes" if abs(v) > b else "", "yes" if k in marked else "")
            for k, v, b in zip(lags, correlation["values"], correlation["band"])
        ],
        "seasonal_lags": marked,
        "n_lags": len(lags),
    }


def candidate_view(candidate: dict, rank: int | str, labels: list, period: int | None, delta_aicc: float | None) -> dict:
    """One candidate as the table and its detail panel show it (stored or custom-fitted)."""
    residuals = candidate.get("residuals")
    key = str(rank)
    return {
        **candidate,
        "rank": rank,
        "key": key,
        "label": order_label(candidate["order"], candidate["seasonal_order"]),
        "delta_aicc": delta_aicc,
        "residual_acf_chart": lag_chart(f"resid-acf-{key}", candidate["residual_acf"], period, "residual ACF"),
        "residuals_chart": (
            line_chart(f"resid-{key}", _last(labels, len(residuals)), residuals, "residual", zero_line=True)
            if residuals else None
        ),
    }


def _deltas(candidates: list[dict]) -> list[float | None]:
    """AICc minus the smallest AICc among candidates of the same differencing (d, D, s)."""
    def group(c: dict) -> tuple:
        return (c["order"][1], *c["seasonal_order"][1:])

    best: dict[tuple, float] = {}
    for c in candidates:
        best[group(c)] = min(best.get(group(c), c["aicc"]), c["aicc"])
    return [c["aicc"] - best[group(c)] for c in candidates]


def test_rows(tests: list[dict]) -> list[dict]:
    """The unit-root and stationarity tests, each with its outcome in words."""
    rows = []
    for t in tests:
        null = t.get("null", "")
        verb = "rejects" if t["rejects"] else "does not reject"
        rows.append({
            **t,
            "on_words": ON_WORDS.get(t["on"], t["on"]),
            "regression_words": REGRESSION_WORDS.get(t["regression"], t["regression"]),
            "sentence": f"{t['name']} {verb} {null} at {TEST_LEVEL} (p = {p_value(t['p_value'])}).",
        })
    return rows


def chosen_key(verdict: dict, candidates: list[dict]) -> str:
    """The candidate the form starts on: the verdict's order if it has one, else the suggestion."""
    if verdict["order"] is None:
        return "1"
    for c in candidates:
        if list(c["order"]) == verdict["order"] and list(c["seasonal_order"]) == (verdict["seasonal_order"] or [0, 0, 0, 0]):
            return c["key"]
    return "custom"


def custom_defaults(verdict: dict, analysis: dict | None) -> dict:
    """The custom-order fields before anything is typed: the verdict's order, else the suggestion's."""
    source = verdict if verdict["order"] is not None else (analysis or {}).get("suggested")
    if not source:
        return dict.fromkeys(CUSTOM_FIELDS, "")
    seasonal = source.get("seasonal_order") or [0, 0, 0, 0]
    return dict(zip(CUSTOM_FIELDS, [*source["order"], *seasonal]))


def marked_period(analysis: dict) -> int | None:
    """The seasonal period whose lags the charts mark: the model's, else the one the engine
    examined (a series can have a season the model did not need terms for)."""
    return analysis.get("period") or (analysis.get("seasonal") or {}).get("examined_period")


def review_page(
    db: sqlite_utils.Database, series_id: str, flt: QueueFilter, selected: str | None = None, form: FormState | None = None
) -> dict:
    """Everything the review page shows for ``series_id``.

    Raises
    ------
    UnknownSeries
    """
    form = form or FormState()
    verdict = get_verdict(db, series_id)
    raw = load_series(db, series_id)
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
        "history": list(reversed(verdict_history(db, series_id))),
        "record": record,
        "analysis": analysis,
        "preparation_problem": preparation_problem,
        "series_chart": line_chart("series", labels, [float(v) for v in observed], "value"),
        "form": form,
    }
    if analysis is None:
        page.update(candidates=[], selected=None, choice="custom", custom=form.custom or custom_defaults(verdict, None))
        return page
    period = marked_period(analysis)
    identified = analysis["identified_on"]["values"]
    candidates = [
        candidate_view(c, i + 1, labels, period, delta)
        for i, (c, delta) in enumerate(zip(analysis["candidates"], _deltas(analysis["candidates"])))
    ]
    choice = form.choice or chosen_key(verdict, candidates)
    keys = [c["key"] for c in candidates]
    page.update(
        # Nothing to show beyond the series chart when the model was identified on the series itself.
        identified_chart=(
            line_chart("identified", _last(labels, len(identified)), identified, "value")
            if analysis["d"] or analysis.get("D") or analysis.get("transform", "none") != "none" else None
        ),
        acf_chart=lag_chart("acf", analysis["acf"], period, "ACF"),
        pacf_chart=lag_chart("pacf", analysis["pacf"], period, "PACF"),
        tests=test_rows(analysis["differencing"]["tests"]),
        candidates=candidates,
        choice=choice,
        selected=selected if selected in keys else (choice if choice in keys else "1"),
        custom=form.custom or custom_defaults(verdict, analysis),
    )
    return page


def custom_fit_view(db: sqlite_utils.Database, series_id: str, fit: dict) -> dict:
    """A custom-fitted order as a candidate view, on the same time axis as the stored ones."""
    raw = load_series(db, series_id)
    labels = time_labels(prepare_series(raw, series_id).index)
    analysis = load_analysis(db, series_id)
    return candidate_view(fit, "custom", labels, marked_period(analysis) if analysis else None, fit.get("delta_aicc"))
