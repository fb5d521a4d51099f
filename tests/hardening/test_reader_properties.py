"""Property tests of the CSV reader and the import: whatever the bytes, the reader either
returns series or raises the project's own error (a :class:`LagdeskError`), never anything
else; an import that raises leaves every table as it was, and one that succeeds stores exactly
the series it reports as added.
"""

from __future__ import annotations

import csv
import io
import tempfile
from pathlib import Path
from unittest.mock import patch

import pytest
from conftest import table_rows
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from app.core import csv_chunks
from app.core.errors import LagdeskError
from app.core.portfolio_file import read_portfolio
from app.core.prepare import prepare_series
from app.store.database import open_database
from app.store.imports import import_portfolio

EXAMPLES = 150
HEADER = ["series_id", "timestamp", "value"]
PROPERTY_SETTINGS = settings(max_examples=EXAMPLES, deadline=None, suppress_health_check=[HealthCheck.too_slow])

ids = st.one_of(
    st.sampled_from(["a", "b", "shop 1/x", "<b>x</b>", 'q"uote', "caf\u00e9", "\U0001f4c8"]),
    st.text(min_size=0, max_size=30),
)
timestamps = st.one_of(
    st.integers(min_value=-5, max_value=60).map(str),
    st.dates().map(lambda d: d.isoformat()),
    st.datetimes(timezones=st.none() | st.timezones()).map(lambda t: t.isoformat()),
    st.sampled_from(["", "2024-02-30", "13/13/2024", "1e3", "9" * 25, "now", " 2024-01-01 "]),
    st.text(max_size=12),
)
values = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.integers(min_value=-(10**30), max_value=10**30).map(str),
    st.sampled_from(["", " ", "NaN", "-inf", "1e309", "1e308", "1,5", "0x10", "n/a"]),
    st.text(max_size=8),
)
rows = st.lists(st.tuples(ids, timestamps, values), min_size=0, max_size=60)
# Tables that mostly look right: a few series, integer steps, numbers, some odd cells.
plausible_rows = st.lists(
    st.tuples(
        st.sampled_from(["a", "b", "\U0001f4c8 c"]),
        st.integers(min_value=1, max_value=40).map(str),
        st.one_of(st.floats(min_value=-1e6, max_value=1e6).map(repr), st.sampled_from(["", "x", "inf"])),
    ),
    min_size=0, max_size=120,
)


def _csv(table: list[tuple], header: list[str] = HEADER) -> bytes:
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(header)
    writer.writerows(table)
    return out.getvalue().encode("utf-8", errors="surrogatepass")


def _read_and_prepare(content: bytes, layout: str = "long") -> None:
    """Read the bytes; prepare every series read. Only LagdeskError may escape."""
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "input.csv"
        path.write_bytes(content)
        try:
            portfolio = read_portfolio(path, layout=layout)
        except LagdeskError as exc:
            assert str(exc).startswith(str(path)), exc  # a file error names the file
            return
        for raw in portfolio.series:
            try:
                prepare_series(raw.values, raw.series_id, raw.lines)
            except LagdeskError:
                pass


@PROPERTY_SETTINGS
@given(st.binary(max_size=3000))
def test_random_bytes_are_read_or_refused_with_a_lagdesk_error(content):
    _read_and_prepare(content)


@PROPERTY_SETTINGS
@given(st.binary(max_size=2000))
def test_random_bytes_after_a_good_header_are_read_or_refused(content):
    _read_and_prepare(b"series_id,timestamp,value\n" + content)
    _read_and_prepare(b"timestamp,a,b\n" + content, layout="wide")


@PROPERTY_SETTINGS
@given(rows)
def test_odd_tables_are_read_or_refused_with_a_lagdesk_error(table):
    _read_and_prepare(_csv(table))


@PROPERTY_SETTINGS
@given(st.lists(st.lists(values, min_size=3, max_size=3), max_size=40), st.lists(ids, min_size=1, max_size=4))
def test_odd_wide_tables_are_read_or_refused(cells, names):
    header = ["timestamp", *names][:3] + [""] * max(0, 3 - len(names) - 1)
    _read_and_prepare(_csv([tuple(r) for r in cells], header=header), layout="wide")


def _outcome(content: bytes) -> tuple | None:
    """What reading gives, in comparable form: the series (id, timestamps, values, lines) and the
    problems; None for a file refused whole."""
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "input.csv"
        path.write_bytes(content)
        try:
            portfolio = read_portfolio(path)
        except LagdeskError:
            return None
    series = [
        (s.series_id, s.values.index.tolist(), s.values.fillna(-0.5).tolist(), s.lines.tolist()) for s in portfolio.series
    ]
    return (series, [str(p) for p in portfolio.problems])


@PROPERTY_SETTINGS
@given(st.one_of(rows, plausible_rows))
def test_reading_in_small_chunks_gives_what_reading_at_once_gives(table):
    """The same series, values, lines and problems, or a refusal both ways (a file with several
    faults may be refused naming another one first)."""
    content = _csv(table)
    whole = _outcome(content)
    with patch.object(csv_chunks, "CHUNK_CELLS", 4):
        assert _outcome(content) == whole


@pytest.fixture(scope="module")
def import_folder(tmp_path_factory):
    return tmp_path_factory.mktemp("properties")


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
@given(st.one_of(rows, plausible_rows))
def test_import_stores_what_it_reports_or_nothing_at_all(import_folder, table):
    with tempfile.TemporaryDirectory(dir=import_folder) as folder:
        db_path = Path(folder) / "lagdesk.db"
        csv_path = Path(folder) / "input.csv"
        csv_path.write_bytes(_csv(table))
        db = open_database(db_path)
        try:
            before = table_rows(db_path)
            try:
                report = import_portfolio(db, csv_path)
            except LagdeskError:
                assert table_rows(db_path) == before
                return
        finally:
            db.close()
        stored = {row[0] for row in table_rows(db_path)["series"]}
        assert stored == set(report.added)
        assert not stored & {r["series_id"] for r in report.rejected}
