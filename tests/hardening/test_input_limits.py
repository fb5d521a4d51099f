"""Input that must be bounded or refused before it does harm (issue 19, items 5 and 7-13, and the
upload folders a killed server leaves, item 16), through the command line and the upload.

The corpus (``corpus_files.py``, run through every way in by ``test_bad_input.py``) holds the
small bad files: a wide file with a repeated column (item 6), mixed and ambiguous date formats
(7), offsets across a change to summer time and offsets of two zones (8), quoted line breaks
before a bad cell (9) and unsafe series ids (10). The files here are made in the test: too big
to commit, or made to show where reading stopped.
"""

from __future__ import annotations

import json
import os
import signal
import sqlite3
import subprocess
import sys
import time
import tracemalloc
from contextlib import closing
from pathlib import Path

import pytest
from conftest import (
    REPO,
    SEED_ID,
    assert_no_traceback,
    run_lagdesk,
    stored_series,
    table_rows,
    upload,
    web_client,
)
from corpus_files import CASES, CORPUS_DIR, GOOD_POINTS, csv_bytes, good_values, month_starts, series_rows
from reviewers import api_client

from app.config import Settings
from app.core.csv_chunks import CHUNK_CELLS, MAX_CELL_CHARS
from app.core.errors import ECHO_CHARS
from app.core.portfolio_file import read_portfolio
from app.web.uploads import UPLOAD_FOLDER_PREFIX, remove_stale_upload_folders

BROKEN_TAIL = b"late,2024-01-01,\xff\n"  # a line that refuses the file if it is ever read
# A message that echoes a cell is one line of about this many characters at most.
SHORT_LINE = 400
FOLDER_WAIT_S = 120


def _one_line_refusal(done: subprocess.CompletedProcess, command: str) -> str:
    assert done.returncode == 2, done
    assert_no_traceback(done.stderr + done.stdout)
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith(f"lagdesk {command}: "), done.stderr[:2000]
    return lines[0]


def _no_database(path: Path) -> None:
    assert not [p.name for p in path.parent.iterdir() if p.name.startswith(path.name)]


def _column(db_path: Path, sql: str) -> list:
    conn = sqlite3.connect(f"file:{db_path}?mode=ro", uri=True)
    try:
        return [row[0] for row in conn.execute(sql)]
    finally:
        conn.close()


def _one_row_series(path: Path, count: int) -> Path:
    """``count`` series of one row each (the shape that cost 23 s of server CPU), then more rows
    of the first than one chunk of reading holds, then a line that refuses the file if it is read."""
    rows = [(f"s{i:06d}", "2024-01-01", i) for i in range(count)] + [("s000000", "2024-01-01", "")] * CHUNK_CELLS
    path.write_bytes(csv_bytes(rows) + BROKEN_TAIL)
    return path


# --- item 5: limits, applied as soon as they are passed, in the CLI as on the server ------------

def test_the_cli_refuses_a_file_past_the_series_limit_before_reading_on(tmp_path):
    path = _one_row_series(tmp_path / "many.csv", Settings.max_upload_series + 1)
    db = tmp_path / "new.db"
    line = _one_line_refusal(run_lagdesk("import", str(path), "--db", str(db)), "import")
    assert line.endswith(f"holds more than {Settings.max_upload_series:,} series; at most {Settings.max_upload_series:,} are accepted in one file")
    _no_database(db)
    # Over the limit given, the same file is read on, to the broken line it ends with.
    line = _one_line_refusal(run_lagdesk("identify", str(path), "--max-series", "20000", "--workers", "1"), "identify")
    assert f"is not UTF-8 text (line {Settings.max_upload_series + 3 + CHUNK_CELLS} holds the byte 0xFF" in line


def test_the_cli_rejects_a_series_past_the_points_limit_it_is_given(tmp_path, seeded_db):
    path = tmp_path / "mixed.csv"
    path.write_bytes(csv_bytes(series_rows("long", good_values(30)) + series_rows("fine", good_values(20))))
    done = run_lagdesk("import", str(path), "--db", str(seeded_db), "--max-points", "25")
    assert done.returncode == 0, done
    assert "  rejected: series 'long' (line 27): has 30 rows; at most 25 are accepted per series" in done.stdout.splitlines()
    assert stored_series(seeded_db) == {SEED_ID, "fine"}
    done = run_lagdesk("identify", str(path), "--max-points", "0")
    assert done.returncode == 2 and "--max-points: it must be at least 1, not 0" in done.stderr


def test_an_upload_past_the_series_limit_is_refused_before_the_rest_is_read(tmp_path, seeded_db):
    content = _one_row_series(tmp_path / "many.csv", 4).read_bytes()
    before = table_rows(seeded_db)
    with web_client(seeded_db, max_upload_series=3) as client:
        response = upload(client, "/api/imports", "many.csv", content, {})
    assert response.status_code == 400
    assert response.json()["detail"] == "many.csv: holds more than 3 series; at most 3 are accepted in one file"
    assert table_rows(seeded_db) == before


@pytest.mark.slow
def test_reading_holds_the_numbers_kept_not_the_text(tmp_path):
    """A 50 MB file whose rows carry a long comment: the reader's peak (Python allocations, as
    tracemalloc counts them) stays near the numbers it keeps, about 24 bytes a row. Read whole as
    text, as before, it was six times the file."""
    path = tmp_path / "commented.csv"
    comment = "c" * 500
    with path.open("w") as out:
        out.write("series_id,timestamp,value,comment\n")
        for s in range(100):
            out.writelines(f"shop-{s:03d},{i},{(i * 37 + s) % 101}.25,{comment}\n" for i in range(1, 1001))
    size = path.stat().st_size
    tracemalloc.start()
    try:
        portfolio = read_portfolio(path)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert len(portfolio.series) == 100
    print(f"\nreading {size / 1e6:.0f} MB peaked at {peak / 1e6:.0f} MB of Python allocations")
    assert peak < 0.75 * size


# --- item 7: a date format given when the file's dates read both ways --------------------------

def test_a_date_format_reads_an_ambiguous_file_by_command_and_upload(tmp_path, seeded_db):
    name = "dates_ambiguous.csv"
    path = CORPUS_DIR / name
    done = run_lagdesk("import", str(path), "--db", str(seeded_db), "--date-format", "%d/%m/%Y")
    assert done.returncode == 0, done
    assert "1 added" in done.stdout and stored_series(seeded_db) == {SEED_ID, "good"}
    frequency = "SELECT freq FROM series WHERE series_id = 'good'"
    assert _column(seeded_db, frequency) == ["MS"]  # day first: month starts, not January days
    second = tmp_path / "second.db"
    with web_client(second) as client:
        page = upload(client, "/upload", name, path.read_bytes(), {})
        assert page.status_code == 400 and "--date-format %d/%m/%Y" in page.text
        page = upload(client, "/upload", name, path.read_bytes(), {"date_format": "%d/%m/%Y"})
        assert page.status_code == 200 and "1 added" in page.text
    assert _column(second, frequency) == ["MS"]


# --- item 10: ids printed safely, also from a database written before the id rules ------------

def test_the_cli_prints_no_control_character_of_an_id(tmp_path, seeded_db):
    done = run_lagdesk("import", str(CORPUS_DIR / "bad_ids.csv"), "--db", str(seeded_db))
    assert done.returncode == 0, done
    assert "\x1b" not in done.stdout and "\u202e" not in done.stdout and "\u200b" not in done.stdout
    assert len(done.stdout.splitlines()) == 2 + len(CASES["bad_ids.csv"].rejected)  # no id broke a line
    assert "series 'red\\x1b[31m alert' (line 26)" in done.stdout
    # An id stored before the rules existed (written directly): echoed escaped by decide.
    escape_id = "old\x1b[2Jid"
    with sqlite3.connect(seeded_db) as conn:
        for table in ("series", "observations", "verdicts"):
            conn.execute(f"UPDATE [{table}] SET series_id = ? WHERE series_id = ?", [escape_id, SEED_ID])
    done = run_lagdesk("decide", escape_id, "park", "--reviewer", "ann", "--db", str(seeded_db))
    assert done.returncode == 0, done
    assert done.stdout.startswith("old\\x1b[2Jid: parked") and "\x1b" not in done.stdout


# --- item 11: long cells echoed as a short prefix ---------------------------------------------

def _long_cell_file(path: Path, cell_chars: int) -> Path:
    """A good series, a series with a long text cell, and one whose id is that long."""
    long_text = "7" * (cell_chars // 2) + "x" * (cell_chars - cell_chars // 2)
    values: list = good_values(level=50.0)
    values[3] = long_text
    rows = series_rows("good", good_values()) + series_rows("bad", values) + series_rows("i" * cell_chars, good_values(level=9.0))
    path.write_bytes(csv_bytes(rows))
    return path


def test_a_long_cell_is_echoed_as_a_short_prefix_everywhere(tmp_path, seeded_db):
    path = _long_cell_file(tmp_path / "long_cells.csv", 100_000)
    done = run_lagdesk("import", str(path), "--db", str(seeded_db))
    assert done.returncode == 0, done
    assert max(map(len, done.stdout.splitlines())) < SHORT_LINE
    assert f"value '{'7' * ECHO_CHARS}…' is not a number" in done.stdout
    (stored,) = _column(seeded_db, "SELECT rejected FROM imports ORDER BY import_id DESC LIMIT 1")
    assert max(len(json.dumps(r)) for r in json.loads(stored)) < 2 * SHORT_LINE
    assert stored_series(seeded_db) == {SEED_ID, "good"}
    with web_client(tmp_path / "web.db") as client:
        report = upload(client, "/api/imports", "long_cells.csv", path.read_bytes(), {}).json()
        assert max(len(r["message"]) for r in report["rejected"]) < SHORT_LINE
        page = upload(client, "/upload", "long_cells.csv", path.read_bytes(), {})
        assert page.status_code == 200 and "7" * 1000 not in page.text and "i" * 1000 not in page.text
    stamps = month_starts(GOOD_POINTS)
    stamps[2] = "2" * 100_000
    (tmp_path / "long_stamp.csv").write_bytes(csv_bytes(series_rows("good", good_values(), stamps)))
    line = _one_line_refusal(run_lagdesk("import", str(tmp_path / "long_stamp.csv"), "--db", str(seeded_db)), "import")
    assert len(line) < SHORT_LINE and "line 4" in line


def test_a_20_mb_cell_or_line_stops_the_file_with_one_short_line(tmp_path, seeded_db):
    path = tmp_path / "huge_cell.csv"
    path.write_bytes(csv_bytes(series_rows("good", good_values()) + [("good", "2030-01-01", "9" * 20_000_000)]))
    before = table_rows(seeded_db)
    line = _one_line_refusal(run_lagdesk("import", str(path), "--db", str(seeded_db)), "import")
    assert f"huge_cell.csv: line {GOOD_POINTS + 2} is longer than" in line and len(line) < SHORT_LINE
    assert table_rows(seeded_db) == before
    path.write_bytes(csv_bytes(series_rows("good", good_values()) + [("good", "2030-01-01", "9" * (MAX_CELL_CHARS + 1))]))
    line = _one_line_refusal(run_lagdesk("import", str(path), "--db", str(seeded_db)), "import")
    assert line.endswith(f"huge_cell.csv: line {GOOD_POINTS + 2} has a cell longer than {MAX_CELL_CHARS:,} characters")


# --- items 12 and 13: a refused file creates no database; an endless one stops ----------------

@pytest.mark.parametrize("name", [name for name, case in CASES.items() if case.file_error][:6] + ["wide_duplicate_column.csv"])
def test_a_refused_import_leaves_no_new_database(name, tmp_path):
    db = tmp_path / "fresh.db"
    _one_line_refusal(run_lagdesk("import", str(CORPUS_DIR / name), "--db", str(db), "--layout", CASES[name].layout), "import")
    _no_database(db)


@pytest.mark.skipif(not Path("/dev/zero").exists(), reason="needs /dev/zero")
@pytest.mark.parametrize("command", ["import", "identify"])
def test_dev_zero_is_read_with_a_bound_and_stops_with_one_line(command, tmp_path):
    db = tmp_path / "zero.db"
    extra = ["--db", str(db)] if command == "import" else ["--workers", "1"]
    line = _one_line_refusal(run_lagdesk(command, "/dev/zero", *extra), command)
    assert line == f"lagdesk {command}: /dev/zero: line 1 is longer than 8,388,608 characters (is it a CSV file?)"
    _no_database(db)


# --- item 16: upload folders a killed server left are removed --------------------------------

def _dead_pid() -> int:
    child = subprocess.Popen([sys.executable, "-c", "pass"])
    child.wait()
    return child.pid


def test_upload_folders_of_processes_gone_are_removed_and_others_kept(tmp_path):
    gone = tmp_path / f"{UPLOAD_FOLDER_PREFIX}{_dead_pid()}-abc123"
    mine = tmp_path / f"{UPLOAD_FOLDER_PREFIX}{os.getpid()}-def456"
    other = tmp_path / f"{UPLOAD_FOLDER_PREFIX}not-a-pid"
    for folder in (gone, mine, other):
        folder.mkdir()
        (folder / "upload.csv").write_text("series_id,timestamp,value\n")
    assert remove_stale_upload_folders(tmp_path) == [gone]
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted([mine.name, other.name])


def _upload_folders(folder: Path) -> list[Path]:
    return sorted(folder.glob(f"{UPLOAD_FOLDER_PREFIX}*"))


@pytest.mark.slow
def test_a_server_killed_during_an_upload_leaves_a_folder_the_next_upload_removes(tmp_path, seeded_db, live_server):
    temp = tmp_path / "tmp"
    temp.mkdir()
    env = {"TMPDIR": str(temp)}
    # Thousands of series: the import runs for seconds, with the upload's folder in place.
    big = tmp_path / "slow.csv"
    big.write_bytes(csv_bytes([row for i in range(3000) for row in series_rows(f"s{i:04d}", good_values(level=10.0 + i))]))
    server = live_server(seeded_db, env=env)
    poster = subprocess.Popen(
        [sys.executable, "-c", (
            "import sys; sys.path.insert(0, sys.argv[3]); from contextlib import closing; from reviewers import api_client\n"
            "with open(sys.argv[2], 'rb') as f, closing(api_client(sys.argv[1])) as c:\n"
            "    c.post(sys.argv[1] + '/api/imports', files={'file': ('slow.csv', f, 'text/csv')}, timeout=600)\n"
        ), server.url, str(big), str(Path(__file__).parent)],
        cwd=REPO, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
    )
    try:
        deadline = time.monotonic() + FOLDER_WAIT_S
        while not _upload_folders(temp) and time.monotonic() < deadline:
            time.sleep(0.02)
        left = _upload_folders(temp)
        assert left, "the upload never reached its import"
        server.kill()
    finally:
        poster.send_signal(signal.SIGKILL)
        poster.wait()
    assert _upload_folders(temp) == left  # kill -9: nothing removed it
    server = live_server(seeded_db, env=env)
    with closing(api_client(server.url)) as client:
        small = csv_bytes(series_rows("after", good_values()))
        response = client.post(f"{server.url}/api/imports", files={"file": ("after.csv", small, "text/csv")})
    assert response.status_code == 200, response.text
    assert _upload_folders(temp) == []
