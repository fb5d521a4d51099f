"""Reading a file's timestamp column, chunk by chunk: integer steps, or dates and times written
in one format.

Rules (each refusal names the first line to blame):

* **Steps or dates.** The first timestamp decides: a whole number makes the column integer
  steps (1, 2, 3, ...), and a cell that is not one is an error; otherwise the column holds dates.
* **One date format.** Without a given format, the first timestamp sets it: ISO 8601 when it is
  ISO 8601 (``2024-03-01``, ``2024-03-01 10:00``, ``2024-03-01T10:00:00+01:00``), else the
  format pandas guesses for it, month first and day first both kept while the file allows both.
  A timestamp written in another format is refused; so is a file whose dates read differently
  month first and day first (``01/02/2024``) with none telling which, naming the first line
  where the readings differ. A given format (``--date-format %d/%m/%Y``) is the only one tried.
* **Months, quarters and weeks.** Where pandas guesses no format, a month written with its name
  or its number beside the four-digit year (``Jan 2024``, ``2024 January``, ``2024/01``,
  ``01/2024``, ``2024M01``; :data:`MONTH_LAYOUTS`), a quarter (``2024 Q1``,
  ``2024-Q1``, ``2024Q1``, ``Q1 2024``) or an ISO 8601 week without its day (``2024-W05``,
  ``2024 W05``; :data:`PERIOD_LAYOUTS`) is read as the first day of its period, an ISO week
  as its Monday, so the series lies on a monthly, quarterly or weekly grid.
* **Dates that do not exist.** A timestamp written like the file's dates (or like a date at all)
  whose numbers name no day or time (``2021-13-01``, ``2020-02-30``, ``10:61``) is refused as
  such, naming the number, rather than as a timestamp in another format.
* **Time zones.** Either every timestamp carries a UTC offset or none does. The offsets of one
  file must be one time zone's: at most two, at most an hour apart (standard and daylight-saving
  time, e.g. +01:00 and +02:00). When the clock times of the file vary (hourly readings, say),
  each timestamp is the instant it names and is kept in UTC: the hour that the spring change of
  clock skips is no gap, the hour that autumn repeats no duplicate, and the same readings
  written in UTC or in local time with their offsets are the same series. When every timestamp
  has the same clock time (dates at midnight: daily, weekly, monthly data), the local date as
  written is kept and the offset dropped, so the series stays on its calendar grid across a
  change of clock.
* Dates must lie within :data:`STORABLE_YEARS`; steps within ±:data:`MAX_INTEGER_STEP`.
"""

from __future__ import annotations

import calendar
import datetime
import re
import warnings
from typing import NoReturn

import numpy as np
import pandas as pd
from pandas.tseries.api import guess_datetime_format

from app.core.csv_chunks import joined
from app.core.errors import InputFileError, shorten

ISO8601 = "ISO8601"
STEPS = "steps"
DATES = "dates"
# Integer steps beyond 2**53 are not exact as floats (and beyond 2**63 do not fit the store).
MAX_INTEGER_STEP = 2**53
# Dates are kept as nanoseconds since 1970 (pandas' default unit), which spans these years.
STORABLE_YEARS = f"{pd.Timestamp.min.year + 1}-{pd.Timestamp.max.year - 1}"
# No way of writing a date and time is longer (and guessing the format of a long text is slow).
MAX_DATE_CHARS = 64
# Daylight-saving time moves the clock by an hour (half an hour on Lord Howe Island).
MAX_ZONE_STEP_MINUTES = 60
NS_PER_MINUTE = 60 * 10**9
NS_PER_DAY = 24 * 60 * NS_PER_MINUTE
# Month layouts pandas does not guess (it reads 2024-01 as ISO 8601), tried when it guesses none.
# Two-digit years (Jan-49) are not among them: read as 2049 (the strptime rule) where a
# spreadsheet meant 1949, they would move a series by a century without a word. Nor is a year
# and month parted by a dot: a spreadsheet that keeps 1949.10 as a number writes 1949.1, which
# read as January made October a duplicate of it.
_DOTTED_MONTH = re.compile(r"\d{4}\.\d{1,2}")  # pandas' ISO 8601 parser reads it; ISO 8601 does not write it
MONTH_LAYOUTS = ("%b %Y", "%B %Y", "%Y %b", "%Y %B", "%b-%Y", "%B-%Y", "%Y/%m", "%m/%Y", "%YM%m")
# Layouts no strftime format writes, by the name a message gives them: quarters, and ISO weeks
# without their day (ISO 8601 writes a week 2024-W05 and its Monday 2024-W05-1).
PERIOD_LAYOUTS = {
    "year and quarter (2024 Q1)": re.compile(r"^(?P<year>\d{4})[-/: ]?Q(?P<quarter>[1-4])$", re.IGNORECASE),
    "quarter and year (Q1 2024)": re.compile(r"^Q(?P<quarter>[1-4])[-/: ]?(?P<year>\d{4})$", re.IGNORECASE),
    "ISO week (2024-W05)": re.compile(r"^(?P<year>\d{4})[- ]?W(?P<week>\d{2})$", re.IGNORECASE),
}
# The same written with any number, for a message naming a quarter or week that does not exist.
_PERIOD_NUMBERS = (
    re.compile(r"(?P<year>\d{4})[-/: ]?(?P<kind>[QW])(?P<number>\d{1,2})", re.IGNORECASE),
    re.compile(r"(?P<kind>Q)(?P<number>\d{1,2})[-/: ]?(?P<year>\d{4})", re.IGNORECASE),
)
_CLOCK_WORDS = ("now", "today")  # pandas reads them as the time of reading, whatever the format
_OFFSET_SUFFIX = r"(?i)(?<=\d)\s?(?:(?P<z>z)|(?P<sign>[+-])(?P<hours>\d\d):?(?P<minutes>\d\d)?)$"
# The numbered fields of a date format, the digits each is written with and the numbers that
# exist, in the order a reading is checked (the day's upper end is its month's length).
_FIELDS = {
    "Y": ("year", r"\d{4}", 1, 9999), "m": ("month", r"\d{1,2}", 1, 12), "d": ("day", r"\d{1,2}", 1, 31),
    "H": ("hour", r"\d{1,2}", 0, 23), "M": ("minute", r"\d{1,2}", 0, 59), "S": ("second", r"\d{1,2}", 0, 59),
}
_TIME_FIELDS = ("hour", "minute", "second")
# A year whose February has 29 days: the longest month for a date written without its year.
_LEAP_YEAR = 2000
# Numbers of these widths, in a text guessed for its layout, are replaced by ones any date
# field takes, so that pandas guesses the layout of a date whose own numbers do not exist.
_POSSIBLE_NUMBERS = {1: "1", 2: "01", 4: str(_LEAP_YEAR)}


class TimestampColumn:
    """The timestamps of a file, fed chunk by chunk with :meth:`add`; :meth:`stamps` gives those of
    the rows kept, once the whole column has been seen.

    Parameters
    ----------
    name : str
        The file's name, for messages.
    date_format : str, optional
        A ``strftime`` format every date is read with (``%d/%m/%Y``); by default the first
        timestamp's format (see the module docstring).
    """

    def __init__(self, name: str, date_format: str | None = None) -> None:
        self.name = name
        self.date_format = date_format or None
        self.kind: str | None = None
        self._first: tuple[int, str] = (0, "")
        self._kept: dict[str, list[np.ndarray]] = {}  # each reading still possible -> stamps of kept rows
        self._readings_differ: tuple[int, str, str | None] | None = None
        self._chunk: tuple[np.ndarray, np.ndarray | None] = (np.zeros(0, dtype=np.int64), None)  # lines, series
        self._offsets: dict[int, tuple[int, str]] = {}  # UTC offset in minutes -> first line, text
        self._has_offsets: bool | None = None
        self._kept_offsets: list[np.ndarray] = []  # the UTC offset of each kept row, in minutes

    def add(self, cells: np.ndarray, lines: np.ndarray, keep: np.ndarray, series: np.ndarray | None = None) -> None:
        """Read a chunk's timestamp cells (on ``lines``); keep those where ``keep`` holds.
        ``series`` (the series id of each row, in a long file) lets a refusal name the series.

        Raises
        ------
        InputFileError
            Naming the first line whose timestamp cannot be read (see the module docstring).
        """
        texts = pd.Series(cells, dtype=object)
        self._chunk = (lines, series)
        if self.kind is None:
            self._start(texts, lines)
        if self.kind == STEPS:
            self._kept[STEPS].append(self._steps(texts, lines)[keep])
            return
        readings, offsets = self._dates(texts, lines)
        for fmt, stamps in readings.items():
            self._kept[fmt].append(stamps[keep])
        if offsets is not None:
            self._kept_offsets.append(offsets[keep])

    def stamps(self) -> np.ndarray:
        """The kept rows' timestamps in file order: steps, or nanoseconds since 1970 (in UTC for
        offsets on varying clock times, else the local clock time; module notes).

        Raises
        ------
        InputFileError
            When the dates read differently month first and day first and nothing tells which.
        """
        if self._readings_differ is not None and len(self._kept) > 1:
            line, text, series = self._readings_differ
            month_first, day_first = self._kept
            self._refuse(
                line, text, f"reads as another date day first ({day_first}) than month first ({month_first}), and "
                f"no date in the file tells which; give the date format (for example --date-format {day_first})", series,
            )
        chunks = next(iter(self._kept.values()), [])
        stamps = joined(chunks) if chunks else np.empty(0, dtype=np.int64)
        if self._has_offsets and self._kept_offsets and np.unique(stamps % NS_PER_DAY).size > 1:
            stamps = stamps - joined(self._kept_offsets).astype(np.int64) * NS_PER_MINUTE
        return stamps

    def index(self, stamps: np.ndarray) -> pd.Index:
        """The pandas index of some of :meth:`stamps`."""
        if self.kind == STEPS:
            return pd.Index(stamps, name="timestamp")
        return pd.DatetimeIndex(stamps.view("datetime64[ns]"), name="timestamp")

    def _start(self, texts: pd.Series, lines: np.ndarray) -> None:
        """Steps or dates, and the date formats the first timestamp allows."""
        self._first = (int(lines[0]), texts.iloc[0])
        if np.isfinite(_steps(texts.iloc[:1]))[0]:
            self.kind = STEPS
            self._kept = {STEPS: []}
            return
        self.kind = DATES
        formats = [self.date_format] if self.date_format else _formats_of(texts.iloc[0])
        if not formats:
            self._refuse(
                lines[0], texts.iloc[0], _nonexistent(texts.iloc[0], []) or "is not a date, time or integer step Lagdesk "
                "recognises; give its format with --date-format (for example %Y day %j for '2024 day 032')",
            )
        self._kept = {fmt: [] for fmt in formats}

    def _steps(self, texts: pd.Series, lines: np.ndarray) -> np.ndarray:
        steps = _steps(texts)
        unread = np.isnan(steps)
        if unread.any():
            i = int(np.flatnonzero(unread)[0])
            self._refuse(lines[i], texts.iloc[i], "is not an integer step like the others")
        return steps.astype(np.int64)

    def _dates(self, texts: pd.Series, lines: np.ndarray) -> tuple[dict[str, np.ndarray], np.ndarray | None]:
        """The chunk read with every format still possible (nanoseconds, local clock time), and
        the UTC offset of each timestamp in minutes (None without offsets)."""
        readings: dict[str, tuple[pd.Series, np.ndarray | None]] = {}
        failures: dict[str, int] = {}
        for fmt in self._kept:
            local, offsets = self._parse(texts, fmt)
            unread = local.isna().to_numpy()
            if unread.any():
                failures[fmt] = int(np.flatnonzero(unread)[0])
            else:
                readings[fmt] = (local, offsets)
        if not readings:
            i = max(failures.values())  # where the last possible reading breaks
            self._refuse(lines[i], texts.iloc[i], self._misread_reason(texts.iloc[i]))
        self._kept = {fmt: chunks for fmt, chunks in self._kept.items() if fmt in readings}
        local, offsets = next(iter(readings.values()))
        self._check_zones(offsets, texts, lines)
        outside = ((local < pd.Timestamp.min) | (local > pd.Timestamp.max)).to_numpy()
        if outside.any():
            i = int(np.flatnonzero(outside)[0])
            self._refuse(lines[i], texts.iloc[i], f"is outside the years {STORABLE_YEARS} that can be stored")
        stamps = {fmt: reading.to_numpy(dtype="datetime64[ns]").view(np.int64) for fmt, (reading, _) in readings.items()}
        if len(stamps) > 1 and self._readings_differ is None:
            first, second = stamps.values()
            differ = np.flatnonzero(first != second)
            if differ.size:
                self._readings_differ = (int(lines[differ[0]]), texts.iloc[differ[0]], self._series_on(int(lines[differ[0]])))
        return stamps, offsets if self._has_offsets else None

    def _parse(self, texts: pd.Series, fmt: str) -> tuple[pd.Series, np.ndarray | None]:
        """Local clock times (NaT where unreadable) and the UTC offset of each, in minutes (NaN
        where none is written); no offsets at all for a chunk without any."""
        local, offsets = self._parse_all(texts, fmt)
        separator = self._first[1][4:5]
        if fmt == ISO8601 and separator and not separator.isdigit():
            # pandas reads 2022/07/01 and 2022.07.01 as ISO 8601 too: a date keeps the first
            # timestamp's separator after the year. A year alone (1821, a yearly series beside
            # monthly ones) has none and stays readable.
            after_year = texts.str.slice(4, 5)
            local = local.mask(after_year.str.fullmatch(r"[^\d]") & (after_year != separator))
        return local, offsets

    def _parse_all(self, texts: pd.Series, fmt: str) -> tuple[pd.Series, np.ndarray | None]:
        """:meth:`_parse` before the check of the ISO 8601 separator."""
        if fmt in PERIOD_LAYOUTS:
            return _period_starts(texts, fmt), None
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", UserWarning)
                try:
                    parsed = pd.to_datetime(texts, format=fmt, errors="coerce")
                except ValueError as exc:
                    if "Mixed timezones" not in str(exc):
                        raise
                    instants = pd.to_datetime(texts, format=fmt, errors="coerce", utc=True)
                    offsets = _offset_minutes(texts)
                    shift = pd.to_timedelta(np.nan_to_num(offsets), unit="min")
                    return (instants.dt.tz_localize(None) + shift).mask(texts.isin(_CLOCK_WORDS)), offsets
        except (ValueError, re.error) as exc:  # re.error: a directive given twice (%d/%m/%m)
            raise InputFileError(self.name, f"the date format {fmt!r} cannot be used ({exc})") from None
        fixed: np.ndarray | None = None  # one offset for the chunk, or none
        if parsed.dt.tz is not None:
            offset = parsed.dt.tz.utcoffset(None)
            fixed = np.full(len(parsed), np.nan if offset is None else offset.total_seconds() / 60)
            parsed = parsed.dt.tz_localize(None)
        return parsed.mask(texts.isin(_CLOCK_WORDS)), fixed

    def _check_zones(self, offsets: np.ndarray | None, texts: pd.Series, lines: np.ndarray) -> None:
        """Offsets on every timestamp or on none, and those of one time zone."""
        has_offset = np.zeros(len(texts), dtype=bool) if offsets is None else ~np.isnan(offsets)
        if self._has_offsets is None:
            self._has_offsets = bool(has_offset[0])
        differs = has_offset != self._has_offsets
        if differs.any():
            i = int(np.flatnonzero(differs)[0])
            line, text = self._first
            here, there = ("no", "one") if self._has_offsets else ("a", "none")
            self._refuse(
                lines[i], texts.iloc[i], f"has {here} UTC offset (time zone), but the timestamp on line {line} "
                f"({shorten(text)!r}) has {there}: give every timestamp of the file an offset, or none",
            )
        if offsets is None or not self._has_offsets:
            return
        for minutes in np.unique(offsets):
            if int(minutes) in self._offsets:
                continue
            i = int(np.flatnonzero(offsets == minutes)[0])
            seen = sorted(self._offsets)
            if len(seen) == 2 or any(abs(minutes - other) > MAX_ZONE_STEP_MINUTES for other in seen):
                others = " and ".join(f"{_offset_text(m)} (line {self._offsets[m][0]})" for m in seen)
                self._refuse(
                    lines[i], texts.iloc[i], f"is at UTC{_offset_text(minutes)}, another time zone than {others}: "
                    f"the offsets of one file must be one time zone's (standard and daylight-saving time, at most "
                    f"{MAX_ZONE_STEP_MINUTES} minutes apart)",
                )
            self._offsets[int(minutes)] = (int(lines[i]), texts.iloc[i])

    def _misread_reason(self, text: str) -> str:
        line, first = self._first
        nonexistent = _nonexistent(text, [self.date_format] if self.date_format else _layouts(first))
        if nonexistent:
            return nonexistent
        if not _formats_of(text):
            return "is not a date, time or integer step"
        if self.date_format:
            return f"does not match the date format {self.date_format!r}"
        return f"is not written like the first timestamp {shorten(first)!r} (line {line}): the timestamps of a file must share one format"

    def _series_on(self, line: int) -> str | None:
        """The series id of ``line`` in the chunk being read (None in a wide file)."""
        lines, series = self._chunk
        at = np.flatnonzero(lines == line)
        return str(series[at[0]]) if series is not None and at.size else None

    def _refuse(self, line: int, text: str, why: str, series: str | None = None) -> NoReturn:
        series = series if series is not None else self._series_on(line)
        where = f"line {line}" + (f" (series {shorten(series)!r})" if series is not None else "")
        raise InputFileError(self.name, f"{where}: timestamp {shorten(text)!r} {why}")


def _steps(texts: pd.Series) -> np.ndarray:
    """Each cell as an integer step, NaN where it is not one."""
    numbers = pd.to_numeric(texts, errors="coerce").to_numpy(dtype=float, copy=True)
    numbers[~((numbers == np.round(numbers)) & (np.abs(numbers) <= MAX_INTEGER_STEP))] = np.nan
    return numbers


def _formats_of(text: str) -> list[str]:
    """The formats a timestamp can be read with: ISO 8601, or those of :func:`_layouts`."""
    if len(text) > MAX_DATE_CHARS or text in _CLOCK_WORDS:
        return []
    if _reads(text, ISO8601) and not _DOTTED_MONTH.fullmatch(text):
        return [ISO8601]
    return [fmt for fmt in _layouts(text) if _reads(text, fmt)]


def _layouts(text: str) -> list[str]:
    """pandas' guesses of the ``strftime`` format of ``text``, month first and day first (the
    latter not when it puts the year first: nobody writes year, day, month); where it guesses
    none, the month and period layouts (:data:`MONTH_LAYOUTS`, :data:`PERIOD_LAYOUTS`)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)
        month_first, day_first = guess_datetime_format(text), guess_datetime_format(text, dayfirst=True)
    guesses = [month_first, None if day_first and day_first.startswith("%Y") else day_first]
    return list(dict.fromkeys(fmt for fmt in guesses if fmt)) or [*MONTH_LAYOUTS, *PERIOD_LAYOUTS]


def _period_starts(texts: pd.Series, layout: str) -> pd.Series:
    """The first day of the quarter or the Monday of the ISO week each text names in ``layout``
    (:data:`PERIOD_LAYOUTS`); NaT where it is not written so or names no week (W53 of a year
    of 52 weeks)."""
    parts = texts.astype(str).str.strip().str.extract(PERIOD_LAYOUTS[layout])
    if "quarter" in parts:
        months = (3 * pd.to_numeric(parts["quarter"]) - 2).astype("Int64").astype(str).str.zfill(2)
        return pd.to_datetime(parts["year"] + "-" + months + "-01", format="%Y-%m-%d", errors="coerce")
    return pd.to_datetime(parts["year"] + "-W" + parts["week"] + "-1", format="%G-W%V-%u", errors="coerce")


def _nonexistent(text: str, layouts: list[str]) -> str | None:
    """Why ``text`` is no date when it is written in one of ``layouts`` (a file's formats), or
    else in a layout of its own, but a number in it does not exist: month 13, 30 February, hour
    25. Of several readings (day first and month first) the one that gets furthest is named (a
    day past its month's end before a month past 12). None when ``text`` is written in none of
    these layouts, or some reading of it finds every number possible.
    """
    if len(text) > MAX_DATE_CHARS:
        return None
    if (period := _period_problem(text)) is not None:
        return period
    own = _layouts(re.sub(r"\d+", lambda digits: _POSSIBLE_NUMBERS.get(len(digits[0]), digits[0]), text))
    for candidates in (layouts, own):
        readings = [match.groupdict() for layout in candidates if (match := _layout_pattern(layout).fullmatch(text))]
        problems = [problem for fields in readings if (problem := _first_problem(fields)) is not None]
        if readings:
            return max(problems)[1] if len(problems) == len(readings) else None
    return None


def _period_problem(text: str) -> str | None:
    """Why ``text``, written as a quarter or an ISO week (:data:`PERIOD_LAYOUTS`), names none
    (quarter 5, week 53 of a year of 52 weeks); None when it is not so written or names one."""
    match = _PERIOD_NUMBERS[0].fullmatch(text.strip()) or _PERIOD_NUMBERS[1].fullmatch(text.strip())
    if match is None:
        return None
    number, year = int(match["number"]), int(match["year"])
    if match["kind"].upper() == "Q":
        return None if 1 <= number <= 4 else f"is not a date: there is no quarter {number} (quarters run from 1 to 4)"
    weeks = datetime.date(year, 12, 28).isocalendar().week  # 28 December lies in the last ISO week of its year
    return None if 1 <= number <= weeks else f"is not a date: {year} has no ISO week {number} (its weeks run from 1 to {weeks})"


def _layout_pattern(layout: str) -> re.Pattern[str]:
    """A pattern that texts written in ``layout`` match whatever their numbers, with a group for
    each numbered field (``2021-13-01`` matches that of ``%Y-%m-%d``, month ``13``); any other
    directive (a month name, a time zone) matches any text."""
    parts = re.split(r"%(.)", layout)  # text, directive, text, ...
    return re.compile("".join(
        (f"(?P<{_FIELDS[part][0]}>{_FIELDS[part][1]})" if part in _FIELDS else ".+?") if i % 2 else re.escape(part)
        for i, part in enumerate(parts)
    ), re.IGNORECASE)


def _first_problem(fields: dict[str, str]) -> tuple[int, str] | None:
    """The first of a reading's ``fields`` (name -> digits) whose number does not exist, as its
    rank in :data:`_FIELDS` and the reason; None when every one exists."""
    numbers = {name: int(digits) for name, digits in fields.items()}
    for rank, (name, _, low, high) in enumerate(_FIELDS.values()):
        if name == "day" and "month" in numbers:
            high = calendar.monthrange(numbers.get("year", _LEAP_YEAR), numbers["month"])[1]
        number = numbers.get(name)
        if number is None or low <= number <= high:
            continue
        if name in _TIME_FIELDS:
            return rank, f"is not a time: there is no {name} {number} ({name}s run from {low} to {high})"
        if name == "day" and "month" in numbers:
            month = calendar.month_name[numbers["month"]] + (f" {numbers['year']}" if "year" in numbers else "")
            return rank, f"is not a date: {month} has no day {number}"
        return rank, f"is not a date: there is no {name} {number}"
    return None


def _reads(text: str, fmt: str) -> bool:
    if fmt in PERIOD_LAYOUTS:
        return bool(_period_starts(pd.Series([text], dtype=object), fmt).notna().all())
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", UserWarning)
            return bool(pd.to_datetime(pd.Series([text], dtype=object), format=fmt, errors="coerce", utc=True).notna().all())
    except ValueError:
        return False


def _offset_minutes(texts: pd.Series) -> np.ndarray:
    """The UTC offset written at the end of each timestamp, in minutes; NaN where there is none."""
    parts = texts.str.extract(_OFFSET_SUFFIX)
    sign = parts["sign"].map({"+": 1.0, "-": -1.0}).to_numpy(dtype=float)
    hours = pd.to_numeric(parts["hours"]).to_numpy(dtype=float)
    minutes = pd.to_numeric(parts["minutes"]).fillna(0).to_numpy(dtype=float)
    offsets = sign * (60 * hours + minutes)
    offsets[parts["z"].notna().to_numpy()] = 0.0
    return offsets


def _offset_text(minutes: float) -> str:
    sign = "-" if minutes < 0 else "+"
    hours, rest = divmod(int(abs(minutes)), 60)
    return f"{sign}{hours:02d}:{rest:02d}"
