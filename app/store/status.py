"""What the portfolio holds, in numbers (``lagdesk status``, the demo's summary and
``GET /api/portfolio``), and which series could not be analysed and why."""

from __future__ import annotations

import sqlite_utils

from app.core.engine_version import ENGINE_VERSION
from app.store.analyses import ANALYSIS_STATE_SQL, EARLIER_ENGINE_SQL, failed_analyses
from app.store.series import confidence_counts, problem_reason, refused_updates, rejected_series
from app.store.verdicts import verdict_counts

# Where a series stopped short of an analysis: refused by the import, or failed in the engine.
IMPORT_STAGE = "import"
ANALYSIS_STAGE = "analysis"


def portfolio_status(db: sqlite_utils.Database) -> dict:
    """``{"series", "analysed", "stale", "failed", "earlier_engine", "rejected", "confidence":
    {level: n}, "verdicts": {status: n}, "not_analysed": [...], "refused_updates": [...]}``.

    ``analysed`` counts series with a complete analysis of their current data, ``stale`` those
    whose analysis is missing or out of date, ``failed`` those whose current data failed;
    ``earlier_engine`` those of the analysed and failed that an earlier engine made, which the
    next ``lagdesk analyze`` analyses again (:data:`~app.store.analyses.EARLIER_ENGINE_SQL`);
    ``rejected`` the series an import refused (not stored, so not in ``series``);
    ``confidence`` the stored analyses by level, weakest first. ``not_analysed`` is
    :func:`not_analysed`; ``refused_updates`` the stored series whose new data a later import
    refused (:func:`~app.store.series.refused_updates`: they keep their earlier data), each
    ``{"series_id", "reason", "file", "line"}`` (``line`` None when the reason names none).
    """
    series, analysed, stale, failed, earlier = db.execute(
        "SELECT count(*), coalesce(sum(state = 'current'), 0), coalesce(sum(state IN ('missing', 'stale')), 0), "
        "coalesce(sum(state = 'failed'), 0), coalesce(sum(state IN ('current', 'failed') AND earlier), 0) "
        f"FROM (SELECT {ANALYSIS_STATE_SQL} AS state, {EARLIER_ENGINE_SQL} AS earlier "
        "FROM series s LEFT JOIN analyses a ON a.series_id = s.series_id)", [ENGINE_VERSION]
    ).fetchone()
    missing = not_analysed(db)
    return {
        "series": series, "analysed": analysed, "stale": stale, "failed": failed, "earlier_engine": earlier,
        "rejected": sum(m["stage"] == IMPORT_STAGE for m in missing),
        "confidence": confidence_counts(db), "verdicts": verdict_counts(db), "not_analysed": missing,
        "refused_updates": [{"series_id": r["series_id"], "reason": r["reason"], "file": r["file"], "line": r["line"]}
                            for r in refused_updates(db)],
    }


def not_analysed(db: sqlite_utils.Database) -> list[dict]:
    """Every series that has no analysis to review and why: ``{"series_id", "stage", "reason"}``,
    first those the import rejected (``stage`` ``import``: too short, constant ...), then those
    whose analysis failed on their current data (``analysis``), each by id; ``reason`` without
    the series id the stored message starts with (:func:`~app.store.series.problem_reason`)."""
    return [
        {"series_id": r["series_id"], "stage": IMPORT_STAGE, "reason": r["reason"]} for r in rejected_series(db)
    ] + [
        {"series_id": f["series_id"], "stage": ANALYSIS_STAGE, "reason": problem_reason(f["series_id"], f["message"])}
        for f in failed_analyses(db)
    ]
