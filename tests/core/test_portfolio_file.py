"""Checks of app.core.portfolio_file: long and wide CSV files, and the errors for bad ones.

Each file is written byte for byte in the test, so the expected series, values and line
numbers (line 1 is the header) can be read off the file itself.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from app.core.errors import InputFileError, SeriesProblem
from app.core.portfolio_file import read_portfolio
from app.core.prepare import prepare_series


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


def test_other_delimiter_is_hinted(tmp_path):
    with pytest.raises(InputFileError, match="another delimiter"):
        read_portfolio(_write(tmp_path, "series_id;timestamp;value\na;1;2\n"))


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


def test_bad_timestamp_names_the_line(tmp_path):
    with pytest.raises(InputFileError, match=r"line 3: timestamp 'soon' is not a date"):
        read_portfolio(_write(tmp_path, "series_id,timestamp,value\na,2024-01-01,1\na,soon,2\n"))


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
