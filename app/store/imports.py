"""Importing a portfolio file into the database.

The whole file is read and every series prepared (put on its regular grid and checked)
before anything is written; all writes then happen in one transaction. A file-level error
raises :class:`~app.core.errors.InputFileError` and stores nothing. A series-level problem
rejects that series, with the reason and line, and the good series are still stored.

A series that is already stored is merged: new timestamps are appended, changed values
updated; an empty cell never erases a stored value. Its fingerprint (SHA-256 of the
regularised values and their timestamps) is recomputed on the merged data; when it changes,
the stored analysis becomes stale. Verdicts are left as they are: each records the fingerprint
of the data it was decided on, and the next analysis of changed data decides whether an
approved order still holds (:mod:`app.jobs.recheck`). Series that are too short or constant are
rejected here, as the engine could not analyse them.
"""

from __future__ import annotations

import hashlib
import json
import math
from dataclasses import asdict, dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
import sqlite_utils

from app.core.errors import SeriesProblem
from app.core.portfolio_file import (
    DEFAULT_ID_COL,
    DEFAULT_TIME_COL,
    DEFAULT_VALUE_COL,
    PortfolioFile,
    RawSeries,
    ReadLimits,
    read_portfolio,
)
from app.core.prepare import PreparedSeries, prepare_series
from app.store.database import insert_row, utc_now, write_transaction
from app.store.series import problem_reason
from app.store.timestamps import DATETIME, index_from_keys, time_kind, timestamp_keys
from app.store.verdicts import add_pending, add_to_recheck_reason, mark_recheck

_NOT_IN_FILE = -1  # the "line" of an observation that comes from the database, not the file


@dataclass
class ImportReport:
    """What one import did, series by series."""

    file: str
    added: list[str] = field(default_factory=list)
    updated: list[str] = field(default_factory=list)
    unchanged: list[str] = field(default_factory=list)
    rejected: list[dict] = field(default_factory=list)  # {"series_id", "message", "row", "flag"}
    import_id: int = 0
    imported_at: str = ""
    revised: list[str] = field(default_factory=list)  # the updated series whose stored values changed

    def to_dict(self) -> dict:
        return asdict(self)

    def rejections(self) -> list[dict]:
        """The rejected series for a table with a column for the id and one for the line:
        ``{"series_id", "line", "reason"}``, the reason without the id and line it starts with."""
        return [{"series_id": r["series_id"], "line": r.get("row"),
                 "reason": problem_reason(r["series_id"], r["message"], r.get("row"))} for r in self.rejected]

    def summary(self) -> str:
        revised = (f" ({len(self.revised)} of them with stored values changed, e.g. {self.revised[0]!r})"
                   if self.revised else "")
        return (
            f"{self.file}: {len(self.added)} added, {len(self.updated)} updated{revised}, "
            f"{len(self.unchanged)} unchanged, {len(self.rejected)} rejected"
        )


@dataclass
class _SeriesPlan:
    """What the import will write for one good series."""

    series_id: str
    kind: str
    prepared: PreparedSeries
    fingerprint: str
    observed: int
    is_new: bool
    new_rows: list[tuple] = field(default_factory=list)  # (ts, value) to insert
    changed_rows: list[tuple] = field(default_factory=list)  # (ts, value) to update

    @property
    def changed(self) -> bool:
        return bool(self.new_rows or self.changed_rows)


def import_portfolio(
    db: sqlite_utils.Database,
    path: str | Path,
    layout: str = "long",
    id_col: str = DEFAULT_ID_COL,
    time_col: str = DEFAULT_TIME_COL,
    value_col: str = DEFAULT_VALUE_COL,
    display_name: str | None = None,
    limits: ReadLimits | None = None,
    date_format: str | None = None,
) -> ImportReport:
    """Read, check and store a portfolio file (see the module docstring for the rules); the
    reading options are :func:`~app.core.portfolio_file.read_portfolio`'s.

    Raises
    ------
    InputFileError
        When the file cannot be used at all; the database is then unchanged.
    """
    portfolio = read_portfolio(path, layout, id_col, time_col, value_col, display_name, limits, date_format)
    return store_portfolio(db, portfolio)


def store_portfolio(db: sqlite_utils.Database, portfolio: PortfolioFile) -> ImportReport:
    """Check and store the series of a file already read (so that a caller can read a file before
    it opens, and so creates, a database)."""
    # Plan without holding the write lock (preparing thousands of series takes seconds, and an
    # analysis run writes meanwhile); only imports change observations, so the plan still holds
    # if no import committed since.
    generation = _data_generation(db)
    plans, rejected = _plan(db, portfolio)
    with write_transaction(db):
        if _data_generation(db) != generation:
            plans, rejected = _plan(db, portfolio)
        return _write(db, portfolio.path, portfolio.layout, plans, rejected)


def list_imports(db: sqlite_utils.Database, limit: int = 20) -> list[ImportReport]:
    """The latest imports, newest first."""
    rows = db.execute(
        "SELECT import_id, imported_at, file, added, updated, unchanged, rejected FROM imports "
        "ORDER BY import_id DESC LIMIT ?",
        [limit],
    ).fetchall()
    return [
        ImportReport(
            file=file, added=json.loads(added), updated=json.loads(updated), unchanged=json.loads(unchanged),
            rejected=json.loads(rejected), import_id=import_id, imported_at=imported_at,
        )
        for import_id, imported_at, file, added, updated, unchanged, rejected in rows
    ]


def fingerprint(prepared: PreparedSeries) -> str:
    """SHA-256 of a prepared series' regular-grid values and timestamps.

    Hashed: the timestamp kind and length, the values as little-endian float64, and the
    timestamps as little-endian int64 (nanoseconds since 1970 for dates, else the steps).
    """
    kind = time_kind(prepared.index)
    stamps = prepared.index.to_numpy(dtype="datetime64[ns]").view(np.int64) if kind == DATETIME else prepared.index.to_numpy()
    digest = hashlib.sha256(f"{kind}:{prepared.n}\n".encode())
    digest.update(np.ascontiguousarray(prepared.values, dtype="<f8").tobytes())
    digest.update(np.ascontiguousarray(stamps, dtype="<i8").tobytes())
    return digest.hexdigest()


def _data_generation(db: sqlite_utils.Database) -> int:
    return db.execute("SELECT coalesce(max(import_id), 0) FROM imports").fetchone()[0]


def _plan(db: sqlite_utils.Database, portfolio: PortfolioFile) -> tuple[list[_SeriesPlan], list[dict]]:
    plans: list[_SeriesPlan] = []
    rejected = [problem.to_dict() for problem in portfolio.problems]
    for raw in portfolio.series:
        try:
            plans.append(_plan_series(db, raw))
        except SeriesProblem as problem:
            rejected.append(problem.to_dict())
    return plans, rejected


def _plan_series(db: sqlite_utils.Database, raw: RawSeries) -> _SeriesPlan:
    """Merge the file's observations of one series with the stored ones, and check the result."""
    sid = raw.series_id
    kind = time_kind(raw.values.index)
    row = db.execute("SELECT time_kind FROM series WHERE series_id = ?", [sid]).fetchone()
    stored: dict = {}
    if row is not None:
        if row[0] != kind:
            raise SeriesProblem(
                sid, f"the file has {kind} timestamps but the stored series has {row[0]} timestamps",
                row=int(raw.lines[0]), flag="time_kind",
            )
        stored = dict(db.execute("SELECT ts, value FROM observations WHERE series_id = ?", [sid]).fetchall())
    keys = timestamp_keys(raw.values.index)
    values, new_rows, changed_rows = _merge(keys, raw.values.to_numpy(dtype=float).tolist(), stored)
    in_file = set(keys)
    kept = [key for key in stored if key not in in_file]
    index, lines = raw.values.index, np.asarray(raw.lines)
    if kept:
        index = index.append(index_from_keys(kept, kind))
        lines = np.concatenate([lines, np.full(len(kept), _NOT_IN_FILE)])
    merged = pd.Series(values + [stored[key] for key in kept], index=index)
    prepared = prepare_series(merged, sid, lines)
    return _SeriesPlan(
        series_id=sid,
        kind=kind,
        prepared=prepared,
        fingerprint=fingerprint(prepared),
        observed=len(stored) + len(new_rows),
        is_new=row is None,
        new_rows=new_rows,
        changed_rows=changed_rows,
    )


def _merge(keys: list, values: list[float], stored: dict) -> tuple[list[float], list[tuple], list[tuple]]:
    """The file's values with gaps filled from the stored ones, and the rows to insert and update."""
    merged = list(values)
    new_rows: list[tuple] = []
    changed_rows: list[tuple] = []
    for i, (key, value) in enumerate(zip(keys, values)):
        old = stored.get(key)
        if math.isnan(value):
            if old is not None:
                merged[i] = old
        elif old is None:
            new_rows.append((key, value))
        elif old != value:
            changed_rows.append((key, value))
    return merged, new_rows, changed_rows


def _write(
    db: sqlite_utils.Database, file: str, layout: str, plans: list[_SeriesPlan], rejected: list[dict]
) -> ImportReport:
    report = ImportReport(
        file=file,
        added=[p.series_id for p in plans if p.is_new],
        updated=[p.series_id for p in plans if not p.is_new and p.changed],
        unchanged=[p.series_id for p in plans if not p.is_new and not p.changed],
        rejected=rejected,
        imported_at=utc_now(),
        revised=[p.series_id for p in plans if not p.is_new and p.changed_rows],
    )
    report.import_id = insert_row(db, "imports", {
        "file": file,
        "imported_at": report.imported_at,
        "layout": layout,
        "added": json.dumps(report.added),
        "updated": json.dumps(report.updated),
        "unchanged": json.dumps(report.unchanged),
        "rejected": json.dumps(report.rejected),
    })
    written = [p for p in plans if p.changed]
    db.conn.executemany(
        "INSERT INTO series (series_id, time_kind, freq, n, observed, gaps_filled, first_timestamp, "
        "last_timestamp, prep_flags, fingerprint, created_import_id, updated_import_id) "
        "VALUES (:series_id, :kind, :freq, :n, :observed, :gaps_filled, :first, :last, :prep_flags, "
        ":fingerprint, :import_id, :import_id)",
        [_series_columns(p, report.import_id) for p in written if p.is_new],
    )
    add_pending(db, report.added)
    db.conn.executemany(
        "INSERT INTO observations (series_id, ts, value) VALUES (?, ?, ?)",
        [(p.series_id, ts, value) for p in written for ts, value in p.new_rows],
    )
    db.conn.executemany(
        "UPDATE observations SET value = ? WHERE series_id = ? AND ts = ?",
        [(value, p.series_id, ts) for p in written for ts, value in p.changed_rows],
    )
    db.conn.executemany(
        "UPDATE series SET freq = :freq, n = :n, observed = :observed, gaps_filled = :gaps_filled, "
        "first_timestamp = :first, last_timestamp = :last, prep_flags = :prep_flags, "
        "fingerprint = :fingerprint, updated_import_id = :import_id WHERE series_id = :series_id",
        [_series_columns(p, report.import_id) for p in written if not p.is_new],
    )
    add_to_recheck_reason(db, [p.series_id for p in written if not p.is_new], f"since then the import of {report.file} stored new data")
    _recheck_refused(db, report)
    return report


def _recheck_refused(db: sqlite_utils.Database, report: ImportReport) -> None:
    """Send a decided series whose new data this import refused back for a look: its order was
    decided on the data still stored, which the file no longer agrees with, and nothing else
    would say so once the import report is gone (:func:`app.store.verdicts.mark_recheck` leaves
    undecided series alone)."""
    ids = [r["series_id"] for r in report.rejected]
    stored = {row[0] for row in db.execute(
        f"SELECT series_id FROM series WHERE series_id IN ({', '.join('?' for _ in ids)})", ids)} if ids else set()
    for problem in report.rejected:
        if problem["series_id"] in stored:
            reason = problem_reason(problem["series_id"], problem["message"], problem.get("row"))
            line = f" (line {problem['row']})" if problem.get("row") else ""
            mark_recheck(db, problem["series_id"],
                         f"the import of {report.file} refused its new data{line}: {reason}; the stored data are older")


def _series_columns(plan: _SeriesPlan, import_id: int) -> dict:
    first, last = timestamp_keys(plan.prepared.index[[0, -1]])
    return {
        "series_id": plan.series_id,
        "kind": plan.kind,
        "freq": plan.prepared.freq,
        "n": plan.prepared.n,
        "observed": plan.observed,
        "gaps_filled": plan.prepared.gaps_filled,
        "first": str(first),
        "last": str(last),
        "prep_flags": json.dumps(plan.prepared.flags),
        "fingerprint": plan.fingerprint,
        "import_id": import_id,
    }
