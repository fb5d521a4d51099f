"""Reading a portfolio of series from a CSV file, long or wide.

*Long* layout: one row per observation, columns ``series_id,timestamp,value`` by default.
*Wide* layout: one time column and one column per series.

The file is read in chunks (:mod:`app.core.csv_chunks`), so memory holds the numbers kept, not
the text: a series past the points limit, or with a bad cell, stops being kept as soon as it is
seen, and a file past the series limit is refused as soon as the series that passes it appears.
Timestamps follow :mod:`app.core.timestamp_column` (steps or dates, one date format, one time
zone). Empty value cells are missing observations (gaps), not errors. A cell that is not a
number, or is not finite (``nan``, ``inf``, a value that overflows), makes its series unusable
and is reported with the line it is on; so is a series id that :func:`~app.core.series_ids.id_problem`
refuses; the other series are still read. Anything that makes the whole file unusable raises
:class:`~app.core.errors.InputFileError`. Line numbers are physical lines of the file (the
header is line 1), also after a quoted cell that spans lines.
"""

from __future__ import annotations

import re
from collections import Counter
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from app.core.csv_chunks import CsvChunks, RowChunk, joined
from app.core.errors import InputFileError, SeriesProblem, shorten
from app.core.series_ids import id_problem
from app.core.timestamp_column import TimestampColumn

LAYOUTS = ("long", "wide")
DEFAULT_ID_COL = "series_id"
DEFAULT_TIME_COL = "timestamp"
DEFAULT_VALUE_COL = "value"
_NOT_FINITE_WORDS = frozenset({"nan", "inf", "infinity"})
# How other programs write a missing value (R's NA, a spreadsheet's #N/A ...): refused, with a hint.
_MISSING_MARKS = frozenset({"na", "n/a", "n.a.", "n.a", "#n/a", "#na", "-", ".", "?", "null", "none", "missing"})
# Dots alone between groups of three digits (1.005: a thousand and five, or one and five thousandths?).
_DOTS_ALONE = re.compile(r"[+-]?\d{1,3}(\.\d{3})+")
_THOUSANDS = re.compile(r"[+-]?\d{1,3}(\.\d{3})+(,\d*)?")  # 1.120,5 where a comma marks the decimals
# What names each column the reader looks for: the option of ``lagdesk identify`` and ``lagdesk
# import``, and the field of the upload page.
_NAMED_BY = {"series id": ("--id-col", "Series id"), "time": ("--time-col", "Time"), "value": ("--value-col", "Value")}


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
    layout: str = "long"
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
    date_format: str | None = None,
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
        Most series per file and rows per series (none when not given).
    date_format : str, optional
        The ``strftime`` format of the dates (``%d/%m/%Y``); by default the first timestamp's.

    Raises
    ------
    InputFileError
        When the file cannot be read at all, lacks a required column, holds too many series or
        timestamps that cannot be read (see :mod:`app.core.timestamp_column`).
    """
    name = display_name or str(path)
    if layout not in LAYOUTS:
        raise InputFileError(name, f"layout must be one of {', '.join(LAYOUTS)}, not {layout!r}")
    with CsvChunks(Path(path), name) as table:
        stamps = TimestampColumn(name, date_format)
        reader: _LongReader | _WideReader
        if layout == "long":
            reader = _LongReader(table, stamps, id_col, time_col, value_col, limits)
        else:
            reader = _WideReader(table, stamps, time_col, limits)
        rows = 0
        for chunk in table.chunks():
            rows += len(chunk)
            reader.add(chunk)
        if not rows:
            raise InputFileError(name, "has a header but no data rows")
        return reader.result()


def _column_positions(table: CsvChunks, columns: dict[str, str]) -> list[int]:
    """Where each column is in the header (``columns``: what it holds, a key of
    :data:`_NAMED_BY` -> its name); a missing or repeated one is an error."""
    header = table.header
    missing = {role: name for role, name in columns.items() if name not in header}
    if missing:
        found = ", ".join(repr(shorten(c)) for c in header[:10])
        if len(header) == 1 and "|" in header[0]:
            hint = " (the file may use another delimiter than a comma)"
        else:
            hint = _naming_hint(list(missing))
            if {"series id", "value"} <= set(missing) and "time" in columns and len(header) >= 2:
                first = shorten(header[0])
                option, field = ("", "") if "time" not in missing else (f" --time-col {first!r}", f", {first!r} as its \"Time\"")
                hint += (f"; or, if each column beside the time column is a series, read it with --layout wide{option} "
                         f"(the upload's wide layout{field})")
        raise InputFileError(
            table.name, f"no column named {', '.join(repr(shorten(c)) for c in missing.values())}; the header has {found}{hint}"
        )
    for column in columns.values():
        _refuse_repeated(table, column)
    return [header.index(c) for c in columns.values()]


def _naming_hint(roles: list[str]) -> str:
    """How to name the columns holding ``roles`` (keys of :data:`_NAMED_BY`): in the words of the
    command line and of the upload page, which both show this message."""
    options = [_NAMED_BY[role][0] for role in roles]
    fields = [f'"{_NAMED_BY[role][1]}"' for role in roles]
    s = "" if len(roles) == 1 else "s"
    return f"; name the {_listed(roles)} column{s} with {_listed(options)} (the upload's {_listed(fields)} field{s})"


def _listed(words: Sequence[str]) -> str:
    """``a``, ``a and b``, ``a, b and c``."""
    return " and ".join([", ".join(words[:-1]), words[-1]] if len(words) > 1 else words)


def _refuse_repeated(table: CsvChunks, column: str) -> None:
    positions = [i + 1 for i, name in enumerate(table.header) if name == column]
    if len(positions) > 1:
        raise InputFileError(
            table.name, f"line {table.header_line}: column {shorten(column)!r} appears more than once in the header "
            f"(columns {', '.join(map(str, positions))}); give each column its own name",
        )


def decimal_mark(cells: np.ndarray, known: str | None) -> str | None:
    """The decimal mark of a file separated by semicolons, from its value cells so far: ``known``
    once told; a comma as soon as a value holds one (``12,5``, as a spreadsheet set to a European
    locale saves CSV, its dots then parting thousands: ``1.120,5``); a point as soon as a value
    holds a dot that cannot part thousands (``12.25``); None while every dot stands before three
    digits (``1.005``: a thousand and five, or one and five thousandths?)."""
    if known is not None:
        return known
    texts = pd.Series(cells.ravel(), dtype=object)
    if texts.str.contains(",", regex=False).any():
        return ","
    dotted = texts[texts.str.contains(".", regex=False)]
    return "." if (~dotted.str.fullmatch(_DOTS_ALONE)).any() else None


def _numbers(cells: np.ndarray, mark: str | None = ".") -> tuple[np.ndarray, np.ndarray]:
    """Value cells as numbers (NaN for an empty cell, a gap) and where a cell is not a finite
    number, read with the decimal ``mark`` (:func:`decimal_mark`): with ``,`` the dots part
    thousands, ``1.120,5`` is 1120.5; with None a value whose dots could part thousands is not
    read (:func:`_value_problem`)."""
    texts = pd.Series(cells.ravel(), dtype=object)
    if mark == ",":
        parted = texts.str.fullmatch(_THOUSANDS) | ~texts.str.contains(".", regex=False)  # 12.5 is no number here
        texts = texts.where(parted, "?").str.replace(".", "", regex=False).str.replace(",", ".", regex=False)
    elif mark is None:
        texts = texts.where(~texts.str.fullmatch(_DOTS_ALONE), "?")
    empty = texts.eq("").to_numpy()
    numbers = pd.to_numeric(texts.where(~empty, None), errors="coerce").to_numpy(dtype=float, copy=True)
    bad = ~empty & ~np.isfinite(numbers)
    numbers[empty] = np.nan
    return numbers.reshape(cells.shape), bad.reshape(cells.shape)


def _value_problem(series_id: str, cell: str, number: float, line: int, mark: str | None = ".") -> SeriesProblem:
    word = cell.lower().lstrip("+-")
    kind = "not finite" if word in _NOT_FINITE_WORDS or np.isinf(number) else "not a number"
    if mark is None and _DOTS_ALONE.fullmatch(cell):
        kind = ("ambiguous in a file separated by semicolons whose values so far show no decimal mark: its dot may "
                "part the thousands (1.005 for 1005) or the decimals; write it without a thousands separator")
    elif cell.strip().lower() in _MISSING_MARKS:
        kind += "; a missing value is an empty cell"
    return SeriesProblem(series_id, f"value {shorten(cell)!r} is {kind}", row=int(line), flag="bad_value")


def _too_many_rows(series_id: str, rows: int, line: int, limits: ReadLimits) -> SeriesProblem:
    """The problem of a series with more rows than the limit; ``line`` is its first row past it."""
    return SeriesProblem(
        series_id, f"has {rows:,} rows; at most {limits.max_points:,} are accepted per series", row=int(line), flag="too_long",
    )


def _bad_id(series_id: str, line: int) -> SeriesProblem | None:
    reason = id_problem(series_id)
    return None if reason is None else SeriesProblem(shorten(series_id), reason, row=line, flag="bad_id")


def _too_many_series(name: str, count: str, limits: ReadLimits) -> InputFileError:
    return InputFileError(name, f"holds {count} series; at most {limits.max_series:,} are accepted in one file")


def _first_of_each(codes: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The distinct codes and the position of each one's first occurrence."""
    distinct, first = np.unique(codes, return_index=True)
    return distinct, first


class _LongReader:
    """The long layout, chunk by chunk: series numbered in order of appearance (codes), their
    observations kept as flat arrays until the end."""

    def __init__(
        self, table: CsvChunks, stamps: TimestampColumn, id_col: str, time_col: str, value_col: str,
        limits: ReadLimits | None,
    ) -> None:
        self.name = table.name
        self.mark: str | None = None if table.delimiter == ";" else "."
        self.id_col = id_col
        self.positions = _column_positions(table, {"series id": id_col, "time": time_col, "value": value_col})
        self.stamps = stamps
        self.limits = limits
        self.codes: dict[str, int] = {}
        self.ids: list[str] = []
        self.rows = np.zeros(0, dtype=np.int64)  # rows so far, per code
        self.rejected = np.zeros(0, dtype=bool)
        self.problems: dict[int, SeriesProblem] = {}
        self.too_long: dict[int, int] = {}  # code -> its first line past the points limit
        self.kept: tuple[list[np.ndarray], ...] = ([], [], [])  # codes, values, lines of the rows kept

    def add(self, chunk: RowChunk) -> None:
        id_cells, time_cells, value_cells = (chunk.columns[i] for i in self.positions)
        lines = chunk.lines
        codes = self._codes(id_cells, lines)
        self.mark = decimal_mark(value_cells, self.mark)
        numbers, bad = _numbers(value_cells, self.mark)
        for i in self._first_rows(codes, bad):
            self._reject(codes[i], _value_problem(self.ids[codes[i]], value_cells[i], numbers[i], lines[i], self.mark))
        if self.limits is not None:
            self._count_rows(codes, lines, self.limits)
        keep = ~self.rejected[codes]
        self.stamps.add(time_cells, lines, keep, id_cells)
        for parts, column in zip(self.kept, (codes, numbers, lines)):
            parts.append(column[keep])

    def result(self) -> PortfolioFile:
        # A file written series by series is in series order already: each series is then a slice
        # (a view) of the columns. Otherwise the columns are reordered one at a time.
        codes = joined(self.kept[0])
        order = None if bool(np.all(codes[1:] >= codes[:-1])) else np.argsort(codes, kind="stable")

        def in_series_order(column: np.ndarray) -> np.ndarray:
            return column if order is None else column[order]

        codes = in_series_order(codes)
        values, lines = (in_series_order(joined(parts)) for parts in self.kept[1:])
        stamps = in_series_order(self.stamps.stamps())
        starts = np.flatnonzero(np.diff(codes, prepend=-1))
        result = PortfolioFile(path=self.name, layout="long")
        for start, end in zip(starts, [*starts[1:], len(codes)]):
            code = codes[start]
            if not self.rejected[code]:  # else rejected after some of its rows were kept
                rows = slice(start, end)
                values_read = pd.Series(values[rows], index=self.stamps.index(stamps[rows]), copy=False)
                result.series.append(RawSeries(self.ids[code], values_read, lines[rows]))
        for code, line in self.too_long.items():
            assert self.limits is not None
            self.problems[code] = _too_many_rows(self.ids[code], int(self.rows[code]), line, self.limits)
        result.problems = [self.problems[code] for code in sorted(self.problems)]
        return result

    def _codes(self, id_cells: np.ndarray, lines: np.ndarray) -> np.ndarray:
        """Each row's series code; a series seen for the first time is counted and its id checked."""
        ids = pd.Series(id_cells, dtype=object)
        empty = ids.eq("").to_numpy()
        if empty.any():
            line = lines[np.flatnonzero(empty)[0]]
            raise InputFileError(self.name, f"line {line}: empty series id in column {shorten(self.id_col)!r}")
        local, distinct = pd.factorize(ids)
        _, first = _first_of_each(local)
        known = len(self.ids)
        codes = np.array([self._code(series_id) for series_id in distinct], dtype=np.int32)
        if len(self.ids) > known:
            grown = len(self.ids) - known
            self.rows = np.concatenate((self.rows, np.zeros(grown, dtype=np.int64)))
            self.rejected = np.concatenate((self.rejected, np.zeros(grown, dtype=bool)))
            for code, i in zip(codes, first):
                if code >= known and (problem := _bad_id(self.ids[code], int(lines[i]))):
                    self._reject(code, problem)
        return codes[local]

    def _code(self, series_id: str) -> int:
        """The series' code; a new one is numbered (past the series limit the file is refused)."""
        code = self.codes.get(series_id)
        if code is not None:
            return code
        if self.limits is not None and len(self.ids) >= self.limits.max_series:
            raise _too_many_series(self.name, f"more than {self.limits.max_series:,}", self.limits)
        code = self.codes[series_id] = len(self.ids)
        self.ids.append(series_id)
        return code

    def _first_rows(self, codes: np.ndarray, bad: np.ndarray) -> np.ndarray:
        """The first row of each series still kept where ``bad`` holds."""
        rows = np.flatnonzero(bad & ~self.rejected[codes])
        _, first = _first_of_each(codes[rows])
        return rows[first]

    def _count_rows(self, codes: np.ndarray, lines: np.ndarray, limits: ReadLimits) -> None:
        """Count the chunk's rows per series; a series is rejected at its first row past the limit
        (its rows are still counted, for the message)."""
        live = np.flatnonzero(~self.rejected[codes])
        order = live[np.argsort(codes[live], kind="stable")]
        _, starts = _first_of_each(codes[order])
        rank = np.arange(len(order)) - np.repeat(starts, np.diff(np.append(starts, len(order))))
        for row in order[self.rows[codes[order]] + rank == limits.max_points]:
            self.rejected[codes[row]] = True
            self.too_long[int(codes[row])] = int(lines[row])
        self.rows += np.bincount(codes, minlength=len(self.rows))

    def _reject(self, code: int, problem: SeriesProblem) -> None:
        self.rejected[code] = True
        self.problems[code] = problem


class _WideReader:
    """The wide layout, chunk by chunk: one value column per series, every column's values kept
    as a matrix until the end."""

    def __init__(self, table: CsvChunks, stamps: TimestampColumn, time_col: str, limits: ReadLimits | None) -> None:
        self.name = table.name
        self.mark: str | None = None if table.delimiter == ";" else "."
        (self.time_position,) = _column_positions(table, {"time": time_col})
        self.value_positions = [i for i, name in enumerate(table.header) if name != time_col]
        if not self.value_positions:
            raise InputFileError(self.name, f"wide layout needs at least one series column besides {time_col!r}")
        if limits is not None and len(self.value_positions) > limits.max_series:
            raise _too_many_series(self.name, f"{len(self.value_positions):,}", limits)
        # Counted once: a check per name that scanned the header took 44 s for 40,000 columns.
        repeated = next((name for name, count in Counter(table.header).items() if count > 1), None)
        if repeated is not None:
            _refuse_repeated(table, repeated)
        self.ids = [table.header[i] for i in self.value_positions]
        self.stamps = stamps
        self.limits = limits
        self.rows = 0
        self.rejected = np.zeros(len(self.ids), dtype=bool)
        self.problems: dict[int, SeriesProblem] = {}
        for column, series_id in enumerate(self.ids):
            if problem := _bad_id(series_id, table.header_line):
                self._reject(column, problem)
        self.kept: tuple[list[np.ndarray], list[np.ndarray]] = ([], [])  # values (a column per series), lines
        self.past_limit: int | None = None  # the first line past the points limit

    def add(self, chunk: RowChunk) -> None:
        """Read a chunk; past the points limit, every series is rejected and rows are only counted."""
        room = len(chunk) if self.limits is None else self.limits.max_points - self.rows
        self.rows += len(chunk)
        if self.past_limit is not None:
            return
        if room < len(chunk):
            self.past_limit = int(chunk.lines[room])
            return
        cells = np.stack([chunk.columns[i] for i in self.value_positions])
        self.mark = decimal_mark(cells, self.mark)
        numbers, bad = _numbers(cells, self.mark)
        for column in map(int, np.flatnonzero(bad.any(axis=1) & ~self.rejected)):
            i = int(np.argmax(bad[column]))
            self._reject(column, _value_problem(self.ids[column], cells[column, i], numbers[column, i], chunk.lines[i], self.mark))
        self.stamps.add(chunk.columns[self.time_position], chunk.lines, np.ones(len(chunk), dtype=bool))
        self.kept[0].append(numbers)
        self.kept[1].append(chunk.lines)

    def result(self) -> PortfolioFile:
        result = PortfolioFile(path=self.name, layout="wide")
        if self.past_limit is not None:
            assert self.limits is not None
            for column in range(len(self.ids)):
                self.problems.setdefault(column, _too_many_rows(self.ids[column], self.rows, self.past_limit, self.limits))
        elif self.kept[1]:
            stamps = self.stamps.stamps()
            numbers = joined(self.kept[0], axis=1)
            lines = joined(self.kept[1])
            for column in map(int, np.flatnonzero(~self.rejected)):
                values = numbers[column]
                observed = np.flatnonzero(~np.isnan(values))
                if not observed.size:
                    self._reject(column, SeriesProblem(self.ids[column], "has no values at all", flag="empty"))
                    continue
                span = slice(observed[0], observed[-1] + 1)
                index = self.stamps.index(stamps[span])
                result.series.append(RawSeries(self.ids[column], pd.Series(values[span], index=index, copy=False), lines[span]))
        result.problems = [self.problems[column] for column in sorted(self.problems)]
        return result

    def _reject(self, column: int, problem: SeriesProblem) -> None:
        self.rejected[column] = True
        self.problems[column] = problem
