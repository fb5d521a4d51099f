"""Reading a portfolio of series from a CSV file, long or wide.

*Long* layout: one row per observation, columns ``series_id,timestamp,value`` by default.
*Wide* layout: one time column and one column per series.

Timestamps are dates/datetimes or plain integer steps (1, 2, 3, ...). Empty value cells are
missing observations (gaps), not errors. A cell that is not a number, or is not finite
(``nan``, ``inf``, a value that overflows), makes its series unusable and is reported with the
line it is on; the other series are still read. Anything that makes the whole file unusable
raises :class:`~app.core.errors.InputFileError`.
"""

from __future__ import annotations

import csv
import io
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from app.core.errors import InputFileError, SeriesProblem

LAYOUTS = ("long", "wide")
DEFAULT_ID_COL = "series_id"
DEFAULT_TIME_COL = "timestamp"
DEFAULT_VALUE_COL = "value"
FIRST_DATA_LINE = 2  # line 1 is the header
# Integer steps beyond 2**53 are not exact as floats (and beyond 2**63 do not fit the store).
MAX_INTEGER_STEP = 2**53
# Dates are kept as nanoseconds since 1970 (pandas' default unit), which spans these years.
STORABLE_YEARS = f"{pd.Timestamp.min.year + 1}-{pd.Timestamp.max.year - 1}"
_ZONE_SUFFIX = r"(?i)(?<=\d)(z|[+-]\d\d:?\d\d)$"


@dataclass
class RawSeries:
    """One series as read from the file, before it is put on a regular grid.

    ``lines`` holds, for each observation, its 1-based line number in the file.
    """

    series_id: str
    values: pd.Series
    lines: np.ndarray


@dataclass(frozen=True)
class ReadLimits:
    """The most a file may hold: series (a whole file over it is refused) and observation rows
    per series (a series over it is rejected, the others still read)."""

    max_series: int
    max_points: int


@dataclass
class PortfolioFile:
    """The readable series of a file and the problems of the unreadable ones."""

    path: str
    series: list[RawSeries] = field(default_factory=list)
    problems: list[SeriesProblem] = field(default_factory=list)


def read_portfolio(
    path: str | Path,
    layout: str = "long",
    id_col: str = DEFAULT_ID_COL,
    time_col: str = DEFAULT_TIME_COL,
    value_col: str = DEFAULT_VALUE_COL,
    display_name: str | None = None,
    limits: ReadLimits | None = None,
) -> PortfolioFile:
    """Read a long or wide CSV file into raw series.

    Parameters
    ----------
    path : str or Path
        The CSV file.
    layout : {"long", "wide"}
        Long: one row per observation; wide: a time column and one column per series.
    id_col, time_col, value_col : str
        Column names (``id_col`` and ``value_col`` are used by the long layout only).
    display_name : str, optional
        The name used in messages (e.g. the uploaded file's name); defaults to ``path``.
    limits : ReadLimits, optional
        Most series per file and rows per series (a server sets these for uploads).

    Raises
    ------
    InputFileError
        When the file cannot be read at all or lacks a required column.
    """
    name = display_name or str(path)
    if layout not in LAYOUTS:
        raise InputFileError(name, f"layout must be one of {', '.join(LAYOUTS)}, not {layout!r}")
    table = _read_table(Path(path), name)
    if layout == "long":
        return _read_long(table, name, id_col, time_col, value_col, limits)
    return _read_wide(table, name, time_col, limits)


def _check_limits(name: str, series_count: int, limits: ReadLimits | None) -> None:
    if limits is not None and series_count > limits.max_series:
        raise InputFileError(name, f"holds {series_count:,} series; at most {limits.max_series:,} are accepted in one file")


def _too_many_points(series_id: str, lines: np.ndarray, limits: ReadLimits | None) -> SeriesProblem | None:
    if limits is None or len(lines) <= limits.max_points:
        return None
    return SeriesProblem(
        series_id, f"has {len(lines):,} rows; at most {limits.max_points:,} are accepted per series",
        row=int(lines[limits.max_points]), flag="too_long",
    )


def _read_table(path: Path, name: str) -> pd.DataFrame:
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise InputFileError(name, f"cannot be read ({exc.strerror or exc})") from None
    if not raw.strip():
        raise InputFileError(name, "the file is empty")
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise InputFileError(name, f"is not UTF-8 text (byte {exc.start} cannot be decoded)") from None
    try:
        # index_col=False: a first data row longer than the header would otherwise silently
        # turn its leading cells into a row index; pandas warns instead, and that is an error.
        with warnings.catch_warnings():
            warnings.simplefilter("error", pd.errors.ParserWarning)
            table = pd.read_csv(
                io.StringIO(text), dtype=str, keep_default_na=False, skipinitialspace=True,
                quoting=csv.QUOTE_MINIMAL, skip_blank_lines=False, index_col=False,
            )
    except pd.errors.ParserWarning:
        raise InputFileError(name, f"line {FIRST_DATA_LINE} has more fields than the header") from None
    except (pd.errors.ParserError, csv.Error, ValueError) as exc:
        raise InputFileError(name, f"is not a readable CSV file ({str(exc).strip()})") from None
    table.columns = [str(c).strip() for c in table.columns]
    # Blank lines are kept while reading so that row i is file line i + 2, then dropped.
    table.index = np.arange(FIRST_DATA_LINE, FIRST_DATA_LINE + len(table))
    table = table[~(table == "").all(axis=1)]
    if table.empty:
        raise InputFileError(name, "has a header but no data rows")
    return table


def _require_columns(table: pd.DataFrame, name: str, columns: list[str]) -> None:
    missing = [c for c in columns if c not in table.columns]
    if missing:
        found = ", ".join(repr(c) for c in table.columns[:10])
        hint = ""
        if len(table.columns) == 1 and any(sep in table.columns[0] for sep in ";\t|"):
            hint = " (the file may use another delimiter than a comma)"
        raise InputFileError(
            name, f"no column named {', '.join(repr(c) for c in missing)}; the header has {found}{hint}"
        )


def parse_timestamps(texts: pd.Series, name: str, lines: np.ndarray) -> pd.Index:
    """Parse a column of timestamps: all integers, or all dates/datetimes.

    Raises
    ------
    InputFileError
        Naming the first line whose timestamp cannot be read, lies outside
        :data:`STORABLE_YEARS`, or has another time zone than the first line's.
    """
    stripped = texts.str.strip()
    as_number = pd.to_numeric(stripped, errors="coerce")
    is_step = (as_number == np.round(as_number)) & (as_number.abs() <= MAX_INTEGER_STEP)
    if is_step.all():
        return pd.Index(as_number.astype(np.int64).to_numpy(), name="timestamp")
    if is_step.mean() > 0.5:  # mostly steps: the first cell that is not one is the culprit
        _bad_timestamp(name, texts, lines, ~is_step.to_numpy(), "is not an integer step like the others")
    try:
        parsed = pd.to_datetime(stripped, errors="coerce", format="ISO8601")
        if parsed.isna().any():
            parsed = pd.to_datetime(stripped, errors="coerce", format="mixed")
    except (ValueError, TypeError) as exc:
        _mixed_zones(name, stripped, lines)
        raise InputFileError(name, f"timestamps cannot be read together ({exc})") from None
    _bad_timestamp(name, texts, lines, parsed.isna().to_numpy(), "is not a date, time or integer step")
    index = pd.DatetimeIndex(parsed, name="timestamp")
    if index.tz is not None:
        index = index.tz_convert("UTC").tz_localize(None)
    outside = (index < pd.Timestamp.min) | (index > pd.Timestamp.max)
    _bad_timestamp(name, texts, lines, outside, f"is outside the years {STORABLE_YEARS} that can be stored")
    return index.as_unit("ns")


def _bad_timestamp(name: str, texts: pd.Series, lines: np.ndarray, bad: np.ndarray, why: str) -> None:
    """Raise naming the first line where ``bad`` holds, if any."""
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InputFileError(name, f"line {lines[i]}: timestamp {texts.iloc[i]!r} {why}")


def _mixed_zones(name: str, stripped: pd.Series, lines: np.ndarray) -> None:
    """Raise naming the first line whose time zone differs from the first line's, if any."""
    zones = stripped.str.extract(_ZONE_SUFFIX, expand=False).fillna("")
    zones = zones.replace({"z": "Z", "+00:00": "Z", "+0000": "Z"}).str.upper()
    differs = (zones != zones.iloc[0]).to_numpy()
    if differs.any():
        i = int(np.flatnonzero(differs)[0])
        first = zones.iloc[0] or "no time zone"
        here = zones.iloc[i] or "no time zone"
        raise InputFileError(
            name, f"line {lines[i]}: timestamp {stripped.iloc[i]!r} has time zone {here}, but line {lines[0]} has "
            f"{first}; give every timestamp the same time zone (or none)",
        )


def parse_values(texts: pd.Series, series_id: str, lines: np.ndarray) -> np.ndarray:
    """Parse value cells: empty cells are gaps (NaN); anything else must be a finite number.

    Raises
    ------
    SeriesProblem
        Naming the first line with a non-numeric or non-finite value.
    """
    stripped = texts.str.strip()
    empty = stripped.eq("").to_numpy()
    numbers = pd.to_numeric(stripped.where(~empty, None), errors="coerce").to_numpy(dtype=float, copy=True)
    bad = ~empty & ~np.isfinite(numbers)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        cell = texts.iloc[i]
        kind = "not finite" if stripped.iloc[i].lower().lstrip("+-") in {"nan", "inf", "infinity"} or np.isinf(numbers[i]) else "not a number"
        raise SeriesProblem(series_id, f"value {cell!r} is {kind}", row=int(lines[i]), flag="bad_value")
    numbers[empty] = np.nan
    return numbers


def _read_long(
    table: pd.DataFrame, name: str, id_col: str, time_col: str, value_col: str, limits: ReadLimits | None
) -> PortfolioFile:
    _require_columns(table, name, [id_col, time_col, value_col])
    result = PortfolioFile(path=name)
    lines = table.index.to_numpy()
    ids = table[id_col].str.strip()
    if (ids == "").any():
        bad = int(np.flatnonzero((ids == "").to_numpy())[0])
        raise InputFileError(name, f"line {lines[bad]}: empty series id in column {id_col!r}")
    groups = ids.groupby(ids, sort=False).indices
    _check_limits(name, len(groups), limits)
    index = parse_timestamps(table[time_col], name, lines)
    for series_id, positions in groups.items():
        series_lines = lines[positions]
        if problem := _too_many_points(series_id, series_lines, limits):
            result.problems.append(problem)
            continue
        try:
            values = parse_values(table[value_col].iloc[positions], series_id, series_lines)
        except SeriesProblem as problem:
            result.problems.append(problem)
            continue
        result.series.append(RawSeries(series_id, pd.Series(values, index=index[positions]), series_lines))
    return result


def _read_wide(table: pd.DataFrame, name: str, time_col: str, limits: ReadLimits | None) -> PortfolioFile:
    _require_columns(table, name, [time_col])
    value_cols = [c for c in table.columns if c != time_col]
    if not value_cols:
        raise InputFileError(name, f"wide layout needs at least one series column besides {time_col!r}")
    _check_limits(name, len(value_cols), limits)
    result = PortfolioFile(path=name)
    lines = table.index.to_numpy()
    index = parse_timestamps(table[time_col], name, lines)
    for column in value_cols:
        if problem := _too_many_points(column, lines, limits):
            result.problems.append(problem)
            continue
        try:
            values = parse_values(table[column], column, lines)
        except SeriesProblem as problem:
            result.problems.append(problem)
            continue
        keep = ~np.isnan(values)
        if not keep.any():
            result.problems.append(SeriesProblem(column, "has no values at all", flag="empty"))
            continue
        first, last = np.flatnonzero(keep)[[0, -1]]
        span = slice(first, last + 1)
        result.series.append(RawSeries(column, pd.Series(values[span], index=index[span]), lines[span]))
    return result
