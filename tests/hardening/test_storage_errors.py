"""A full disk or a read-only database: one clear line (or a 503 page), never a traceback, and
the database exactly as it was (every write is one transaction, which SQLite rolls back).

The full disk is a real one: a tmpfs of a few hundred KiB mounted for the test (the tests run
as root, as CI does) and unmounted afterwards; read-only is that tmpfs remounted read-only, or
a file made immutable with ``chattr +i`` (root ignores permission bits, not that attribute).
Where neither can be done the tests are skipped, saying why.
"""

from __future__ import annotations

import shutil
import sqlite3
import subprocess
from pathlib import Path
from urllib.parse import quote

import pytest
from conftest import SEED_ID, assert_no_traceback, run_lagdesk, table_rows
from corpus_files import CORPUS_DIR, csv_bytes, good_values, series_rows
from fastapi.testclient import TestClient

from app.config import Settings
from app.web.main import create_app
from app.web.security import CSRF_COOKIE, CSRF_HEADER

TMPFS_SIZE = "512k"
EXIT_STORAGE_ERROR = 3


def _run(*command: str) -> bool:
    return subprocess.run(command, capture_output=True).returncode == 0


@pytest.fixture
def small_disk(tmp_path, seed_template):
    """``(mount point, database)``: a tiny tmpfs holding a copy of the seeded database."""
    mount_point = tmp_path / "disk"
    mount_point.mkdir()
    if not _run("mount", "-t", "tmpfs", "-o", f"size={TMPFS_SIZE}", "tmpfs", str(mount_point)):
        pytest.skip("cannot mount a tmpfs here (needs root and mount rights)")
    try:
        db_path = mount_point / "lagdesk.db"
        shutil.copy(seed_template, db_path)
        yield mount_point, db_path
    finally:
        if not _run("umount", str(mount_point)):
            _run("umount", "-l", str(mount_point))


def _integrity(db_path: Path) -> str:
    conn = sqlite3.connect(f"file:{db_path}?mode=ro", uri=True)
    try:
        return conn.execute("PRAGMA integrity_check").fetchone()[0]
    finally:
        conn.close()


def _long_file(tmp_path: Path, points: int = 60_000) -> Path:
    path = tmp_path / "long.csv"
    stamps = [str(i) for i in range(1, points + 1)]
    path.write_bytes(csv_bytes(series_rows("long", good_values(points), stamps)))
    return path


def _assert_one_clear_line(done: subprocess.CompletedProcess, words: str) -> None:
    assert done.returncode == EXIT_STORAGE_ERROR, done
    assert_no_traceback(done.stderr)
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and words in lines[0] and "rolled back" in lines[0], done.stderr


def test_import_onto_a_full_disk_says_so_and_keeps_the_database(small_disk, tmp_path):
    _, db_path = small_disk
    before = table_rows(db_path)
    done = run_lagdesk("import", str(_long_file(tmp_path)), "--db", str(db_path))
    _assert_one_clear_line(done, "the disk is full")
    assert _integrity(db_path) == "ok"
    assert table_rows(db_path) == before


def test_import_into_a_read_only_database_says_so_and_keeps_it(small_disk):
    mount_point, db_path = small_disk
    before = table_rows(db_path)
    assert _run("mount", "-o", "remount,ro", str(mount_point))
    done = run_lagdesk("import", str(CORPUS_DIR / "bom.csv"), "--db", str(db_path))
    _assert_one_clear_line(done, "read-only")
    assert table_rows(db_path) == before


def test_import_into_an_immutable_database_file_says_so(seeded_db):
    if not _run("chattr", "+i", str(seeded_db)):
        pytest.skip("chattr +i is not supported on this file system")
    try:
        before = table_rows(seeded_db)
        done = run_lagdesk("import", str(CORPUS_DIR / "bom.csv"), "--db", str(seeded_db))
        _assert_one_clear_line(done, "read-only")
        assert table_rows(seeded_db) == before
    finally:
        _run("chattr", "-i", str(seeded_db))


def test_a_verdict_on_a_read_only_database_is_a_503_page_not_a_crash(small_disk):
    mount_point, db_path = small_disk
    assert _run("mount", "-o", "remount,ro", str(mount_point))
    with TestClient(create_app(Settings(db_path=db_path, allowed_hosts=("testserver",))), raise_server_exceptions=False) as client:
        client.get("/login")  # the CSRF cookie, whose value the API call sends back in the header
        response = client.post(f"/api/series/{quote(SEED_ID, safe='/')}/verdict", json={"status": "parked", "version": 0, "reviewer": "Ada"},
                               headers={CSRF_HEADER: client.cookies[CSRF_COOKIE]})
        assert response.status_code == 503, response.text
        assert "read-only" in response.json()["detail"]
        assert_no_traceback(response.text)
        page = client.get("/")
        assert page.status_code == 503 and "read-only" in page.text
