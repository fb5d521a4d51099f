"""Checks of app.core.portfolio_file: long and wide CSV files, and the errors for bad ones.

Each file is written byte for byte in the test, so the expected series, values and line
numbers (line 1 is the header) can be read off the file itself.
"""

from __future__ import annotations

import datetime
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from app.core import csv_chunks
from app.core.errors import ECHO_CHARS, InputFileError, SeriesProblem
from app.core.portfolio_file import ReadLimits, read_portfolio
from app.core.prepare import prepare_series
from app.core.series_ids import MAX_ID_LENGTH, id_problem


def _write(tmp_path: Path, text: str | bytes, name: str = "portfolio.csv") -> Path:
    path = tmp_path / name
    path.write_bytes(text if isinstance(text, bytes) else text.encode("utf-8"))
    return path


def _by_id(portfolio) -> dict:
    return {s.series_id: s for s in portfolio.series}


LONG = (
    "series_id,timestamp,value\n"
    "shop-a,2024-01-01,10\n"
    "shop-a,2024-01-02,\n"
    "shop-b,2024-01-01,7.5\n"
    "shop-a,2024-01-03,12\n"
    "shop-b,2024-01-02,-1e2\n"
)


def test_long_layout_reads_series_values_and_lines(tmp_path):
    portfolio = read_portfolio(_write(tmp_path, LONG))
    series = _by_id(portfolio)
    assert list(series) == ["shop-a", "shop-b"] and portfolio.problems == []
    a, b = series["shop-a"], series["shop-b"]
    assert a.values.index.equals(pd.DatetimeIndex(["2024-01-01", "2024-01-02", "2024-01-03"], name="timestamp"))
    np.testing.assert_array_equal(a.values.to_numpy(), [10.0, np.nan, 12.0])  # the empty cell is a gap
    np.testing.assert_array_equal(a.lines, [2, 3, 5])
    np.testing.assert_array_equal(b.values.to_numpy(), [7.5, -100.0])
    np.testing.assert_array_equal(b.lines, [4, 6])


def test_long_layout_with_other_column_names(tmp_path):
    text = "item,day,qty\nx,1,3\nx,2,4\n"
    portfolio = read_portfolio(_write(tmp_path, text), id_col="item", time_col="day", value_col="qty")
    x = _by_id(portfolio)["x"]
    assert x.values.index.tolist() == [1, 2] and x.values.tolist() == [3.0, 4.0]


def test_wide_layout_reads_one_series_per_column(tmp_path):
    text = "timestamp,north,south\n1,,5\n2,2.5,6\n3,3,\n4,4,\n5,,9\n"
    portfolio = read_portfolio(_write(tmp_path, text), layout="wide")
    series = _by_id(portfolio)
    assert list(series) == ["north", "south"] and portfolio.problems == []
    # Leading and trailing empty cells are outside the series; inner ones are gaps.
    assert series["north"].values.index.tolist() == [2, 3, 4]
    np.testing.assert_array_equal(series["north"].lines, [3, 4, 5])
    np.testing.assert_array_equal(series["south"].values.to_numpy(), [5, 6, np.nan, np.nan, 9])
    np.testing.assert_array_equal(series["south"].lines, [2, 3, 4, 5, 6])


def test_wide_column_without_any_value_is_a_problem(tmp_path):
    portfolio = read_portfolio(_write(tmp_path, "timestamp,a,b\n1,1,\n2,2,\n"), layout="wide")
    assert [s.series_id for s in portfolio.series] == ["a"]
    assert [(p.series_id, p.flag) for p in portfolio.problems] == [("b", "empty")]


def test_non_numeric_cell_names_series_and_line_and_spares_the_rest(tmp_path):
    text = LONG + "shop-b,2024-01-03,twelve\n"
    portfolio = read_portfolio(_write(tmp_path, text))
    assert [s.series_id for s in portfolio.series] == ["shop-a"]
    (problem,) = portfolio.problems
    assert (problem.series_id, problem.row, problem.flag) == ("shop-b", 7, "bad_value")
    assert "'twelve' is not a number" in str(problem) and "line 7" in str(problem)


def test_non_numeric_cell_in_wide_layout(tmp_path):
    portfolio = read_portfolio(_write(tmp_path, "timestamp,a,b\n1,1,2\n2,2,n/a\n3,3,4\n"), layout="wide")
    (problem,) = portfolio.problems
    assert (problem.series_id, problem.row) == ("b", 3)
    assert [s.series_id for s in portfolio.series] == ["a"]


@pytest.mark.parametrize("cell", ["inf", "-Infinity", "nan", "1e999"])
def test_non_finite_cell_is_named(tmp_path, cell):
    portfolio = read_portfolio(_write(tmp_path, f"series_id,timestamp,value\nz,1,1\nz,2,{cell}\n"))
    (problem,) = portfolio.problems
    assert problem.row == 3 and "is not finite" in str(problem) and repr(cell) in str(problem)


def test_missing_column_names_the_column_and_the_header(tmp_path):
    with pytest.raises(InputFileError) as info:
        read_portfolio(_write(tmp_path, "series_id,time,value\na,1,2\n"))
    message = str(info.value)
    assert "no column named 'timestamp'" in message and "'time'" in message
    assert message.startswith(str(tmp_path / "portfolio.csv"))


def test_a_missing_column_says_how_to_name_it(tmp_path):
    """In the words of both places that show the message: the option of identify and import,
    and the field of the upload page."""
    with pytest.raises(InputFileError) as info:
        read_portfolio(_write(tmp_path, "month,a,b\n2024-01-01,1,2\n"), layout="wide")
    assert str(info.value).endswith(
        ": no column named 'timestamp'; the header has 'month', 'a', 'b'; "
        "name the time column with --time-col (the upload's \"Time\" field)"
    )
    with pytest.raises(InputFileError) as info:
        read_portfolio(_write(tmp_path, "id,timestamp,amount\na,1,2\n"))
    assert str(info.value).endswith(
        ": no column named 'series_id', 'value'; the header has 'id', 'timestamp', 'amount'; name the series id and "
        "value columns with --id-col and --value-col (the upload's \"Series id\" and \"Value\" fields); or, if each column "
        "beside the time column is a series, read it with --layout wide (the upload's wide layout)"
    )
    # A wide file read as long: the time column is missing too, and the first column is named.
    with pytest.raises(InputFileError) as info:
        read_portfolio(_write(tmp_path, "date,shopA_milk,shopB_eggs\n2024-01-01,1,2\n"))
    assert str(info.value).endswith(
        "; or, if each column beside the time column is a series, read it with --layout wide --time-col 'date' "
        "(the upload's wide layout, 'date' as its \"Time\")"
    )


def test_other_delimiter_is_hinted(tmp_path):
    with pytest.raises(InputFileError, match="another delimiter"):
        read_portfolio(_write(tmp_path, "series_id|timestamp|value\na|1|2\n"))


def test_semicolons_with_decimal_commas_and_tabs_are_read(tmp_path):
    # A spreadsheet set to a European locale saves CSV with semicolons and decimal commas.
    semicolons = read_portfolio(_write(tmp_path, "series_id;timestamp;value\na;2024-01-01;12,5\na;2024-01-02;-0,25\n"))
    assert _by_id(semicolons)["a"].values.tolist() == [12.5, -0.25]
    wide = read_portfolio(_write(tmp_path, "timestamp;x;y\n1;1,5;2\n2;3;\n"), layout="wide")
    assert _by_id(wide)["x"].values.tolist() == [1.5, 3.0] and _by_id(wide)["y"].values.tolist()[0] == 2.0
    tabs = read_portfolio(_write(tmp_path, "series_id\ttimestamp\tvalue\na\t1\t2.5\na\t2\t3\n"))
    assert _by_id(tabs)["a"].values.tolist() == [2.5, 3.0]
    # The decimal mark of a semicolon file is told by its values: a comma once one holds a comma
    # (its dots then part thousands), a point once a dot cannot part thousands; a dot before
    # three digits with neither seen yet (1.005: 1005 or 1.005?) is refused, not guessed.
    comma = read_portfolio(_write(tmp_path, "series_id;timestamp;value\na;1;1.234,5\na;2;900\na;3;1.005\nb;1;12.5\n"))
    assert _by_id(comma)["a"].values.tolist() == [1234.5, 900.0, 1005.0]
    assert [(p.series_id, p.row) for p in comma.problems] == [("b", 5)]  # 12.5 among decimal commas is no number
    point = read_portfolio(_write(tmp_path, "series_id;timestamp;value\na;1;100.0\na;2;109.833\n"))
    assert _by_id(point)["a"].values.tolist() == [100.0, 109.833]
    (problem,) = read_portfolio(_write(tmp_path, "series_id;timestamp;value\na;1;900\na;2;1.005\nb;1;2\n")).problems
    assert (problem.series_id, problem.row) == ("a", 3) and "'1.005' is ambiguous in a file separated by semicolons" in str(problem)
    assert _by_id(read_portfolio(_write(tmp_path, "series_id,timestamp,value\na,1,1.005\n")))["a"].values.tolist() == [1.005]


@pytest.mark.parametrize("mark", ["NA", "n/a", "n.a.", "-", "#N/A", "?"])
def test_a_missing_value_written_as_a_word_says_to_leave_the_cell_empty(tmp_path, mark):
    (problem,) = read_portfolio(_write(tmp_path, f"series_id,timestamp,value\na,1,{mark}\nb,1,2\n")).problems
    assert str(problem).endswith(f"value {mark!r} is not a number; a missing value is an empty cell")


@pytest.mark.parametrize("text", ["", "\n\n", "   \n"], ids=["empty", "blank lines", "spaces"])
def test_empty_file(tmp_path, text):
    with pytest.raises(InputFileError, match="the file is empty"):
        read_portfolio(_write(tmp_path, text))


def test_header_only(tmp_path):
    with pytest.raises(InputFileError, match="has a header but no data rows"):
        read_portfolio(_write(tmp_path, "series_id,timestamp,value\n"))


def test_byte_order_mark_is_handled(tmp_path):
    portfolio = read_portfolio(_write(tmp_path, b"\xef\xbb\xbf" + LONG.encode("utf-8")))
    assert [s.series_id for s in portfolio.series] == ["shop-a", "shop-b"]


def test_not_utf8(tmp_path):
    with pytest.raises(InputFileError, match="not UTF-8"):
        read_portfolio(_write(tmp_path, "series_id,timestamp,value\nMünchen,1,2\n".encode("latin-1")))


def test_bad_timestamp_names_the_line_and_the_series(tmp_path):
    with pytest.raises(InputFileError, match=r"line 3 \(series 'a'\): timestamp 'soon' is not a date"):
        read_portfolio(_write(tmp_path, "series_id,timestamp,value\na,2024-01-01,1\na,soon,2\n"))
    with pytest.raises(InputFileError, match=r"line 4 \(series 'shop 2/milk'\): timestamp '2024-13-45' is not a date"):
        read_portfolio(_write(tmp_path, "series_id,timestamp,value\na,2024-01-01,1\nshop 2/milk,2024-01-01,1\nshop 2/milk,2024-13-45,2\n"))
    # A wide file's timestamp belongs to every series of its row: the line alone is named.
    with pytest.raises(InputFileError, match=r": line 3: timestamp 'soon' is not a date"):
        read_portfolio(_write(tmp_path, "timestamp,a,b\n2024-01-01,1,2\nsoon,2,3\n"), layout="wide")


def test_empty_series_id_names_the_line(tmp_path):
    with pytest.raises(InputFileError, match=r"line 3: empty series id"):
        read_portfolio(_write(tmp_path, "series_id,timestamp,value\na,1,1\n ,2,2\n"))


def test_unknown_layout_and_display_name(tmp_path):
    with pytest.raises(InputFileError, match=r"^upload\.csv: layout must be one of long, wide"):
        read_portfolio(_write(tmp_path, LONG), layout="tall", display_name="upload.csv")


def test_file_line_reaches_the_preparation_error(tmp_path):
    # Read, then prepare: a duplicate timestamp is reported on the line where it stands.
    rows = "".join(f"a,2024-01-{day:02d},{day}\n" for day in range(1, 21))
    text = "series_id,timestamp,value\n" + rows + "a,2024-01-05,99\n"
    raw = _by_id(read_portfolio(_write(tmp_path, text)))["a"]
    with pytest.raises(SeriesProblem) as info:
        prepare_series(raw.values, raw.series_id, raw.lines)
    assert info.value.row == 22 and info.value.flag == "duplicate_timestamp"


def test_line_numbers_survive_a_blank_line(tmp_path):
    portfolio = read_portfolio(_write(tmp_path, "series_id,timestamp,value\na,1,1\n\na,2,x\n"))
    (problem,) = portfolio.problems
    assert problem.row == 4


# Issue 19: reading in chunks, physical lines, one date format, one time zone, safe ids, limits.

@pytest.fixture
def tiny_chunks(monkeypatch):
    """Chunks of a few cells, so that every rule is also exercised across chunk boundaries."""
    monkeypatch.setattr(csv_chunks, "CHUNK_CELLS", 7)


def _long(rows: list[tuple]) -> str:
    return "series_id,timestamp,value\n" + "".join(",".join(map(str, row)) + "\n" for row in rows)


@pytest.mark.parametrize("chunked", [False, True], ids=["one chunk", "many chunks"])
def test_interleaved_series_are_read_whole_in_any_chunking(tmp_path, monkeypatch, chunked):
    if chunked:
        monkeypatch.setattr(csv_chunks, "CHUNK_CELLS", 7)
    rows = [(sid, t, t * 10 + i) for t in range(1, 16) for i, sid in enumerate("abc")]
    portfolio = read_portfolio(_write(tmp_path, _long(rows)))
    series = _by_id(portfolio)
    assert list(series) == ["a", "b", "c"]
    assert series["b"].values.index.tolist() == list(range(1, 16))
    assert series["b"].values.tolist() == [t * 10 + 1.0 for t in range(1, 16)]
    np.testing.assert_array_equal(series["c"].lines, [4 + 3 * i for i in range(15)])


def test_lines_are_physical_after_quoted_line_breaks(tmp_path, tiny_chunks):
    text = (
        "series_id,timestamp,value,note\n"
        'a,1,1,"two\nlines"\n'
        'a,2,2,"three\r\nlines\rhere"\n'
        "a,3,3,\n"
        "\n"
        "a,4,x,\n"
    )
    (problem,) = read_portfolio(_write(tmp_path, text)).problems
    assert problem.row == 9 and "'x' is not a number" in str(problem)


def test_a_longer_row_is_refused_on_its_line_and_a_shorter_one_padded(tmp_path, tiny_chunks):
    with pytest.raises(InputFileError, match=r"line 5 has more fields than the header \(4, not 3\)"):
        read_portfolio(_write(tmp_path, _long([("a", 1, 1), ("a", 2, 2), ("a", 3, 3), ("a", 4, "4,5")])))
    a = _by_id(read_portfolio(_write(tmp_path, "series_id,timestamp,value\na,1,1\na,2\na,3,3\n")))["a"]
    np.testing.assert_array_equal(a.values.to_numpy(), [1.0, np.nan, 3.0])


@pytest.mark.parametrize("text", ['series_id,timestamp,value\n"a,1,1\n', 'series_id,timestamp,value\n"a"b,1,1\n'])
def test_broken_quoting_is_refused(tmp_path, text):
    with pytest.raises(InputFileError, match="is not a readable CSV file"):
        read_portfolio(_write(tmp_path, text))


def test_endless_line_and_huge_cell_stop_with_a_message(tmp_path, monkeypatch):
    with pytest.raises(InputFileError, match=f"line 3 has a cell longer than {csv_chunks.MAX_CELL_CHARS:,} characters"):
        read_portfolio(_write(tmp_path, 'series_id,timestamp,value\na,1,1\na,2,"' + "9" * (csv_chunks.MAX_CELL_CHARS + 1) + '"\n'))
    monkeypatch.setattr(csv_chunks, "MAX_LINE_CHARS", 1000)
    with pytest.raises(InputFileError, match="line 2 is longer than 1,000 characters"):
        read_portfolio(_write(tmp_path, "series_id,timestamp,value\n" + "\0" * 5000))


def test_undecodable_byte_names_its_line(tmp_path):
    with pytest.raises(InputFileError, match=r"not UTF-8 text \(line 3 holds the byte 0xFF"):
        read_portfolio(_write(tmp_path, b"series_id,timestamp,value\na,1,1\na,2,\xff\n"))


def test_repeated_column_names_are_refused(tmp_path):
    with pytest.raises(InputFileError, match=r"line 1: column 'b' appears more than once in the header \(columns 2, 4\)"):
        read_portfolio(_write(tmp_path, "timestamp,b,c,b\n1,1,2,3\n"), layout="wide")
    with pytest.raises(InputFileError, match="column 'value' appears more than once"):
        read_portfolio(_write(tmp_path, "series_id,timestamp,value,value\na,1,2,3\n"))
    # A repeated column the long layout does not read is no one's business.
    assert _by_id(read_portfolio(_write(tmp_path, "series_id,note,timestamp,value,note\na,x,1,2,y\n")))["a"].values.tolist() == [2.0]


def _stamps(tmp_path, stamps: list[str], **options) -> pd.Index:
    rows = [("a", ts, i) for i, ts in enumerate(stamps)]
    return _by_id(read_portfolio(_write(tmp_path, _long(rows)), **options))["a"].values.index


def test_dates_are_read_in_the_first_timestamps_format(tmp_path, tiny_chunks):
    iso = ["2024-01-01", "2024-01-02 06:00", "2024-01-03T12:00:00.5"]
    assert _stamps(tmp_path, iso).tolist() == pd.to_datetime(["2024-01-01", "2024-01-02 06:00", "2024-01-03 12:00:00.5"], format="ISO8601").tolist()
    # Day first: 01/03 could be either until the 13th says which, chunks later.
    day_first = [f"{d:02d}/03/2021" for d in range(1, 16)]
    assert _stamps(tmp_path, day_first).tolist() == pd.date_range("2021-03-01", periods=15).tolist()
    month_first = [f"03/{d:02d}/2021" for d in range(1, 16)]
    assert _stamps(tmp_path, month_first).tolist() == pd.date_range("2021-03-01", periods=15).tolist()
    dotted = ["31.12.2023", "01.01.2024"]
    assert _stamps(tmp_path, dotted).tolist() == pd.to_datetime(["2023-12-31", "2024-01-01"]).tolist()


def test_a_second_date_format_is_refused_on_its_line(tmp_path, tiny_chunks):
    with pytest.raises(InputFileError, match=r"line 5 \(series 'a'\): timestamp '01/04/2024' is not written like the first timestamp '2024-01-01' \(line 2\)"):
        _stamps(tmp_path, ["2024-01-01", "2024-02-01", "2024-03-01", "01/04/2024", "2024-05-01"])
    with pytest.raises(InputFileError, match=r"line 4 \(series 'a'\): timestamp '2024-03-01' is not written like the first timestamp '01/01/2024'"):
        _stamps(tmp_path, ["01/01/2024", "01/02/2024", "2024-03-01"])
    # pandas' ISO 8601 reader takes 2024/04/01 as well; the file's dates keep the first one's separator.
    with pytest.raises(InputFileError, match=r"line 5 \(series 'a'\): timestamp '2024/04/01' is not written like the first timestamp '2024-01-01'"):
        _stamps(tmp_path, ["2024-01-01", "2024-02-01", "2024-03-01", "2024/04/01"])
    # A year alone has no separator to differ (a yearly series beside monthly ones in one file).
    assert _stamps(tmp_path, ["1949-01-01", "1821"]).tolist() == pd.to_datetime(["1949-01-01", "1821-01-01"]).tolist()


def test_dates_that_read_both_ways_are_refused_unless_the_format_is_given(tmp_path, tiny_chunks):
    stamps = [f"01/{m:02d}/2024" for m in range(1, 13)]
    with pytest.raises(InputFileError) as info:
        _stamps(tmp_path, stamps)
    assert str(info.value).endswith(
        "line 3 (series 'a'): timestamp '01/02/2024' reads as another date day first (%d/%m/%Y) than month first (%m/%d/%Y), and no "
        "date in the file tells which; give the date format (for example --date-format %d/%m/%Y)"
    )
    assert _stamps(tmp_path, stamps, date_format="%d/%m/%Y").tolist() == pd.date_range("2024-01-01", periods=12, freq="MS").tolist()
    assert _stamps(tmp_path, stamps, date_format="%m/%d/%Y").tolist() == pd.date_range("2024-01-01", periods=12).tolist()
    with pytest.raises(InputFileError, match=r"line 2 \(series 'a'\): timestamp '01/01/2024' does not match the date format '%Y-%m-%d'"):
        _stamps(tmp_path, stamps, date_format="%Y-%m-%d")


@pytest.mark.parametrize("word", ["today", "now"])
def test_words_pandas_reads_as_the_current_time_are_not_dates(tmp_path, word):
    with pytest.raises(InputFileError, match=rf"line 3 \(series 'a'\): timestamp '{word}' is not a date"):
        _stamps(tmp_path, ["2024-01-01", word])
    with pytest.raises(InputFileError, match=rf"line 2 \(series 'a'\): timestamp '{word}' is not a date"):
        _stamps(tmp_path, [word, "2024-01-01"])


@pytest.mark.parametrize("date_format", ["%Y%Y", "%d/%m/%m"])
def test_a_date_format_with_a_directive_twice_is_refused_by_name(tmp_path, date_format):
    with pytest.raises(InputFileError, match=f"the date format '{date_format}' cannot be used"):
        _stamps(tmp_path, ["01/02/2024", "02/02/2024"], date_format=date_format)


def test_a_date_in_no_known_format_says_how_to_give_one(tmp_path):
    with pytest.raises(InputFileError, match=r"line 2 \(series 'a'\): timestamp '2024 day 001' is not a date, time or integer step Lagdesk recognises; give its format with --date-format"):
        _stamps(tmp_path, ["2024 day 001", "2024 day 002"])
    assert _stamps(tmp_path, ["2024 day 001", "2024 day 002"], date_format="%Y day %j").tolist() == pd.to_datetime(["2024-01-01", "2024-01-02"]).tolist()


@pytest.mark.parametrize("layout", ["%b %Y", "%B %Y", "%Y %b", "%b-%Y", "%Y/%m", "%m/%Y", "%YM%m"])
def test_months_written_without_a_day_are_read_as_their_first_day(tmp_path, tiny_chunks, layout):
    months = pd.date_range("2023-11-01", periods=16, freq="MS")
    assert _stamps(tmp_path, months.strftime(layout).tolist()).tolist() == months.tolist()


def test_a_year_and_month_parted_by_a_dot_are_not_guessed(tmp_path):
    # 1949.1 is how a spreadsheet that keeps 1949.10 as a number writes October: read as January
    # it made October a duplicate, with the advice to sum the two.
    with pytest.raises(InputFileError, match="give its format with --date-format"):
        _stamps(tmp_path, ["1949.09", "1949.1", "1949.11"])


def test_a_two_digit_year_is_not_guessed(tmp_path):
    # Jan-49 as a spreadsheet writes 1949: strptime's rule reads 2049, a century off without a
    # word, so such a file needs its format given (and the reader then answers for the century).
    with pytest.raises(InputFileError, match="give its format with --date-format"):
        _stamps(tmp_path, ["Jan-49", "Feb-49"])


@pytest.mark.parametrize("written", ["{y} Q{q}", "{y}-Q{q}", "{y}Q{q}", "{y}q{q}", "Q{q} {y}"])
def test_quarters_are_read_as_their_first_day_on_a_quarterly_grid(tmp_path, tiny_chunks, written):
    quarters = pd.period_range("2021Q3", periods=14, freq="Q")
    stamps = _stamps(tmp_path, [written.format(y=p.year, q=p.quarter) for p in quarters])
    assert stamps.tolist() == quarters.to_timestamp(how="start").tolist()
    prepared = prepare_series(pd.Series(np.arange(14.0), index=stamps), "a")
    assert prepared.freq.startswith("QS")


def test_iso_weeks_are_read_as_their_monday(tmp_path, tiny_chunks):
    # ISO 8601 week dates, checked against Python's implementation of the standard
    # (datetime.date.fromisocalendar): 2020 has 53 weeks, and its week 1 starts in 2019.
    weeks = [(2019, 52), (2020, 1), (2020, 52), (2020, 53), (2021, 1), (2021, 2)]
    stamps = _stamps(tmp_path, [f"{year}-W{week:02d}" for year, week in weeks])
    assert stamps.tolist() == [pd.Timestamp(datetime.date.fromisocalendar(year, week, 1)) for year, week in weeks]
    assert _stamps(tmp_path, ["2021 W01", "2021 W02"]).tolist() == pd.to_datetime(["2021-01-04", "2021-01-11"]).tolist()


@pytest.mark.parametrize(("bad", "why"), [
    ("2024 Q5", "is not a date: there is no quarter 5 (quarters run from 1 to 4)"),
    ("2021-W53", "is not a date: 2021 has no ISO week 53 (its weeks run from 1 to 52)"),
    ("2024/13", "is not a date: there is no month 13"),
])
def test_a_month_quarter_or_week_that_does_not_exist_is_named(tmp_path, bad, why):
    first = {"Q": "2024 Q1", "W": "2021-W01", "/": "2024/01"}[next(c for c in "QW/" if c in bad)]
    with pytest.raises(InputFileError) as info:
        _stamps(tmp_path, [first, bad])
    assert str(info.value).endswith(f"line 3 (series 'a'): timestamp {bad!r} {why}")


@pytest.mark.parametrize(("bad", "why"), [
    ("2021-13-01", "is not a date: there is no month 13"),
    ("2020-02-30", "is not a date: February 2020 has no day 30"),
    ("2021-01-01 24:00", "is not a time: there is no hour 24 (hours run from 0 to 23)"),
])
@pytest.mark.parametrize("line", [179, 2], ids=["mid-file", "first"])
def test_a_date_that_does_not_exist_is_named_as_such(tmp_path, tiny_chunks, bad, why, line):
    """Written like the other dates, but naming no day or time: the number is named, not the
    format (a first timestamp 2021-13-01 was read year, day, month)."""
    days = pd.date_range("2019-01-01", periods=200).strftime("%Y-%m-%d").tolist()
    days[line - 2] = bad
    with pytest.raises(InputFileError) as info:
        _stamps(tmp_path, days)
    assert str(info.value).endswith(f"portfolio.csv: line {line} (series 'a'): timestamp {bad!r} {why}")


def test_a_date_that_does_not_exist_is_named_in_the_files_reading_of_it(tmp_path, tiny_chunks):
    day_first, month_first = ["13/01/2021", "31/04/2021"], ["01/13/2021", "31/04/2021"]
    with pytest.raises(InputFileError, match=r"line 3 \(series 'a'\): timestamp '31/04/2021' is not a date: April 2021 has no day 31$"):
        _stamps(tmp_path, day_first)
    with pytest.raises(InputFileError, match=r"line 3 \(series 'a'\): timestamp '31/04/2021' is not a date: there is no month 31$"):
        _stamps(tmp_path, month_first)
    # While both readings are open, the one that gets further: a day past its month's end.
    with pytest.raises(InputFileError, match=r"timestamp '31/04/2021' is not a date: April 2021 has no day 31$"):
        _stamps(tmp_path, ["01/02/2021", "31/04/2021"])
    with pytest.raises(InputFileError, match=r"line 3 \(series 'a'\): timestamp '29/02/2021' is not a date: February 2021 has no day 29$"):
        _stamps(tmp_path, ["28/02/2021", "29/02/2021"], date_format="%d/%m/%Y")


def test_offsets_keep_the_local_date_of_calendar_data_and_put_clock_times_in_utc(tmp_path, tiny_chunks):
    # Europe/Berlin: +01:00 until 2024-03-31 02:00, then +02:00 until 2024-10-27 03:00.
    daily = [f"2024-03-{d:02d}T00:00:00{'+02:00' if d >= 31 else '+01:00'}" for d in range(25, 32)] + ["2024-04-01T00:00:00+02:00"]
    assert _stamps(tmp_path, daily).tolist() == pd.date_range("2024-03-25", periods=8).tolist()
    # Hourly readings are instants: spring's skipped hour is no gap, autumn's repeated one no duplicate.
    spring = ["2024-03-31T00:00:00+01:00", "2024-03-31T01:00:00+01:00", "2024-03-31T03:00:00+02:00", "2024-03-31T04:00:00+02:00"]
    assert _stamps(tmp_path, spring).tolist() == pd.date_range("2024-03-30 23:00", periods=4, freq="h").tolist()
    autumn = ["2024-10-27T01:00:00+02:00", "2024-10-27T02:00:00+02:00", "2024-10-27T02:00:00+01:00", "2024-10-27T03:00:00+01:00"]
    assert _stamps(tmp_path, autumn).tolist() == pd.date_range("2024-10-26 23:00", periods=4, freq="h").tolist()
    # The same readings written in UTC are the same timestamps.
    in_utc = [pd.Timestamp(t).tz_convert("UTC").strftime("%Y-%m-%dT%H:%M:%SZ") for t in spring + autumn]
    assert _stamps(tmp_path, in_utc).tolist() == _stamps(tmp_path, spring + autumn).tolist()
    # London writes Z in winter and +01:00 in summer.
    assert _stamps(tmp_path, ["2024-03-30T12:00:00Z", "2024-03-31T12:00:00+01:00"]).tolist() == pd.to_datetime(["2024-03-30 12:00", "2024-03-31 12:00"]).tolist()


def test_offsets_of_different_zones_or_with_and_without_are_refused(tmp_path, tiny_chunks):
    with pytest.raises(InputFileError, match=r"line 5 \(series 'a'\): timestamp '2024-01-04T00:00:00-05:00' is at UTC-05:00, another time zone than \+01:00 \(line 2\)"):
        _stamps(tmp_path, ["2024-01-01T00:00:00+01:00", "2024-01-02T00:00:00+01:00", "2024-01-03T00:00:00+01:00", "2024-01-04T00:00:00-05:00"])
    three = ["2024-01-01T00:00:00+01:00", "2024-07-01T00:00:00+02:00", "2024-08-01T00:00:00+03:00"]
    with pytest.raises(InputFileError, match=r"line 4 \(series 'a'\): .* is at UTC\+03:00, another time zone than \+01:00 \(line 2\) and \+02:00 \(line 3\)"):
        _stamps(tmp_path, three)
    with pytest.raises(InputFileError, match=r"line 3 \(series 'a'\): timestamp '2024-01-02T00:00:00' has no UTC offset \(time zone\), but the timestamp on line 2"):
        _stamps(tmp_path, ["2024-01-01T00:00:00+01:00", "2024-01-02T00:00:00"])


def test_bad_series_ids_are_rejected_with_the_reason_and_line(tmp_path, tiny_chunks):
    long_id = "q" * (MAX_ID_LENGTH + 1)
    text = _long([("ok/a", 1, 1), ("ok/a", 2, 2), ("a/../b", 1, 1), ("esc\x1b[2J", 1, 1), (long_id, 1, 1), ("ok/a", 3, 3), ("a/../b", 2, 2)])
    portfolio = read_portfolio(_write(tmp_path, text))
    assert [s.series_id for s in portfolio.series] == ["ok/a"] and len(portfolio.series[0].lines) == 3
    assert [(p.series_id, p.row, p.flag) for p in portfolio.problems] == [
        ("a/../b", 4, "bad_id"), ("esc\x1b[2J", 5, "bad_id"), ("q" * ECHO_CHARS + "…", 6, "bad_id"),
    ]
    assert "U+001B (escape)" in str(portfolio.problems[1])
    assert f"has {MAX_ID_LENGTH + 1} characters; at most {MAX_ID_LENGTH}" in str(portfolio.problems[2])
    wide = read_portfolio(_write(tmp_path, "timestamp,ok,./x\n1,1,1\n2,2,2\n"), layout="wide")
    assert [s.series_id for s in wide.series] == ["ok"] and [(p.series_id, p.row) for p in wide.problems] == [("./x", 1)]


@pytest.mark.parametrize("series_id", ["shop 3/bread", "caf\u00e9 \U0001f4c8", "a.b/..c", "x" * MAX_ID_LENGTH, "a/b?c=d#e%20f",
                                       "compare", "compare/edge", "edge/comparison"])
def test_ordinary_ids_are_accepted(series_id):
    assert id_problem(series_id) is None


@pytest.mark.parametrize("series_id", ["", "a\tb", "a\nb", "a\x00", "\u2028x", "a/", "/a", "a//b", ".", "..", "a/./b", "x" * (MAX_ID_LENGTH + 1),
                                       "edge/compare", "edge/forecast-check", "a/b/backtest"])
def test_unsafe_ids_are_refused(series_id):
    assert id_problem(series_id) is not None


def test_a_long_cell_is_echoed_cut(tmp_path):
    cell = "z" * 5000
    (problem,) = read_portfolio(_write(tmp_path, _long([("a", 1, 1), ("a", 2, cell)]))).problems
    assert f"value '{'z' * ECHO_CHARS}…' is not a number" in str(problem) and len(str(problem)) < 200
    with pytest.raises(InputFileError) as info:
        read_portfolio(_write(tmp_path, _long([("a", 1, 1), ("a", cell, 2)])))
    assert len(str(info.value)) < 300


def test_limits_refuse_a_file_at_the_first_series_too_many(tmp_path, tiny_chunks):
    # The file breaks after the third series: the limit is met first, so reading stops there.
    text = _long([("a", 1, 1), ("b", 1, 1), ("c", 1, 1)]) + "d,1,\xff\n"
    with pytest.raises(InputFileError, match=r"holds more than 2 series; at most 2 are accepted in one file"):
        read_portfolio(_write(tmp_path, text.encode("utf-8", "surrogateescape")), limits=ReadLimits(2, 10))
    with pytest.raises(InputFileError, match=r"holds 3 series; at most 2 are accepted in one file"):
        read_portfolio(_write(tmp_path, "timestamp,a,b,c\n1,1,1,1\n"), layout="wide", limits=ReadLimits(2, 10))


def test_limits_reject_a_series_at_its_first_row_past_the_limit(tmp_path, tiny_chunks):
    rows = [(sid, t, t) for t in range(1, 8) for sid in ("long", "short")][:-3] + [("long", 8, 8)]
    portfolio = read_portfolio(_write(tmp_path, _long(rows)), limits=ReadLimits(5, 5))
    assert [s.series_id for s in portfolio.series] == ["short"]
    (problem,) = portfolio.problems
    assert (problem.series_id, problem.row, problem.flag) == ("long", 12, "too_long")
    assert str(problem) == "series 'long' (line 12): has 7 rows; at most 5 are accepted per series"
    wide = read_portfolio(_write(tmp_path, "timestamp,a,b\n" + "".join(f"{t},{t},{t}\n" for t in range(1, 9))), layout="wide", limits=ReadLimits(5, 5))
    assert wide.series == [] and [(p.series_id, p.row, str(p).split(": ")[1]) for p in wide.problems] == [
        ("a", 7, "has 8 rows; at most 5 are accepted per series"), ("b", 7, "has 8 rows; at most 5 are accepted per series"),
    ]
