"""The bad-input corpus through every way in: ``lagdesk import``, ``lagdesk identify`` and the
web upload (page and API).

For each file (see :mod:`corpus_files` for what each holds and must give):

* a file that cannot be used at all gets one line naming the file and what is wrong (and the
  line, where one is to blame), exit code 2 / HTTP 400, and the database is byte-for-byte the
  same in every table;
* a partly bad file stores exactly its good series; each bad one is reported with its reason
  and, where one line is to blame, that line;
* nothing ever shows a traceback.
"""

from __future__ import annotations

import html
import json
import re

import pytest
from conftest import SEED_ID, assert_no_traceback, run_lagdesk, stored_series, table_rows, upload, web_client
from corpus_files import CASES, CORPUS_DIR, write_corpus
from fastapi.testclient import TestClient

FILE_ERRORS = [name for name, case in CASES.items() if case.file_error]
IMPORTS = [name for name, case in CASES.items() if not case.file_error]


def _layout_args(name: str) -> list[str]:
    return ["--layout", CASES[name].layout]


def _assert_file_message(message: str, name: str) -> None:
    assert name in message, message
    for words in CASES[name].file_error:
        assert words in message, message


def _assert_rejections(messages: list[str], name: str) -> None:
    """Each rejected series of the case is named once, with its line where there is one."""
    for series_id, line in CASES[name].rejected.items():
        naming = [m for m in messages if f"series {series_id!r}" in m]
        assert len(naming) == 1, (series_id, messages)
        if line is not None:
            assert f"(line {line})" in naming[0], naming[0]


def test_corpus_files_are_the_generated_ones(tmp_path):
    """The committed corpus is exactly what corpus_files.py writes (so the expectations hold for it)."""
    write_corpus(tmp_path)
    committed = sorted(p.name for p in CORPUS_DIR.iterdir())
    assert committed == sorted(CASES)
    for name in CASES:
        assert (CORPUS_DIR / name).read_bytes() == (tmp_path / name).read_bytes(), name


@pytest.mark.parametrize("name", FILE_ERRORS)
def test_cli_import_of_unusable_file_says_why_in_one_line_and_changes_nothing(name, seeded_db):
    before = table_rows(seeded_db)
    done = run_lagdesk("import", str(CORPUS_DIR / name), "--db", str(seeded_db), *_layout_args(name))
    assert done.returncode == 2, done
    assert_no_traceback(done.stderr)
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("lagdesk import: "), done.stderr
    _assert_file_message(lines[0], name)
    assert table_rows(seeded_db) == before


@pytest.mark.parametrize("name", IMPORTS)
def test_cli_import_stores_only_the_good_series(name, seeded_db):
    case = CASES[name]
    done = run_lagdesk("import", str(CORPUS_DIR / name), "--db", str(seeded_db), *_layout_args(name))
    assert done.returncode == 0, done
    assert_no_traceback(done.stderr + done.stdout)
    assert done.stderr == ""
    assert stored_series(seeded_db) == {SEED_ID, *case.stored}
    rejected_lines = [line for line in done.stdout.splitlines() if line.startswith("  rejected: ")]
    assert len(rejected_lines) == len(case.rejected)
    _assert_rejections(rejected_lines, name)
    rows = table_rows(seeded_db)
    for table in ("observations", "verdicts"):
        assert {row[0] for row in rows[table]} == {SEED_ID, *case.stored}, table


@pytest.mark.parametrize("name", FILE_ERRORS)
def test_cli_identify_of_unusable_file_says_why_in_one_line(name):
    done = run_lagdesk("identify", str(CORPUS_DIR / name), "--workers", "1", *_layout_args(name))
    assert done.returncode == 2, done
    assert_no_traceback(done.stderr)
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("lagdesk identify: "), done.stderr
    _assert_file_message(lines[0], name)


@pytest.mark.parametrize("name", IMPORTS)
def test_cli_identify_analyses_the_good_series_and_names_the_bad(name):
    case = CASES[name]
    done = run_lagdesk("identify", str(CORPUS_DIR / name), "--workers", "1", "--json", *_layout_args(name))
    assert done.returncode == 0, done
    assert_no_traceback(done.stderr)
    # stderr carries the progress line only: no warnings, no stray output.
    assert all(re.match(r"^identify: \d+/\d+ series", part) for part in done.stderr.replace("\r", "\n").split("\n") if part), done.stderr
    result = json.loads(done.stdout)
    assert {s["series_id"] for s in result["series"]} == set(case.stored)
    messages = [p["message"] for p in result["problems"]]
    assert len(messages) == len(case.rejected)
    _assert_rejections(messages, name)


@pytest.fixture
def client(seeded_db):
    with web_client(seeded_db) as test_client:
        yield test_client


def _upload(client: TestClient, url: str, name: str):
    """Post a corpus file to the upload page or the API."""
    return upload(client, url, name, (CORPUS_DIR / name).read_bytes(), {"layout": CASES[name].layout})


@pytest.mark.parametrize("name", FILE_ERRORS)
def test_api_upload_of_unusable_file_is_400_with_the_reason_and_changes_nothing(name, client, seeded_db):
    before = table_rows(seeded_db)
    response = _upload(client, "/api/imports", name)
    assert response.status_code == 400, response.text
    assert_no_traceback(response.text)
    _assert_file_message(response.json()["detail"], name)
    assert table_rows(seeded_db) == before


@pytest.mark.parametrize("name", IMPORTS)
def test_api_upload_stores_only_the_good_series(name, client, seeded_db):
    case = CASES[name]
    response = _upload(client, "/api/imports", name)
    assert response.status_code == 200, response.text
    report = response.json()
    assert set(report["added"]) == set(case.stored)
    _assert_rejections([r["message"] for r in report["rejected"]], name)
    assert len(report["rejected"]) == len(case.rejected)
    assert stored_series(seeded_db) == {SEED_ID, *case.stored}


@pytest.mark.parametrize("name", FILE_ERRORS)
def test_upload_page_shows_the_reason_as_text_and_changes_nothing(name, client, seeded_db):
    before = table_rows(seeded_db)
    response = _upload(client, "/upload", name)
    assert response.status_code == 400
    assert_no_traceback(response.text)
    shown = html.unescape(re.sub(r"<[^>]+>", "", response.text))
    _assert_file_message(" ".join(shown.split()), name)
    assert table_rows(seeded_db) == before
