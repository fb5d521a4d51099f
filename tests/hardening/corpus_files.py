"""The bad-input corpus: small CSV files that other people's systems really produce, each with
what Lagdesk must do with it.

Run ``python tests/hardening/corpus_files.py`` to (re)write ``tests/hardening/corpus/``; a test
checks that the committed files are exactly what this module writes, so the expectations below
and the files can never drift apart. The big inputs (a 10^6-point series, a file over the
200 MiB upload limit) are made on the fly by the slow tests, never committed.

Every file is long layout (``series_id,timestamp,value``) unless its case says otherwise. Line
numbers count the header as line 1, as the messages do.
"""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass, field
from datetime import date, timedelta
from pathlib import Path

from app.core.errors import shorten
from app.core.series_ids import MAX_ID_LENGTH

CORPUS_DIR = Path(__file__).with_name("corpus")
HEADER = ("series_id", "timestamp", "value")
GOOD_ID = "good"
GOOD_POINTS = 24


@dataclass(frozen=True)
class Case:
    """One corpus file and what must happen to it.

    Attributes
    ----------
    content : bytes
        The file, byte for byte.
    file_error : tuple of str
        For a file that cannot be used at all: words its one-line message must contain (the
        file name is always checked besides). Empty for a file that imports.
    stored : tuple of str
        Series that must be stored.
    rejected : dict
        ``{series_id: line or None}``: series that must be rejected, with the line the message
        must name (None where no single line is to blame, e.g. a series that is too short).
    layout : str
        ``long`` or ``wide``.
    """

    content: bytes
    file_error: tuple[str, ...] = ()
    stored: tuple[str, ...] = ()
    rejected: dict[str, int | None] = field(default_factory=dict)
    layout: str = "long"


def good_values(n: int = GOOD_POINTS, level: float = 100.0) -> list[float]:
    """A deterministic, clearly non-constant series (a damped wave plus a small saw-tooth)."""
    return [round(level + 10 * math.sin(0.9 * i) + (7 * i) % 5, 3) for i in range(n)]


def month_starts(n: int, year: int = 2020) -> list[str]:
    return [f"{year + (m // 12)}-{m % 12 + 1:02d}-01" for m in range(n)]


def csv_bytes(rows: list[tuple], header: tuple = HEADER) -> bytes:
    """Rows written the way a spreadsheet writes them (minimal quoting, ``\\n`` line ends)."""
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(header)
    writer.writerows(rows)
    return out.getvalue().encode("utf-8")


def series_rows(series_id: str, values: list, stamps: list[str] | None = None) -> list[tuple]:
    stamps = stamps or month_starts(len(values))
    return [(series_id, ts, v) for ts, v in zip(stamps, values)]


def _good() -> list[tuple]:
    return series_rows(GOOD_ID, good_values())


def _with_bad_cell(cell: str, bad_id: str = "bad", at: int = 5) -> tuple[bytes, int]:
    """The good series, then a series whose ``at``-th value is ``cell``; returns the file and that line."""
    values: list = good_values(level=50.0)
    values[at] = cell
    rows = _good() + series_rows(bad_id, values)
    return csv_bytes(rows), 1 + GOOD_POINTS + at + 1


def _cases() -> dict[str, Case]:
    cases: dict[str, Case] = {}
    cases["empty.csv"] = Case(b"", file_error=("empty",))
    cases["header_only.csv"] = Case(b"series_id,timestamp,value\n", file_error=("no data rows",))
    cases["blank_lines_only.csv"] = Case(b"\n\n  \n", file_error=("empty",))
    cases["no_such_column.csv"] = Case(
        csv_bytes(_good(), header=("series_id", "timestamp", "amount")), file_error=("no column named 'value'",)
    )
    # Read with its own delimiter; a pipe is not, and its message names the cause.
    cases["semicolon.csv"] = Case(csv_bytes(_good()).replace(b",", b";"), stored=(GOOD_ID,))
    cases["pipe.csv"] = Case(csv_bytes(_good()).replace(b",", b"|"), file_error=("another delimiter",))
    cases["latin1.csv"] = Case(
        csv_bytes(series_rows("caf\u00e9", good_values())).decode("utf-8").encode("latin-1"),
        file_error=("not UTF-8",),
    )
    cases["unclosed_quote.csv"] = Case(csv_bytes(_good()) + b'"oops,2024-01-01,1\n', file_error=("not a readable CSV",))
    cases["too_many_fields.csv"] = Case(
        b"series_id,timestamp,value\ngood,2020-01-01,1,extra,cells\n" + csv_bytes(_good()[1:]).split(b"\n", 1)[1],
        file_error=("line 2", "more fields"),
    )
    cases["bom.csv"] = Case(b"\xef\xbb\xbf" + csv_bytes(_good()), stored=(GOOD_ID,))
    cases["crlf.csv"] = Case(csv_bytes(_good()).replace(b"\n", b"\r\n"), stored=(GOOD_ID,))

    content, line = _with_bad_cell("twelve")
    cases["value_text.csv"] = Case(content, stored=(GOOD_ID,), rejected={"bad": line})
    content, line = _with_bad_cell("NaN")
    cases["value_nan.csv"] = Case(content, stored=(GOOD_ID,), rejected={"bad": line})
    content, line = _with_bad_cell("+inf")
    cases["value_plus_inf.csv"] = Case(content, stored=(GOOD_ID,), rejected={"bad": line})
    content, line = _with_bad_cell("-inf")
    cases["value_minus_inf.csv"] = Case(content, stored=(GOOD_ID,), rejected={"bad": line})
    content, line = _with_bad_cell("1e309")
    cases["value_overflow.csv"] = Case(content, stored=(GOOD_ID,), rejected={"bad": line})
    # Finite, but the square of any of them overflows: refused before any arithmetic.
    huge = [f"{(1 if i % 3 else -1) * (1 + (i % 7) / 10):.1f}e308" for i in range(GOOD_POINTS)]
    cases["value_1e308.csv"] = Case(
        csv_bytes(_good() + series_rows("huge", huge)), stored=(GOOD_ID,), rejected={"huge": 1 + GOOD_POINTS + 1},
    )

    stamps = month_starts(GOOD_POINTS)
    stamps[7] = "2020-02-30"
    cases["timestamp_unparseable.csv"] = Case(
        csv_bytes(series_rows(GOOD_ID, good_values(), stamps)), file_error=("line 9", "2020-02-30"),
    )
    # +01:00 and +05:30 cannot be one zone's standard and daylight-saving time (+01:00 and Z can:
    # London's winter and summer).
    stamps = [f"{s}T00:00:00+01:00" for s in month_starts(GOOD_POINTS)]
    stamps[10] = stamps[10].replace("+01:00", "+05:30")
    cases["timestamp_mixed_zones.csv"] = Case(
        csv_bytes(series_rows(GOOD_ID, good_values(), stamps)), file_error=("line 12", "time zone"),
    )
    stamps = [f"{s}T00:00:00" for s in month_starts(GOOD_POINTS)]
    stamps[4] += "+02:00"
    cases["timestamp_zone_and_none.csv"] = Case(
        csv_bytes(series_rows(GOOD_ID, good_values(), stamps)), file_error=("line 6", "time zone"),
    )
    steps = [str(i) for i in range(1, GOOD_POINTS + 1)]
    steps[3] = "2021-04-01"
    cases["timestamp_steps_and_dates.csv"] = Case(
        csv_bytes(series_rows(GOOD_ID, good_values(), steps)), file_error=("line 5", "2021-04-01"),
    )
    steps = [str(10**22 + i) for i in range(GOOD_POINTS)]
    cases["timestamp_huge_steps.csv"] = Case(
        csv_bytes(series_rows(GOOD_ID, good_values(), steps)), file_error=("line 2", str(10**22)),
    )

    stamps = month_starts(GOOD_POINTS)
    stamps[20] = "3000-09-01"
    cases["timestamp_out_of_range.csv"] = Case(
        csv_bytes(series_rows(GOOD_ID, good_values(), stamps)), file_error=("line 22", "3000-09-01", "years"),
    )
    stamps = month_starts(GOOD_POINTS)
    stamps[6] = stamps[5]
    cases["duplicate_timestamps.csv"] = Case(
        csv_bytes(_good() + series_rows("twice", good_values(level=20.0), stamps)),
        stored=(GOOD_ID,), rejected={"twice": 1 + GOOD_POINTS + 7},
    )
    stamps = month_starts(GOOD_POINTS)
    stamps[9] = stamps[9][:-2] + "17"
    cases["irregular_spacing.csv"] = Case(
        csv_bytes(_good() + series_rows("jumpy", good_values(level=20.0), stamps)),
        stored=(GOOD_ID,), rejected={"jumpy": 1 + GOOD_POINTS + 10},
    )
    daily = [f"2021-03-{d:02d}" for d in range(1, 25)]
    weekly = _weeks("2021-01-04", GOOD_POINTS)
    switching = month_starts(12, 2019) + [f"2020-01-{d:02d}" for d in range(2, 14)]
    cases["mixed_frequencies.csv"] = Case(
        csv_bytes(
            _good()
            + series_rows("daily", good_values(level=30.0), daily)
            + series_rows("weekly", good_values(level=40.0), weekly)
            + series_rows("months_then_days", good_values(level=60.0), switching)
        ),
        stored=(GOOD_ID, "daily", "weekly"), rejected={"months_then_days": None},
    )
    # A few timestamps far apart at a fine spacing: the grid would need billions of points.
    steps = [str(i) for i in range(1, GOOD_POINTS + 1)]
    bomb_steps = [str(i) for i in range(1, 13)] + [str(10**12)]
    cases["grid_bomb_steps.csv"] = Case(
        csv_bytes(series_rows(GOOD_ID, good_values(), steps) + series_rows("bomb", good_values(13), bomb_steps)),
        stored=(GOOD_ID,), rejected={"bomb": None},
    )
    bomb_seconds = [f"2020-01-01T00:00:{s:02d}" for s in range(12)] + ["2060-01-01T00:00:00"]
    cases["grid_bomb_seconds.csv"] = Case(
        csv_bytes(_good() + series_rows("bomb", good_values(13), bomb_seconds)), stored=(GOOD_ID,), rejected={"bomb": None},
    )
    cases["short_series.csv"] = Case(
        csv_bytes(
            _good()
            + series_rows("one_point", [5.0])
            + series_rows("two_points", [5.0, 6.0])
            + series_rows("nine_points", good_values(9))
        ),
        stored=(GOOD_ID,), rejected={"one_point": None, "two_points": None, "nine_points": None},
    )
    cases["constant.csv"] = Case(
        csv_bytes(_good() + series_rows("flat", [3.25] * GOOD_POINTS)), stored=(GOOD_ID,), rejected={"flat": None},
    )
    cases["all_missing.csv"] = Case(
        csv_bytes(_good() + series_rows("blank", [""] * GOOD_POINTS)), stored=(GOOD_ID,), rejected={"blank": None},
    )
    odd_ids = (
        "<script>alert('id')</script>",
        'say "hi", \'there\'',
        "\U0001f4c8 sales \u2615 caf\u00e9",
        "x" * MAX_ID_LENGTH,
        "a/b?c=d#e%20f",
        "shop 3/.hidden/..more",
    )
    rows = [row for i, sid in enumerate(odd_ids) for row in series_rows(sid, good_values(level=10.0 * (i + 1)))]
    cases["odd_ids.csv"] = Case(csv_bytes(rows), stored=odd_ids)
    wide_rows = [
        (ts, g, "n/a" if i == 3 else b)
        for i, (ts, g, b) in enumerate(zip(month_starts(GOOD_POINTS), good_values(), good_values(level=5.0)))
    ]
    cases["wide_text_cell.csv"] = Case(
        csv_bytes(wide_rows, header=("timestamp", GOOD_ID, "bad")), stored=(GOOD_ID,), rejected={"bad": 5},
        layout="wide",
    )
    cases.update(_issue_19_cases())
    return cases


def physical_line(content: bytes, row: tuple) -> int:
    """The line of the file on which the record of ``row`` (as the csv module writes it) starts."""
    record = csv_bytes([row], header=())[1:]  # without the empty header line
    return content[: content.index(b"\n" + record) + 1].count(b"\n") + 1


def _issue_19_cases() -> dict[str, Case]:
    """Input that used to be misread without a word (issue 19, items 6-10)."""
    cases: dict[str, Case] = {}
    # Item 6: pandas renamed the second 'b' to 'b.1' and imported both.
    rows = [(ts, g, b, g + 1) for ts, g, b in zip(month_starts(GOOD_POINTS), good_values(), good_values(level=5.0))]
    cases["wide_duplicate_column.csv"] = Case(
        csv_bytes(rows, header=("timestamp", GOOD_ID, "b", "b")), file_error=("column 'b' appears more than once", "columns 3, 4"),
        layout="wide",
    )
    # Item 7: with ISO dates present, 01/08/2020 was read month first (January 8).
    stamps = month_starts(GOOD_POINTS)
    stamps[7] = "01/08/2020"
    cases["dates_mixed_formats.csv"] = Case(
        csv_bytes(series_rows(GOOD_ID, good_values(), stamps)), file_error=("line 9", "'01/08/2020'", "first timestamp"),
    )
    # Month starts written day first: every one also reads as a January day month first.
    day_first_months = [f"01/{m % 12 + 1:02d}/{2020 + m // 12}" for m in range(GOOD_POINTS)]
    cases["dates_ambiguous.csv"] = Case(
        csv_bytes(series_rows(GOOD_ID, good_values(), day_first_months)),
        file_error=("line 3", "'01/02/2020'", "day first", "month first", "--date-format %d/%m/%Y"),
    )
    # Day first, and the 13th of March tells so: the whole file is read day first.
    march = [f"{d:02d}/03/2021" for d in range(1, GOOD_POINTS + 1)]
    cases["dates_day_first.csv"] = Case(csv_bytes(series_rows("march", good_values(level=30.0), march)), stored=("march",))
    # Item 8: local midnights of one zone across the change to summer time (2024-03-31, +01:00 -> +02:00).
    days = [date(2024, 3, 20) + timedelta(days=i) for i in range(GOOD_POINTS)]
    stamps = [f"{d.isoformat()}T00:00:00{'+02:00' if d >= date(2024, 3, 31) else '+01:00'}" for d in days]
    cases["timestamp_dst.csv"] = Case(csv_bytes(series_rows("dst", good_values(), stamps)), stored=("dst",))
    # Item 9: a quoted comment with a line break on every row; the bad cell's line is physical.
    rows = [(*row, "checked\nby ann") for row in _good()]
    values: list = good_values(level=50.0)
    values[5] = "twelve"
    rows += [(*row, "") for row in series_rows("bad", values)]
    content = csv_bytes(rows, header=(*HEADER, "comment"))
    cases["quoted_line_breaks.csv"] = Case(content, stored=(GOOD_ID,), rejected={"bad": physical_line(content, rows[GOOD_POINTS + 5])})
    # Item 10: ids that break a terminal, a URL or a page; each rejected on its first line.
    bad_ids = (
        "red\x1b[31m alert", "two\nlines", "zero\u200bwidth", "back\u202ewards", "a/../b", "./x", "shop//bread", "shop/", "y" * (MAX_ID_LENGTH + 1),
    )
    rows = _good() + [row for i, sid in enumerate(bad_ids) for row in series_rows(sid, good_values(level=10.0 * (i + 2)))]
    content = csv_bytes(rows)
    first_rows = {sid: physical_line(content, series_rows(sid, good_values(level=10.0 * (i + 2)))[0]) for i, sid in enumerate(bad_ids)}
    cases["bad_ids.csv"] = Case(content, stored=(GOOD_ID,), rejected={shorten(sid): line for sid, line in first_rows.items()})
    return cases


def _weeks(start: str, n: int) -> list[str]:
    first = date.fromisoformat(start)
    return [(first + timedelta(weeks=i)).isoformat() for i in range(n)]


CASES = _cases()


def write_corpus(folder: Path = CORPUS_DIR) -> list[Path]:
    """Write every corpus file into ``folder``; returns their paths."""
    folder.mkdir(parents=True, exist_ok=True)
    paths = []
    for name, case in CASES.items():
        path = folder / name
        path.write_bytes(case.content)
        paths.append(path)
    return paths


if __name__ == "__main__":
    for written in write_corpus():
        print(written)
