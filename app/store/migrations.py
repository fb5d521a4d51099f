"""The database schema, as ordered forward migrations.

Each step is applied once, in order, and recorded (with the time) in sqlite-utils'
``_sqlite_migrations`` table under the set name ``lagdesk``; the schema version is the number
of steps applied. A released step is never edited: a change to the schema is a new step
appended to :data:`STEPS`.

Tables (version 1)
------------------
imports          one row per successful import: file, time, layout, and the report (series
                 added / updated / unchanged / rejected with reasons, as JSON lists)
series           one row per series: timestamp kind (``datetime`` or ``integer``), frequency,
                 regularised length, observation count, first/last timestamp, preparation flags
                 and the fingerprint (SHA-256 of the regularised values and their timestamps)
observations     one row per (series, timestamp): the merged raw observations; clustered on
                 its primary key, so one series is read with an index range lookup
runs             one row per analysis run: engine version, settings, progress counts, state, times
analyses         at most one row per series: the state (complete or failed, with the message),
                 the fingerprint of the data analysed (current when it equals the series'), and
                 the columns the dashboard filters and sorts on (confidence, flags, orders, d)
analysis_results the engine's result dict as JSON, for each complete analysis
verdicts         the reviewer's current decision per series, with a version number
verdict_history  every change of a verdict, oldest first (from status, to status, who, when, note)

Version 2
---------
verdicts.data_sha256  the fingerprint of the data a verdict was decided on (that of the stored
                      analysis the reviewer saw, else of the series); filled for approved and
                      overridden verdicts of older files with the series' current fingerprint, which
                      is what they were decided on, as version 1 sent such a verdict to recheck
                      whenever the data changed
order_fits            per series, the parameters of the latest refit of a chosen order that was not
                      among the analysis' candidates (for the export), with the fingerprint of the
                      data, the model (order, seasonal order, trend, transform) and engine version

Version 3
---------
analyses.main_reason  the first of the analysis' confidence reasons, in the engine's words (a flag
                      as ``flag: NAME``), for the queue row; filled for older files from the
                      results in ``analysis_results`` (one pass over them; NULL when a result
                      carries no reasons)

Version 4
---------
verdicts          rebuilt (SQLite cannot change a CHECK constraint) so that ``status`` may also be
                  ``not_arima``, with a new column ``trend``: the deterministic term of the decided
                  model as :class:`app.core.order.Order` names it (``n``, ``c``, ``t``, ``ct``);
                  NULL for a verdict without an order and for one saved before version 4, which
                  takes the term the analysis gives its order
verdict_history.trend  the same, for each step
bulk_approvals        one row per bulk approval of firm suggestions: when, who, the note, the
                      queue filter (JSON), and when and by whom it was undone (NULL while not)
bulk_approved         the series a bulk approval approved, each with the verdict version the
                      approval gave it (an undo is allowed while every one is still at it)

Version 5
---------
verdicts.interventions, verdict_history.interventions  the interventions a reviewer chose with an
                      order (JSON; NULL keeps the analysis' own)

Version 6
---------
analyses.transform, analyses.suggested_trend, analyses.interventions  the rest of the suggested
                      model, for the queue row: the transform as the result's JSON writes it
                      (``"none"``, ``"log"``, ``{"box_cox": lambda}``), the suggestion's
                      deterministic term (``n``, ``c``, ``t``, ``ct``) and the interventions taken
                      out with it (a JSON list as in the result); filled for older files from the
                      results in ``analysis_results``, each NULL (unknown) when a result does not
                      hold it (results written before interventions were detected hold no list)

Version 7
---------
verdicts.seen_differencing  the differencing ``[d, D]`` of the analysis a decided verdict was
                      decided (or last confirmed) on, so that a re-check asks whether the
                      analysis changed its mind, not whether a reviewer's deliberate change of d
                      differs from it; filled for older files from each decided verdict's stored
                      analysis, NULL where there is none (a re-check then compares the order's d)
"""

from __future__ import annotations

import sqlite_utils
from sqlite_utils.migrations import Migrations

MIGRATION_SET = "lagdesk"

_INITIAL_SCHEMA = (
    """
    CREATE TABLE imports (
        import_id INTEGER PRIMARY KEY,
        file TEXT NOT NULL,
        imported_at TEXT NOT NULL,
        layout TEXT NOT NULL,
        added TEXT NOT NULL,
        updated TEXT NOT NULL,
        unchanged TEXT NOT NULL,
        rejected TEXT NOT NULL
    ) STRICT
    """,
    """
    CREATE TABLE series (
        series_id TEXT PRIMARY KEY,
        time_kind TEXT NOT NULL CHECK (time_kind IN ('datetime', 'integer')),
        freq TEXT NOT NULL,
        n INTEGER NOT NULL,
        observed INTEGER NOT NULL,
        gaps_filled INTEGER NOT NULL,
        first_timestamp TEXT NOT NULL,
        last_timestamp TEXT NOT NULL,
        prep_flags TEXT NOT NULL,
        fingerprint TEXT NOT NULL,
        created_import_id INTEGER NOT NULL REFERENCES imports (import_id),
        updated_import_id INTEGER NOT NULL REFERENCES imports (import_id)
    ) STRICT
    """,
    # ts is ANY: ISO-8601 text for dated series, INTEGER for integer steps (series.time_kind);
    # a STRICT table keeps each value exactly as stored, with no type conversion.
    """
    CREATE TABLE observations (
        series_id TEXT NOT NULL REFERENCES series (series_id),
        ts ANY NOT NULL,
        value REAL NOT NULL,
        PRIMARY KEY (series_id, ts)
    ) STRICT, WITHOUT ROWID
    """,
    """
    CREATE TABLE runs (
        run_id INTEGER PRIMARY KEY,
        started_at TEXT NOT NULL,
        updated_at TEXT NOT NULL,
        finished_at TEXT,
        engine_version TEXT NOT NULL,
        settings TEXT NOT NULL,
        total INTEGER NOT NULL,
        done INTEGER NOT NULL DEFAULT 0,
        failed INTEGER NOT NULL DEFAULT 0,
        state TEXT NOT NULL CHECK (state IN ('running', 'finished', 'interrupted', 'failed')),
        duration_s REAL
    ) STRICT
    """,
    """
    CREATE TABLE analyses (
        series_id TEXT PRIMARY KEY REFERENCES series (series_id),
        fingerprint TEXT NOT NULL,
        state TEXT NOT NULL CHECK (state IN ('complete', 'failed')),
        message TEXT,
        confidence TEXT,
        flags TEXT NOT NULL,
        suggested_order TEXT,
        suggested_seasonal_order TEXT,
        d INTEGER,
        engine_version TEXT,
        run_id INTEGER REFERENCES runs (run_id),
        analysed_at TEXT NOT NULL
    ) STRICT
    """,
    # The results (tens of kB each) live apart, so a scan of the summary columns stays small.
    """
    CREATE TABLE analysis_results (
        series_id TEXT PRIMARY KEY REFERENCES series (series_id),
        result TEXT NOT NULL
    ) STRICT
    """,
    "CREATE INDEX analyses_confidence ON analyses (confidence)",
    "CREATE INDEX analyses_run ON analyses (run_id)",
    """
    CREATE TABLE verdicts (
        series_id TEXT PRIMARY KEY REFERENCES series (series_id),
        status TEXT NOT NULL CHECK (status IN ('pending', 'approved', 'overridden', 'parked', 'recheck')),
        arima_order TEXT,
        seasonal_order TEXT,
        transform TEXT NOT NULL,
        note TEXT NOT NULL,
        reviewer TEXT NOT NULL,
        version INTEGER NOT NULL,
        decided_at TEXT,
        recheck_reason TEXT
    ) STRICT
    """,
    "CREATE INDEX verdicts_status ON verdicts (status)",
    """
    CREATE TABLE verdict_history (
        history_id INTEGER PRIMARY KEY,
        series_id TEXT NOT NULL REFERENCES series (series_id),
        version INTEGER NOT NULL,
        at TEXT NOT NULL,
        from_status TEXT NOT NULL,
        status TEXT NOT NULL,
        arima_order TEXT,
        seasonal_order TEXT,
        transform TEXT NOT NULL,
        note TEXT NOT NULL,
        reviewer TEXT NOT NULL,
        UNIQUE (series_id, version)
    ) STRICT
    """,
)


def initial_schema(db: sqlite_utils.Database) -> None:
    """Version 1: every table of the portfolio database."""
    for statement in _INITIAL_SCHEMA:
        db.execute(statement)


def verdict_data_fingerprint(db: sqlite_utils.Database) -> None:
    """Version 2: the data fingerprint of each verdict, and the refits of chosen orders."""
    db.execute("ALTER TABLE verdicts ADD COLUMN data_sha256 TEXT")
    db.execute(
        "UPDATE verdicts SET data_sha256 = (SELECT fingerprint FROM series WHERE series.series_id = verdicts.series_id) "
        "WHERE status IN ('approved', 'overridden')"
    )
    db.execute(
        """
        CREATE TABLE order_fits (
            series_id TEXT PRIMARY KEY REFERENCES series (series_id),
            fingerprint TEXT NOT NULL,
            model TEXT NOT NULL,
            parameters TEXT NOT NULL,
            engine_version TEXT NOT NULL,
            fitted_at TEXT NOT NULL
        ) STRICT
        """
    )


def analysis_main_reason(db: sqlite_utils.Database) -> None:
    """Version 3: the main reason of each analysis' confidence, read from its stored result."""
    db.execute("ALTER TABLE analyses ADD COLUMN main_reason TEXT")
    db.execute(
        "UPDATE analyses SET main_reason = (SELECT json_extract(r.result, '$.confidence_reasons[0]') "
        "FROM analysis_results r WHERE r.series_id = analyses.series_id) WHERE state = 'complete'"
    )


_VERDICTS_V4 = """
    CREATE TABLE verdicts_v4 (
        series_id TEXT PRIMARY KEY REFERENCES series (series_id),
        status TEXT NOT NULL CHECK (status IN ('pending', 'approved', 'overridden', 'parked', 'recheck', 'not_arima')),
        arima_order TEXT,
        seasonal_order TEXT,
        transform TEXT NOT NULL,
        note TEXT NOT NULL,
        reviewer TEXT NOT NULL,
        version INTEGER NOT NULL,
        decided_at TEXT,
        recheck_reason TEXT,
        data_sha256 TEXT,
        trend TEXT CHECK (trend IN ('n', 'c', 't', 'ct'))
    ) STRICT
"""
_VERDICT_COLUMNS_V3 = (
    "series_id, status, arima_order, seasonal_order, transform, note, reviewer, version, decided_at, "
    "recheck_reason, data_sha256"
)


def verdict_choices_and_bulk_undo(db: sqlite_utils.Database) -> None:
    """Version 4: the ``not_arima`` state, the decided model's deterministic term, and the
    record of bulk approvals that lets one be undone."""
    db.execute(_VERDICTS_V4)
    db.execute(f"INSERT INTO verdicts_v4 ({_VERDICT_COLUMNS_V3}) SELECT {_VERDICT_COLUMNS_V3} FROM verdicts")
    db.execute("DROP TABLE verdicts")
    db.execute("ALTER TABLE verdicts_v4 RENAME TO verdicts")
    db.execute("CREATE INDEX verdicts_status ON verdicts (status)")
    db.execute("ALTER TABLE verdict_history ADD COLUMN trend TEXT")
    db.execute(
        """
        CREATE TABLE bulk_approvals (
            bulk_id INTEGER PRIMARY KEY,
            at TEXT NOT NULL,
            reviewer TEXT NOT NULL,
            note TEXT NOT NULL,
            filter TEXT NOT NULL,
            undone_at TEXT,
            undone_by TEXT
        ) STRICT
        """
    )
    db.execute(
        """
        CREATE TABLE bulk_approved (
            bulk_id INTEGER NOT NULL REFERENCES bulk_approvals (bulk_id),
            series_id TEXT NOT NULL REFERENCES series (series_id),
            version INTEGER NOT NULL,
            PRIMARY KEY (bulk_id, series_id)
        ) STRICT, WITHOUT ROWID
        """
    )


def verdict_interventions(db: sqlite_utils.Database) -> None:
    """Version 5: the interventions a reviewer chose with an order (JSON; NULL keeps the
    analysis' own), in the verdict and its history."""
    db.execute("ALTER TABLE verdicts ADD COLUMN interventions TEXT")
    db.execute("ALTER TABLE verdict_history ADD COLUMN interventions TEXT")


def analysis_suggested_model(db: sqlite_utils.Database) -> None:
    """Version 6: the transform, deterministic term and interventions of each analysis'
    suggestion, read from its stored result."""
    db.execute("ALTER TABLE analyses ADD COLUMN transform TEXT")
    db.execute("ALTER TABLE analyses ADD COLUMN suggested_trend TEXT CHECK (suggested_trend IN ('n', 'c', 't', 'ct'))")
    db.execute("ALTER TABLE analyses ADD COLUMN interventions TEXT")
    # json_quote keeps an object (Box-Cox) as JSON and quotes a string ("log"); json_type is NULL
    # for a key the result does not hold, where json_quote would write the text 'null'.
    db.execute(
        "UPDATE analyses SET (transform, suggested_trend, interventions) = (SELECT "
        "CASE WHEN json_type(r.result, '$.transform') IS NOT NULL THEN json_quote(json_extract(r.result, '$.transform')) END, "
        "json_extract(r.result, '$.candidates[0].trend'), "
        "CASE WHEN json_type(r.result, '$.interventions') = 'array' THEN json_extract(r.result, '$.interventions') END "
        "FROM analysis_results r WHERE r.series_id = analyses.series_id) WHERE state = 'complete'"
    )


# The differencing [d, D] of the series' complete analysis, as a subquery of a statement on verdicts.
SEEN_DIFFERENCING = ("SELECT json_array(a.d, json_extract(a.suggested_seasonal_order, '$[1]')) FROM analyses a "
                     "WHERE a.series_id = verdicts.series_id AND a.state = 'complete'")


def verdict_seen_differencing(db: sqlite_utils.Database) -> None:
    """Version 7: the differencing of the analysis each decided verdict was decided on."""
    db.execute("ALTER TABLE verdicts ADD COLUMN seen_differencing TEXT")
    db.execute(
        f"UPDATE verdicts SET seen_differencing = ({SEEN_DIFFERENCING}) WHERE status IN ('approved', 'overridden', 'recheck')"
    )


STEPS = (initial_schema, verdict_data_fingerprint, analysis_main_reason, verdict_choices_and_bulk_undo,
         verdict_interventions, analysis_suggested_model, verdict_seen_differencing)

MIGRATIONS = Migrations(MIGRATION_SET)
for _step in STEPS:
    MIGRATIONS(name=_step.__name__)(_step)
