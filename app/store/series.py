"""Reading series back: one series' observations, what needs analysing, the dashboard list.

The list is filtered, sorted and paged in SQL over ``series``, ``verdicts`` and ``analyses``
(one row each per series), so a page of a 10,000-series portfolio never loads the rest.
"""

from __future__ import annotations

import json
from collections.abc import Iterable
from typing import TYPE_CHECKING, Any

import sqlite_utils

from app.core.engine_version import ENGINE_VERSION
from app.core.errors import LagdeskError, SeriesProblem
from app.core.vocabulary import AWAITING, NOT_FIRM_FLAGS, WEAK_FLAGS, WORDED_DOUBT_FLAGS, Confidence, Flag
from app.store.analyses import ANALYSIS_STATE_SQL, EARLIER_ENGINE_SQL
from app.store.database import UnknownSeries, prefix_match
from app.store.verdicts import STATUSES, verdict_counts

if TYPE_CHECKING:
    import pandas as pd

# Weakest first: the order the queue sorts and counts confidence levels in.
CONFIDENCE_LEVELS = tuple(str(c) for c in reversed(Confidence))

_FROM = (
    "FROM series s JOIN verdicts v ON v.series_id = s.series_id "
    "LEFT JOIN analyses a ON a.series_id = s.series_id"
)
# The columns of the suggested model in ``analyses a``, as :func:`_suggested` reads them.
_SUGGESTED_COLUMNS = "a.suggested_order, a.suggested_seasonal_order, a.transform, a.suggested_trend, a.interventions"

# How much a flag weighs in the attention order: 3 for a flag that makes a suggestion weak (a
# residual failure, non-convergence, cancelling roots, a short series), 2 for one that keeps it
# from firm (differencing in doubt, a long gap, an outlier, intermittent demand), 1 for the rest
# (gaps filled, too few seasons, transformed), which say how the series was read, not a doubt.
FLAG_SEVERITY: dict[str, int] = {
    str(flag): 3 if flag in WEAK_FLAGS
    else 2 if flag in NOT_FIRM_FLAGS | WORDED_DOUBT_FLAGS
    else 1
    for flag in Flag
}


def _severity_sql() -> str:
    """The weight of a row's most severe flag (0 without flags): a search of the flags' JSON text
    for each quoted name, which costs far less per row than unpacking the array with json_each."""
    tiers = sorted(set(FLAG_SEVERITY.values()), reverse=True)
    cases = " ".join(
        "WHEN " + " OR ".join(f"instr(a.flags, '\"{flag}\"')" for flag, w in FLAG_SEVERITY.items() if w == weight)
        + f" THEN {weight}"
        for weight in tiers
    )
    return f"(CASE {cases} ELSE 0 END)"


# What needs a human first: a recheck, then pending, parked, decided; within each, a failed or
# weak analysis before a tentative, then a firm one, then none yet; within those, the most severe
# flag first (FLAG_SEVERITY), then more flags first.
_STATUS_TIER_SQL = "CASE v.status WHEN 'recheck' THEN 4 WHEN 'pending' THEN 3 WHEN 'parked' THEN 2 ELSE 1 END"
_DOUBT_SQL = (
    "CASE WHEN a.state = 'failed' THEN 3 WHEN a.confidence = 'weak' THEN 3 "
    "WHEN a.confidence = 'tentative' THEN 2 WHEN a.confidence = 'firm' THEN 1 ELSE 0 END"
)
MAX_COUNTED_FLAGS = 9
ATTENTION_SQL = (
    f"({_STATUS_TIER_SQL}) * 100 + ({_DOUBT_SQL}) * 10 + {_severity_sql()} "
    f"+ min(json_array_length(coalesce(a.flags, '[]')), {MAX_COUNTED_FLAGS}) / 10.0"
)


def _rank_sql(column: str, levels: tuple[str, ...]) -> str:
    """Order text values by their position in ``levels``; others (and NULL) after them."""
    cases = " ".join(f"WHEN '{level}' THEN {i}" for i, level in enumerate(levels))
    return f"CASE {column} {cases} ELSE {len(levels)} END"


# Each sort key's natural order, as (SQL expression, ascending) terms; series_id breaks ties.
SORT_KEYS: dict[str, list[tuple[str, bool]]] = {
    "attention": [(ATTENTION_SQL, False)],
    "series_id": [],
    "n": [("s.n", True)],
    "confidence": [(_rank_sql("a.confidence", CONFIDENCE_LEVELS), True)],
    "status": [(_rank_sql("v.status", STATUSES), True)],
    "order": [("a.suggested_order IS NULL", True)]
    + [(f"json_extract(a.suggested_order, '$[{i}]')", True) for i in range(3)]
    + [(f"json_extract(a.suggested_seasonal_order, '$[{i}]')", True) for i in (3, 0, 1, 2)],
    "reviewer": [("v.reviewer = ''", True), ("v.reviewer COLLATE NOCASE", True)],
}


def load_series(db: sqlite_utils.Database, series_id: str) -> pd.Series | None:
    """The merged raw observations of a series in time order, or None if there is no such series."""
    import pandas as pd  # here, not above: reading counts (``lagdesk status``) needs no pandas

    from app.store.timestamps import index_from_keys

    kind = db.execute("SELECT time_kind FROM series WHERE series_id = ?", [series_id]).fetchone()
    if kind is None:
        return None
    rows = db.execute("SELECT ts, value FROM observations WHERE series_id = ? ORDER BY ts", [series_id]).fetchall()
    keys = [ts for ts, _ in rows]
    return pd.Series([value for _, value in rows], index=index_from_keys(keys, kind[0]), name=series_id, dtype=float)


def series_values(db: sqlite_utils.Database, series_id: str) -> list[float]:
    """The raw observed values of a series in time order, without their timestamps (empty for
    no such series): what a sparkline draws, without the cost of reading the time index."""
    rows = db.execute("SELECT value FROM observations WHERE series_id = ? ORDER BY ts", [series_id])
    return [value for (value,) in rows]


def get_series(db: sqlite_utils.Database, series_id: str) -> dict | None:
    """What the database holds about a series besides its values, or None.

    ``{"series_id", "time_kind", "freq", "n", "observed", "gaps_filled", "start", "end",
    "prep_flags", "fingerprint", "created_import_id", "updated_import_id"}``; ``n`` counts the
    points on the regular grid, ``observed`` the stored observations.
    """
    rows = list(db.query(
        "SELECT series_id, time_kind, freq, n, observed, gaps_filled, first_timestamp AS start, "
        "last_timestamp AS end, prep_flags, fingerprint, created_import_id, updated_import_id "
        "FROM series WHERE series_id = ?",
        [series_id],
    ))
    if not rows:
        return None
    row = rows[0]
    row["prep_flags"] = json.loads(row["prep_flags"])
    return row


def series_fingerprint(db: sqlite_utils.Database, series_id: str) -> str | None:
    """The fingerprint of the series' current data.

    A job should read it *before* :func:`load_series`: if an import lands in between, the
    analysis is then stored under the older fingerprint and shows as stale, never the reverse.
    """
    row = db.execute("SELECT fingerprint FROM series WHERE series_id = ?", [series_id]).fetchone()
    return None if row is None else row[0]


def series_sizes(db: sqlite_utils.Database) -> dict[str, tuple[int, str]]:
    """Every stored series' length (time points, gaps included) and sampling frequency, by id."""
    return {series_id: (n, freq) for series_id, n, freq in db.execute("SELECT series_id, n, freq FROM series")}


def series_ids_to_analyse(db: sqlite_utils.Database, everything: bool = False) -> list[str]:
    """Series whose analysis is missing or stale or was made by an earlier engine (or every
    series), by id.

    A failure on the current data is not retried unless ``everything`` is set or an earlier
    engine failed: the same data and engine would fail the same way.
    """
    where, params = ("", []) if everything else (
        f"WHERE {ANALYSIS_STATE_SQL} IN ('missing', 'stale') OR {EARLIER_ENGINE_SQL}", [ENGINE_VERSION])
    rows = db.execute(
        f"SELECT s.series_id FROM series s LEFT JOIN analyses a ON a.series_id = s.series_id {where} "
        "ORDER BY s.series_id", params
    ).fetchall()
    return [series_id for (series_id,) in rows]


def _where(
    status: str | Iterable[str] | None, confidence: str | Iterable[str] | None, flag: str | None, q: str | None,
    prefix: str | None = None,
) -> tuple[str, list]:
    clauses: list[str] = []
    params: list = []
    for column, chosen, allowed, name in (
        ("v.status", status, STATUSES, "status"),
        ("a.confidence", confidence, CONFIDENCE_LEVELS, "confidence"),
    ):
        if chosen is None:
            continue
        values = [chosen] if isinstance(chosen, str) else list(chosen)
        unknown = [v for v in values if v not in allowed]
        if unknown:
            raise LagdeskError(f"{name} must be one of {', '.join(allowed)}, not {unknown[0]!r}")
        if values:
            clauses.append(f"{column} IN ({', '.join('?' for _ in values)})")
            params.extend(values)
    if flag:
        clauses.append("EXISTS (SELECT 1 FROM json_each(a.flags) WHERE json_each.value = ?)")
        params.append(flag)
    if q:
        clauses.append("instr(lower(s.series_id), lower(?)) > 0")
        params.append(q)
    if prefix:
        clause, values = prefix_match("s.series_id", prefix)
        clauses.append(clause)
        params.extend(values)
    return ("WHERE " + " AND ".join(clauses)) if clauses else "", params


def _order_by(sort: str, descending: bool) -> str:
    if sort not in SORT_KEYS:
        raise LagdeskError(f"sort must be one of {', '.join(SORT_KEYS)}, not {sort!r}")
    terms = [f"{expr} {'ASC' if ascending != descending else 'DESC'}" for expr, ascending in SORT_KEYS[sort]]
    tie_break = "s.series_id DESC" if descending and sort == "series_id" else "s.series_id ASC"
    return "ORDER BY " + ", ".join(terms + [tie_break])


def list_series(
    db: sqlite_utils.Database,
    *,
    limit: int = 50,
    offset: int = 0,
    status: str | Iterable[str] | None = None,
    confidence: str | Iterable[str] | None = None,
    flag: str | None = None,
    q: str | None = None,
    prefix: str | None = None,
    sort: str = "attention",
    descending: bool = False,
) -> tuple[int, list[dict]]:
    """One page of the portfolio, filtered and sorted, with the size of the whole filtered set.

    Parameters
    ----------
    status, confidence : str or list of str, optional
        Keep series with one of these verdict statuses / analysis confidences.
    flag : str, optional
        Keep series whose analysis carries this flag.
    q : str, optional
        Keep series whose id contains this text (ignoring ASCII case).
    prefix : str, optional
        Keep series whose id starts with this text (``bakery/shop-3/``).
    sort : str
        A key of :data:`SORT_KEYS`. ``attention`` (the default) puts what needs a human first;
        the others sort ascending. ``descending`` reverses the chosen order.

    Returns
    -------
    total : int
        How many series pass the filters.
    items : list of dict
        ``{"series_id", "n", "freq", "status", "confidence", "main_reason", "suggested":
        {"order", "seasonal_order", "transform", "trend", "interventions"}, "chosen": {"order",
        "seasonal_order"}, "flags", "reviewer", "analysis_state", "analysis_message", "attention",
        "recheck_reason"}``; ``suggested`` is the model :func:`_suggested` reads; ``main_reason``
        is the first confidence reason in the engine's words (None for a series not analysed, or
        analysed by a version that gave no reasons); ``analysis_message`` why the analysis of the
        current data failed (:func:`problem_reason`; None unless ``analysis_state`` is
        ``failed``). Series an import
        rejected are not stored, so not listed: :func:`rejected_series` lists them.
    """
    if limit < 0 or offset < 0:
        raise LagdeskError(f"limit ({limit}) and offset ({offset}) must be >= 0")
    where, params = _where(status, confidence, flag, q, prefix)
    total = db.execute(f"SELECT count(*) {_FROM} {where}", params).fetchone()[0]
    rows = db.query(
        f"SELECT s.series_id, s.n, s.freq, v.status, a.confidence, a.main_reason, {_SUGGESTED_COLUMNS}, "
        f"v.arima_order, v.seasonal_order, coalesce(a.flags, '[]') AS flags, v.reviewer, "
        f"{ANALYSIS_STATE_SQL} AS analysis_state, CASE WHEN {ANALYSIS_STATE_SQL} = 'failed' THEN a.message END AS analysis_message, "
        f"{ATTENTION_SQL} AS attention, v.recheck_reason "
        f"{_FROM} {where} {_order_by(sort, descending)} LIMIT ? OFFSET ?",
        params + [limit, offset],
    )
    return total, [_item(row) for row in rows]


def suggested_models(db: sqlite_utils.Database, series_ids: Iterable[str]) -> dict[str, dict]:
    """The suggested model (:func:`_suggested`) of each of ``series_ids`` with a stored analysis
    (current, stale or failed), by id: what a :func:`list_series` item carries as ``suggested``."""
    rows = db.query(
        f"SELECT a.series_id, {_SUGGESTED_COLUMNS} FROM analyses a WHERE a.series_id IN (SELECT value FROM json_each(?))",
        [json.dumps(list(series_ids))],
    )
    return {row["series_id"]: _suggested(row) for row in rows}


def _loads(text: str | None) -> Any:
    return None if text is None else json.loads(text)


def _suggested(row: dict) -> dict:
    """The suggested model from the :data:`_SUGGESTED_COLUMNS` of a row: ``{"order",
    "seasonal_order", "transform", "trend", "interventions"}``, each None without a complete
    analysis. ``transform`` is ``"none"``, ``"log"`` or ``{"box_cox": lambda}``, ``trend`` the
    deterministic term (``n``, ``c`` a mean, ``t`` a drift, ``ct``), ``interventions`` the list
    the analysis takes out with the model (``{"position", "timestamp", "kind", "size",
    "t_stat"}`` each); the last three are None (unknown) for an analysis stored before they were
    listed whose result does not hold them (:func:`app.store.migrations.analysis_suggested_model`)."""
    return {
        "order": _loads(row["suggested_order"]),
        "seasonal_order": _loads(row["suggested_seasonal_order"]),
        "transform": _loads(row["transform"]),
        "trend": row["suggested_trend"],
        "interventions": _loads(row["interventions"]),
    }


def _item(row: dict) -> dict:
    return {
        "series_id": row["series_id"],
        "n": row["n"],
        "freq": row["freq"],
        "status": row["status"],
        "confidence": row["confidence"],
        "main_reason": row["main_reason"],
        "suggested": _suggested(row),
        "chosen": {"order": _loads(row["arima_order"]), "seasonal_order": _loads(row["seasonal_order"])},
        "flags": json.loads(row["flags"]),
        "reviewer": row["reviewer"],
        "analysis_state": row["analysis_state"],
        "analysis_message": problem_reason(row["series_id"], row["analysis_message"]) if row["analysis_message"] else None,
        "attention": float(row["attention"]),
        "recheck_reason": row["recheck_reason"],
    }


# Each series' newest rejection by an import, with that import's id, file and time.
_NEWEST_REJECTIONS = (
    "WITH rejections AS (SELECT json_extract(j.value, '$.series_id') AS series_id, j.value AS rejection, i.import_id, "
    "i.file, i.imported_at, row_number() OVER (PARTITION BY json_extract(j.value, '$.series_id') ORDER BY i.import_id "
    "DESC) AS newest FROM imports i, json_each(i.rejected) j) "
)


def rejected_series(db: sqlite_utils.Database, *, q: str | None = None, prefix: str | None = None) -> list[dict]:
    """The series an import rejected (too short, constant, unreadable ...) that no import stored
    since, by id: each with the reason its latest rejection gave.

    ``q`` and ``prefix`` keep ids as in :func:`list_series`. Such a series has no observations,
    analysis or verdict in the database; an import that stores it takes it off this list.

    Returns
    -------
    list of dict
        ``{"series_id", "reason", "flag", "line", "file", "imported_at"}``: ``reason`` in words
        without the series id, ``flag`` the machine-readable reason (``too_short``,
        ``constant`` ...), ``line`` the file line named (or None), ``file`` and ``imported_at``
        those of the import that rejected it.
    """
    return _newest_rejections(db, "NOT EXISTS (SELECT 1 FROM series stored WHERE stored.series_id = s.series_id)", q, prefix)


def refused_updates(db: sqlite_utils.Database, *, q: str | None = None, prefix: str | None = None) -> list[dict]:
    """The stored series whose new data an import refused after the import that last stored
    theirs: they keep their earlier data and its analysis (a decided order goes to ``recheck``,
    :mod:`app.store.imports`). Items as :func:`rejected_series`'s; an import that stores the
    series again takes it off."""
    return _newest_rejections(db, "s.import_id > (SELECT coalesce(stored.updated_import_id, stored.created_import_id) "
                                  "FROM series stored WHERE stored.series_id = s.series_id)", q, prefix)


def _newest_rejections(db: sqlite_utils.Database, condition: str, q: str | None, prefix: str | None) -> list[dict]:
    """Each series' newest rejection that meets ``condition`` (SQL on ``s``), by id."""
    where, params = _where(None, None, None, q, prefix)
    ids = f" AND {where.removeprefix('WHERE ')}" if where else ""
    rows = db.execute(
        f"{_NEWEST_REJECTIONS}SELECT s.rejection, s.file, s.imported_at FROM rejections s "
        f"WHERE s.newest = 1 AND {condition}{ids} ORDER BY s.series_id",
        params,
    ).fetchall()
    return [_rejected_item(json.loads(rejection), file, imported_at) for rejection, file, imported_at in rows]


def unknown_series(db: sqlite_utils.Database, series_id: str) -> UnknownSeries:
    """The error for a series the database does not hold, saying so when an import rejected it
    (its file and reason, :func:`rejected_series`)."""
    rejection = next((r for r in rejected_series(db, q=series_id) if r["series_id"] == series_id), None)
    if rejection is None:
        return UnknownSeries(series_id)
    return UnknownSeries(series_id, f"the import of {rejection['file']} rejected it ({rejection['reason']}); "
                                    "correct the data and import the file again")

def problem_reason(series_id: str, message: str, line: int | None = None) -> str:
    """A stored problem's message (an import's rejection, a failed analysis) without the series
    id and line it starts with, as every :class:`~app.core.errors.SeriesProblem`'s does (twice
    when the engine's own message named the series too): for a row that names the series."""
    head = str(SeriesProblem(series_id, "", line))
    while message.startswith(head):
        message = message.removeprefix(head)
    return message


def _rejected_item(rejection: dict, file: str, imported_at: str) -> dict:
    return {
        "series_id": rejection["series_id"],
        "reason": problem_reason(rejection["series_id"], rejection["message"], rejection.get("row")),
        "flag": rejection.get("flag"),
        "line": rejection.get("row"),
        "file": file,
        "imported_at": imported_at,
    }


def _ordered(
    status: str | Iterable[str] | None = None,
    confidence: str | Iterable[str] | None = None,
    flag: str | None = None,
    q: str | None = None,
    prefix: str | None = None,
    sort: str = "attention",
    descending: bool = False,
) -> tuple[str, list]:
    """The list with these filters and sort as a common table ``ordered``: each series' id,
    verdict status, place in the list and the ids before and after it; and its parameters."""
    where, params = _where(status, confidence, flag, q, prefix)
    return (
        "WITH ordered AS (SELECT s.series_id, v.status, row_number() OVER w AS place, lag(s.series_id) OVER w AS prev, "
        f"lead(s.series_id) OVER w AS next {_FROM} {where} WINDOW w AS ({_order_by(sort, descending)})) ",
        params,
    )


def series_neighbours(db: sqlite_utils.Database, series_id: str, **filters: Any) -> tuple[str | None, str | None]:
    """The series before and after ``series_id`` in the list with the ``filters`` and sort of
    :func:`list_series`. Both are None when ``series_id`` does not pass the filters."""
    ordered, params = _ordered(**filters)
    row = db.execute(ordered + "SELECT prev, next FROM ordered WHERE series_id = ?", params + [series_id]).fetchone()
    return (None, None) if row is None else (row[0], row[1])


def next_awaiting(db: sqlite_utils.Database, series_id: str, **filters: Any) -> str | None:
    """The first series after ``series_id`` in the list with the ``filters`` and sort of
    :func:`list_series` whose verdict awaits a decision (:data:`app.core.vocabulary.AWAITING`);
    None when there is none or ``series_id`` does not pass the filters."""
    ordered, params = _ordered(**filters)
    row = db.execute(
        ordered + f"SELECT series_id FROM ordered WHERE status IN ({', '.join('?' for _ in AWAITING)}) "
        "AND place > (SELECT place FROM ordered WHERE series_id = ?) ORDER BY place LIMIT 1",
        params + [str(status) for status in AWAITING] + [series_id],
    ).fetchone()
    return None if row is None else row[0]


# Separates the parts of a structured series id (company/site/channel).
ID_SEPARATOR = "/"
GROUP_COUNTS = ("total", "pending", *reversed(CONFIDENCE_LEVELS), "decided", "parked", "recheck")


def id_group(series_id: str, depth: int) -> str:
    """The group of a series at ``depth``: its id's first ``depth`` parts and the separator
    (``bakery/shop-3/`` at depth 2), or the whole id when it has no more parts than that."""
    parts = series_id.split(ID_SEPARATOR, depth)
    return series_id if len(parts) <= depth else series_id[: len(series_id) - len(parts[-1])]


def group_counts(db: sqlite_utils.Database, depth: int, prefix: str | None = None) -> list[dict]:
    """Counts per id group at ``depth`` (see :func:`id_group`), of the series under ``prefix``.

    Returns ``[{"prefix", "total", "pending", "weak", "tentative", "firm", "decided", "parked",
    "recheck"}]`` by prefix: ``weak``, ``tentative`` and ``firm`` count the pending series of
    that confidence (what is left to review), ``decided`` the approved, overridden and not_arima ones.

    Raises
    ------
    LagdeskError
        When ``depth`` is below 1.
    """
    if depth < 1:
        raise LagdeskError(f"depth ({depth}) must be at least 1")
    # verdicts holds one row per series: the series table is not needed to count them.
    where, params = prefix_match("v.series_id", prefix)
    groups: dict[str, dict] = {}
    for series_id, status, confidence in db.execute(
        f"SELECT v.series_id, v.status, a.confidence FROM verdicts v LEFT JOIN analyses a ON a.series_id = v.series_id WHERE {where}",
        params,
    ):
        group = id_group(series_id, depth)
        counts = groups.get(group)
        if counts is None:
            counts = groups[group] = dict.fromkeys(GROUP_COUNTS, 0)
        counts["total"] += 1
        if status == "pending":
            counts["pending"] += 1
            if confidence in counts:
                counts[confidence] += 1
        elif status in ("approved", "overridden", "not_arima"):
            counts["decided"] += 1
        else:
            counts[status] += 1
    return [{"prefix": group, **counts} for group, counts in sorted(groups.items())]


def flags_present(db: sqlite_utils.Database) -> dict[str, int]:
    """How many stored analyses carry each flag, for the flags that occur, by flag name."""
    return dict(db.execute(
        "SELECT json_each.value, count(*) FROM analyses, json_each(analyses.flags) "
        "GROUP BY json_each.value ORDER BY json_each.value"
    ).fetchall())


def confidence_counts(db: sqlite_utils.Database, prefix: str | None = None) -> dict[str, int]:
    """How many stored analyses (current or stale; of the series under ``prefix``, when given)
    hold each confidence level, weakest first, as the confidence filter sees them."""
    counts = dict.fromkeys(CONFIDENCE_LEVELS, 0)
    where, params = prefix_match("series_id", prefix)
    counts.update(db.execute(
        f"SELECT confidence, count(*) FROM analyses WHERE confidence IS NOT NULL AND {where} GROUP BY confidence", params
    ).fetchall())
    return counts


def count_by(db: sqlite_utils.Database, prefix: str | None = None) -> dict:
    """Counts for the dashboard's filters, of the whole portfolio or of the series under ``prefix``.

    ``{"confidence": {level: n}, "status": {status: n}, "total": n, "reviewed": n}``: the
    confidence of each series' stored analysis (as the confidence filter sees it), every
    verdict status, and ``reviewed`` = approved + overridden + not_arima.
    """
    status = verdict_counts(db, prefix)
    return {
        "confidence": confidence_counts(db, prefix),
        "status": status,
        "total": sum(status.values()),
        "reviewed": status["approved"] + status["overridden"] + status["not_arima"],
    }
