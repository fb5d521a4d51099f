"""What the portfolio holds, in numbers (``lagdesk status`` and the dashboard header)."""

from __future__ import annotations

import sqlite_utils

from app.store.analyses import ANALYSIS_STATE_SQL
from app.store.verdicts import verdict_counts


def portfolio_status(db: sqlite_utils.Database) -> dict:
    """``{"series", "analysed", "stale", "failed", "verdicts": {status: n}}``.

    ``analysed`` counts series with a complete analysis of their current data, ``stale`` those
    whose analysis is missing or out of date, ``failed`` those whose current data failed.
    """
    series, analysed, stale, failed = db.execute(
        "SELECT count(*), coalesce(sum(state = 'current'), 0), coalesce(sum(state IN ('missing', 'stale')), 0), "
        "coalesce(sum(state = 'failed'), 0) "
        f"FROM (SELECT {ANALYSIS_STATE_SQL} AS state FROM series s LEFT JOIN analyses a ON a.series_id = s.series_id)"
    ).fetchone()
    return {"series": series, "analysed": analysed, "stale": stale, "failed": failed, "verdicts": verdict_counts(db)}
