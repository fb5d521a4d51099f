"""Reading a CSV file in chunks of rows, with bounded memory and physical line numbers.

The delimiter is the comma, unless the header holds none and a semicolon or a tab
(:data:`OTHER_DELIMITERS`); how a file separated by semicolons writes its decimals is for its
reader to tell (:func:`app.core.portfolio_file.decimal_mark`).

The file is never held whole: rows come in chunks of at most :data:`CHUNK_CELLS` cells and
about :data:`CHUNK_CHARS` characters, each row with the physical line its record starts on (a
quoted cell may span lines, so the n-th record is not always on line n + 1). A line is read with a bound (:data:`MAX_LINE_CHARS`) and a cell
may hold at most :data:`MAX_CELL_CHARS` characters, so an endless line (``/dev/zero``) stops
with a message instead of filling memory. Blank lines are skipped; a row shorter than the
header is padded with empty cells, a longer one is an error naming its line.
"""

from __future__ import annotations

import csv
import gc
import itertools
import re
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import TextIO

import numpy as np

from app.core.errors import InputFileError

# A line may hold a wide file's header of 10,000 series ids of up to 200 characters (2 MB),
# with room to spare.
MAX_LINE_CHARS = 8 * 1024 * 1024
MAX_CELL_CHARS = csv.field_size_limit()  # 131,072: the csv module's own bound, kept
# A chunk holds at most this many cells, and stops growing once its rows hold CHUNK_CHARS
# characters (checked every BATCH_ROWS rows): long cells make short chunks.
CHUNK_CELLS = 1 << 17
CHUNK_CHARS = 8 * 1024 * 1024
BATCH_ROWS = 1024
_UNDECODABLE = re.compile("[\udc80-\udcff]")  # what errors="surrogateescape" makes of a byte that is not UTF-8
# Delimiters read instead of the comma when the header holds one of them and no comma.
OTHER_DELIMITERS = (";", "\t")
LINE_DTYPE = np.int32  # a file of 2**31 lines would need far more memory than its numbers take


@dataclass
class RowChunk:
    """Rows of a CSV file: ``columns[j][i]`` is the cell of header column j on row i, without
    surrounding white space; ``lines[i]`` is the physical line row i starts on (the header is
    line 1 when the file starts with it)."""

    lines: np.ndarray
    columns: list[np.ndarray]

    def __len__(self) -> int:
        return len(self.lines)


class CsvChunks:
    """An open CSV file: its header, then its rows chunk by chunk (use as a context manager)."""

    def __init__(self, path: Path, name: str) -> None:
        self.name = name
        try:
            # Undecodable bytes become lone surrogates, found line by line so the message can name the line.
            self._file: TextIO = path.open(encoding="utf-8-sig", errors="surrogateescape", newline="")
        except OSError as exc:
            raise InputFileError(name, f"cannot be read ({exc.strerror or exc})") from None
        self._chars_read = 0
        self.delimiter = ","
        self._reader = csv.reader(self._bounded_lines(), skipinitialspace=True, strict=True)
        self.header, self.header_line = self._read_header()
        if len(self.header) == 1 and (other := next((d for d in OTHER_DELIMITERS if d in self.header[0]), None)):
            self._file.seek(0)
            self._chars_read, self.delimiter = 0, other
            self._reader = csv.reader(self._bounded_lines(), delimiter=other, skipinitialspace=True, strict=True)
            self.header, self.header_line = self._read_header()


    def __enter__(self) -> CsvChunks:
        return self

    def __exit__(self, *exc_info: object) -> None:
        self._file.close()

    def chunks(self) -> Iterator[RowChunk]:
        """The data rows after the header, in chunks; blank lines are left out."""
        width = len(self.header)
        size = max(1, CHUNK_CELLS // width)
        while True:
            start = self._reader.line_num
            with _collector_paused():
                rows = self._next_rows(size)
                if not rows:
                    return
                lines = _start_lines(rows, start, self._reader.line_num)
                if set(map(len, rows)) != {width}:
                    rows, lines = self._fitted(rows, lines, width)
                columns = [np.array([cell.strip() for cell in cells], dtype=object) for cells in zip(*rows)]
                del rows  # the chunk is held once, as its columns
            if len(lines):
                yield RowChunk(lines, columns)

    def _next_rows(self, size: int) -> list[list[str]]:
        """Up to ``size`` rows, fewer once they hold :data:`CHUNK_CHARS` characters."""
        rows: list[list[str]] = []
        budget = self._chars_read + CHUNK_CHARS
        try:
            while len(rows) < size and self._chars_read < budget:
                batch = list(itertools.islice(self._reader, min(size - len(rows), BATCH_ROWS)))
                if not batch:
                    break
                rows += batch
        except csv.Error as exc:
            line = self._reader.line_num
            if "field limit" in str(exc):
                raise InputFileError(self.name, f"line {line} has a cell longer than {MAX_CELL_CHARS:,} characters") from None
            raise InputFileError(self.name, f"is not a readable CSV file (line {line}: {exc})") from None
        return rows

    def _fitted(self, rows: list[list[str]], lines: np.ndarray, width: int) -> tuple[list[list[str]], np.ndarray]:
        """Rows without the blank ones, each padded to the header's width; a longer row is an error."""
        kept, kept_lines = [], []
        for row, line in zip(rows, lines):
            if len(row) > width:
                raise InputFileError(self.name, f"line {line} has more fields than the header ({len(row)}, not {width})")
            if any(cell.strip() for cell in row):
                kept.append(row + [""] * (width - len(row)))
                kept_lines.append(line)
        return kept, np.asarray(kept_lines, dtype=LINE_DTYPE)

    def _read_header(self) -> tuple[list[str], int]:
        for row in self._rows_one_by_one():
            if any(cell.strip() for cell in row):
                return [cell.strip() for cell in row], self._reader.line_num
        raise InputFileError(self.name, "the file is empty")

    def _rows_one_by_one(self) -> Iterator[list[str]]:
        while rows := self._next_rows(1):
            yield rows[0]

    def _bounded_lines(self) -> Iterator[str]:
        """The file's lines, each read with a bound, so no line is ever held beyond it."""
        number = 0
        while line := self._file.readline(MAX_LINE_CHARS + 1):
            number += 1
            self._chars_read += len(line)
            if len(line) > MAX_LINE_CHARS:
                raise InputFileError(
                    self.name, f"line {number} is longer than {MAX_LINE_CHARS:,} characters (is it a CSV file?)"
                )
            if not line.isascii() and (undecodable := _UNDECODABLE.search(line)):
                byte = ord(undecodable.group()) - 0xDC00
                raise InputFileError(self.name, f"is not UTF-8 text (line {number} holds the byte 0x{byte:02X}, which cannot be decoded)")
            yield line


def joined(parts: list[np.ndarray], axis: int = 0) -> np.ndarray:
    """The chunks' arrays as one, emptying ``parts`` so that their memory is freed as it is copied."""
    whole = np.concatenate(parts, axis=axis)
    parts.clear()
    return whole


def _start_lines(rows: list[list[str]], before: int, after: int) -> np.ndarray:
    """The physical line each row starts on, given the reader's line count before and after the
    rows: one line each unless a quoted cell holds line breaks."""
    if after - before == len(rows):
        return np.arange(before + 1, after + 1, dtype=LINE_DTYPE)
    spans = np.array([1 + sum(_line_breaks(cell) for cell in row) for row in rows], dtype=LINE_DTYPE)
    return before + 1 + np.concatenate(([0], np.cumsum(spans)[:-1]))


def _line_breaks(cell: str) -> int:
    """Line ends inside a cell, counted as the reader counts lines (``\\r\\n``, ``\\r``, ``\\n``)."""
    return cell.count("\n") + cell.count("\r") - cell.count("\r\n")


@contextmanager
def _collector_paused() -> Iterator[None]:
    """Pause the cyclic garbage collector while a chunk's rows are built: the many row lists
    trigger collections that find nothing (they hold no cycles) and took about 60% of the time
    of reading a 3-million-row file."""
    enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if enabled:
            gc.enable()
