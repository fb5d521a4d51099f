"""The server half of issue 19, each item with the request that exploited it (or its stand-in):

1. DNS rebinding: a request naming another host is refused, whatever it asks; an ``Origin``
   outside the allow-list is refused (the browser version is in test_browser_access.py).
2. CSRF on the API: every state-changing call needs the ``X-CSRF-Token`` header; a script gets
   it from ``GET /api/csrf``, or sends the access token instead.
3. Bodies: ``Content-Length: 1`` with ``Transfer-Encoding: chunked`` is refused; bytes are
   counted as they arrive whatever the headers say; JSON bodies are at most 1 MiB, notes at
   most 5,000 characters; a stalled body is dropped.
4. Forecast checks: bounded origins, horizon and order; one computation per series at a time;
   an ``<img>`` of another site cannot start one.
14. A damaged database is named in one line at start; a read failure says "could not be read".
15. Orders decided on data that has changed since are marked ``data_changed`` in the CLI
    export, ``/api/orders`` and both downloads.
16. A run killed with ``kill -9`` is shown interrupted; the export file respects the umask;
    headers sent too slowly end the connection.
"""

from __future__ import annotations

import asyncio
import contextlib
import csv
import io
import json
import os
import select
import signal
import socket
import sqlite3
import subprocess
import sys
import time
from contextlib import suppress
from pathlib import Path
from urllib.parse import quote

import pytest
from conftest import REPO, SEED_ID, assert_no_traceback, run_lagdesk, table_rows
from corpus_files import csv_bytes, good_values, month_starts, series_rows
from fastapi.testclient import TestClient
from threaded_server import served

from app.config import Settings
from app.store.database import open_database, storage_error_text
from app.store.imports import import_portfolio
from app.web.main import create_app
from app.web.security import CSRF_COOKIE, CSRF_HEADER, TOKEN_HEADER

TEST_HOSTS = ("testserver",)  # the test client's Host header
TOKEN = "defences-test-token-0123456789"
PORT = 8000
CHECK_ID = "shop-1/sales"
CHECK_POINTS = 120
MIB = 1024 * 1024


def _client(db_path: Path, base_url: str = "http://testserver", **settings) -> TestClient:
    settings.setdefault("allowed_hosts", TEST_HOSTS)
    return TestClient(create_app(Settings(db_path=db_path, port=PORT, analysis_workers=1, **settings)), base_url=base_url)


def _csrf_headers(client: TestClient) -> dict[str, str]:
    """What a script sends after ``GET /api/csrf`` (the client keeps the cookie)."""
    answer = client.get("/api/csrf").json()
    return {answer["header"]: answer["csrf_token"]}


def _verdict_url(series_id: str = SEED_ID) -> str:
    return f"/api/series/{quote(series_id, safe='/')}/verdict"


PARK = {"status": "parked", "version": 0, "reviewer": "Ada", "note": "later"}


@pytest.fixture(scope="module")
def check_template(tmp_path_factory) -> Path:
    """A database with one monthly series long enough for forecast checks."""
    folder = tmp_path_factory.mktemp("checks")
    csv_path = folder / "check.csv"
    csv_path.write_bytes(csv_bytes(series_rows(CHECK_ID, good_values(CHECK_POINTS), month_starts(CHECK_POINTS))))
    db = open_database(folder / "check.db")
    try:
        import_portfolio(db, csv_path)
    finally:
        db.close()
    return folder / "check.db"


@pytest.fixture
def check_db(check_template, tmp_path) -> Path:
    target = tmp_path / "check.db"
    target.write_bytes(check_template.read_bytes())
    return target


# --- 1. host allow-list and origins --------------------------------------------------------------

@pytest.mark.parametrize("host", ["127.0.0.1:8000", "localhost:8000", "[::1]:8000"])
def test_loopback_names_on_the_configured_port_are_answered(seeded_db, host):
    with _client(seeded_db, base_url=f"http://{host}", allowed_hosts=()) as client:
        assert client.get("/api/portfolio").status_code == 200


@pytest.mark.parametrize("host", ["rebind.test:8000", "127.0.0.1:9999", "localhost", "attacker.example"])
def test_a_request_naming_another_host_is_refused_whatever_it_asks(seeded_db, host):
    """The rebinding page's requests carry its own name: reading the orders and posting a
    verdict both get 400, and the database is untouched."""
    before = table_rows(seeded_db)
    with _client(seeded_db, base_url=f"http://{host}", allowed_hosts=()) as client:
        read = client.get("/api/orders")
        assert read.status_code == 400
        assert "127.0.0.1:8000" in read.json()["detail"] and host in read.json()["detail"]
        assert "orders" not in read.json()
        client.cookies.set(CSRF_COOKIE, "t")
        written = client.post(_verdict_url(), json=PARK, headers={CSRF_HEADER: "t"})
        assert written.status_code == 400
        assert client.get("/", follow_redirects=False).status_code == 400
    assert table_rows(seeded_db) == before


def test_an_origin_outside_the_allow_list_is_refused(seeded_db):
    with _client(seeded_db, base_url="http://127.0.0.1:8000", allowed_hosts=()) as client:
        headers = _csrf_headers(client)
        for origin in ("http://rebind.test:8000", "http://127.0.0.1:9999", "null"):
            refused = client.post(_verdict_url(), json=PARK, headers={**headers, "Origin": origin})
            assert refused.status_code == 403, origin
        same_machine = client.post(_verdict_url(), json=PARK, headers={**headers, "Origin": "http://localhost:8000"})
        assert same_machine.status_code == 200


def test_a_token_server_answers_to_its_host_and_a_wildcard_one_to_any(seeded_db):
    with _client(seeded_db, base_url="http://192.168.1.20:8000", host="192.168.1.20", access_token=TOKEN, allowed_hosts=()) as client:
        assert client.get("/api/portfolio", headers={TOKEN_HEADER: TOKEN}).status_code == 200
    with _client(seeded_db, base_url="http://rebind.test:8000", host="192.168.1.20", access_token=TOKEN, allowed_hosts=()) as client:
        assert client.get("/api/portfolio", headers={TOKEN_HEADER: TOKEN}).status_code == 400
    with _client(seeded_db, base_url="http://dashboard.example:8000", host="0.0.0.0", access_token=TOKEN, allowed_hosts=()) as client:
        assert client.get("/api/portfolio").status_code == 401  # any name, but never without the token
        assert client.get("/api/portfolio", headers={TOKEN_HEADER: TOKEN}).status_code == 200


def test_an_allowed_name_without_a_port_is_answered_on_any_port(seeded_db):
    with _client(seeded_db, base_url="http://proxy.example:443", allowed_hosts=("proxy.example",)) as client:
        assert client.get("/api/portfolio").status_code == 200


# --- 2. CSRF on the API -------------------------------------------------------------------------

def test_an_api_post_without_the_csrf_header_is_refused_and_changes_nothing(seeded_db):
    before = table_rows(seeded_db)
    with _client(seeded_db) as client:
        refused = client.post(_verdict_url(), json=PARK)
        assert refused.status_code == 403
        assert CSRF_HEADER in refused.json()["detail"] and "/api/csrf" in refused.json()["detail"]
        client.get("/login")  # the cookie alone, as a cross-site form would carry it
        assert client.post(_verdict_url(), json=PARK).status_code == 403
        assert client.post(_verdict_url(), json=PARK, headers={CSRF_HEADER: "guessed"}).status_code == 403
    assert table_rows(seeded_db) == before


def test_a_script_gets_the_csrf_token_from_the_api(seeded_db):
    with _client(seeded_db) as client:
        answer = client.get("/api/csrf").json()
        assert answer["header"] == CSRF_HEADER and answer["csrf_token"] == client.cookies[CSRF_COOKIE]
        saved = client.post(_verdict_url(), json=PARK, headers={CSRF_HEADER: answer["csrf_token"]})
        assert saved.status_code == 200 and saved.json()["version"] == 1


def test_a_script_with_the_access_token_needs_no_csrf_token(seeded_db):
    with _client(seeded_db, access_token=TOKEN) as client:
        saved = client.post(_verdict_url(), json=PARK, headers={TOKEN_HEADER: TOKEN})
        assert saved.status_code == 200


def _api_posts() -> list[str]:
    """Every POST of the API, from its OpenAPI schema."""
    paths = create_app(Settings(db_path="unused.db")).openapi()["paths"]
    return sorted(path for path, operations in paths.items() if "post" in operations)


@pytest.mark.parametrize("path", _api_posts())
def test_every_state_changing_api_call_needs_the_csrf_header(seeded_db, path):
    before = table_rows(seeded_db)
    with _client(seeded_db) as client:
        client.get("/login")
        url = path.replace("{series_id}", quote(SEED_ID, safe="/"))
        assert client.post(url, json={}).status_code == 403
    assert table_rows(seeded_db) == before


# --- 3. bodies ---------------------------------------------------------------------------------

def test_content_length_one_with_a_chunked_body_is_refused_before_it_is_read(seeded_db, live_server):
    """The reproduced bypass: ``Content-Length: 1`` and ``Transfer-Encoding: chunked`` with a
    5 MB note, against ``lagdesk serve``."""
    server = live_server(seeded_db)
    body = json.dumps({**PARK, "note": "x" * (5 * 10**6)}).encode()
    head = (
        f"POST {_verdict_url()} HTTP/1.1\r\nHost: 127.0.0.1:{server.port}\r\nContent-Type: application/json\r\n"
        f"Cookie: {CSRF_COOKIE}=t\r\n{CSRF_HEADER}: t\r\nContent-Length: 1\r\nTransfer-Encoding: chunked\r\n\r\n"
    ).encode()
    with socket.create_connection(("127.0.0.1", server.port), timeout=30) as conn:
        conn.sendall(head)  # the answer comes from the headers alone, and the server hangs up
        reply = _read_until_closed(conn).decode()
        with suppress(OSError):  # so the body goes nowhere
            conn.sendall(f"{len(body):x}\r\n".encode() + body + b"\r\n0\r\n\r\n")
    assert reply.startswith("HTTP/1.1 400"), reply
    assert "Content-Length and Transfer-Encoding" in reply
    db = open_database(seeded_db)
    try:
        assert db.execute("SELECT note FROM verdicts WHERE series_id = ?", [SEED_ID]).fetchone()[0] == ""
    finally:
        db.close()


def _read_until_closed(conn: socket.socket) -> bytes:
    reply = b""
    while chunk := conn.recv(65536):
        reply += chunk
    return reply


def _asgi_post(app, path: str, chunks, headers: dict[str, str]) -> tuple[int, bytes, int]:
    """POST ``chunks`` to the ASGI app with ``headers`` as they are (whatever length they
    claim); ``(status, body, bytes the app pulled)``."""
    pulled = 0
    sent: list[dict] = []
    parts = iter(chunks)

    async def receive():
        nonlocal pulled
        part = next(parts, None)
        if part is None:
            await asyncio.Event().wait()  # a client that stops sending
        pulled += len(part)
        return {"type": "http.request", "body": part, "more_body": True}

    async def send(message):
        sent.append(message)

    scope = {
        "type": "http", "asgi": {"version": "3.0"}, "http_version": "1.1", "method": "POST", "scheme": "http",
        "path": path, "raw_path": path.encode(), "query_string": b"", "root_path": "",
        "headers": [(k.lower().encode(), v.encode()) for k, v in headers.items()],
        "client": ("127.0.0.1", 50000), "server": ("127.0.0.1", PORT),
    }
    asyncio.run(app(scope, receive, send))
    start = next(m for m in sent if m["type"] == "http.response.start")
    return start["status"], b"".join(m.get("body", b"") for m in sent if m["type"] == "http.response.body"), pulled


def _json_headers(app, length: str | None) -> dict[str, str]:
    """Headers of a JSON call with a CSRF token the ``app`` signed (one of its own pages' cookie)."""
    token = TestClient(app, base_url=f"http://127.0.0.1:{PORT}").get("/api/csrf").cookies[CSRF_COOKIE]
    headers = {"host": f"127.0.0.1:{PORT}", "content-type": "application/json", "cookie": f"{CSRF_COOKIE}={token}",
               CSRF_HEADER: token}
    return headers if length is None else {**headers, "content-length": length}


@pytest.mark.parametrize("declared", ["1", None])
def test_body_bytes_are_counted_as_they_arrive_whatever_the_headers_say(seeded_db, declared):
    """A body that claims one byte (or nothing) and streams 5 MiB is cut off at the 1 MiB
    limit: the app stops pulling, answers 413, and stores nothing."""
    before = table_rows(seeded_db)
    app = create_app(Settings(db_path=seeded_db, port=PORT))
    chunk = 64 * 1024
    chunks = [b'{"status": "parked", "version": 0, "note": "'] + [b"x" * chunk] * (5 * MIB // chunk)
    status, body, pulled = _asgi_post(app, _verdict_url(), chunks, _json_headers(app, declared))
    assert status == 413 and b"1 MiB" in body
    assert pulled <= MIB + chunk + len(chunks[0])
    assert table_rows(seeded_db) == before


def test_a_body_that_stops_arriving_is_dropped(seeded_db):
    app = create_app(Settings(db_path=seeded_db, port=PORT, request_timeout_s=0.2))
    status, body, _ = _asgi_post(app, _verdict_url(), [b'{"status": "parked"'], _json_headers(app, "1000"))
    assert status == 408 and b"stopped arriving" in body


def test_a_json_body_over_one_mebibyte_is_refused_unread(seeded_db):
    before = table_rows(seeded_db)
    with _client(seeded_db) as client:
        response = client.post(_verdict_url(), json={**PARK, "note": "x" * (2 * MIB)}, headers=_csrf_headers(client))
        assert response.status_code == 413 and "1 MiB" in response.json()["detail"]
        assert response.headers["connection"] == "close"
    assert table_rows(seeded_db) == before


def test_a_note_over_5000_characters_is_refused_by_api_form_and_bulk(seeded_db):
    before = table_rows(seeded_db)
    long_note = "n" * 5_001
    with _client(seeded_db) as client:
        headers = _csrf_headers(client)
        response = client.post(_verdict_url(), json={**PARK, "note": long_note}, headers=headers)
        assert response.status_code == 422 and "at most 5,000 characters" in response.json()["detail"]
        assert "5,001" in response.json()["detail"]
        form = {"action": "park", "reviewer": "Ada", "version": "0", "note": long_note}
        page = client.post(f"/series/{quote(SEED_ID, safe='/')}/verdict", data=form, headers=headers)
        assert page.status_code == 422 and "at most 5,000 characters" in page.text
        bulk = client.post("/api/approve-firm", json={"reviewer": "Ada", "note": long_note}, headers=headers)
        assert bulk.status_code == 422 and "at most 5,000 characters" in bulk.json()["detail"]
        assert client.post(_verdict_url(), json={**PARK, "note": "n" * 5_000}, headers=headers).status_code == 200
    after = table_rows(seeded_db)
    assert after["verdicts"] != before["verdicts"] and len(after["verdict_history"]) == len(before["verdict_history"]) + 1


# --- 4. forecast checks ------------------------------------------------------------------------

def _backtest_url(series_id: str = CHECK_ID) -> str:
    return f"/api/series/{quote(series_id, safe='/')}/backtest"


def test_the_reported_expensive_check_is_refused_at_once(check_db):
    with _client(check_db) as client:
        response = client.get(_backtest_url(), params={"order": "5,1,5", "seasonal_order": "2,1,2,7", "origins": 50, "horizon": 100})
        assert response.status_code == 422


@pytest.mark.parametrize(("params", "words"), [
    ({"order": "1,0,0", "origins": 21}, "less than or equal to 20"),
    ({"order": "1,0,0", "horizon": 31}, "horizon (31) must be between 1 and 30"),
    ({"order": "0,1,1", "seasonal_order": "0,1,1,12", "horizon": 31}, "two seasons or 30 steps"),
    ({"order": "6,1,0"}, "engine's search limits"),
    ({"order": "1,0,6"}, "engine's search limits"),
    ({"order": "1,0,0", "seasonal_order": "3,0,0,12"}, "engine's search limits"),
    ({"order": "11,0,0"}, "outside 0..10"),
])
def test_a_check_beyond_its_bounds_is_refused_with_422(check_db, params, words):
    with _client(check_db) as client:
        response = client.get(_backtest_url(), params=params)
        assert response.status_code == 422
        assert words in json.dumps(response.json()["detail"])


def test_the_bounds_are_those_of_two_seasons_when_longer_than_30_steps(check_db):
    with _client(check_db) as client:
        allowed = client.get(_backtest_url(), params={"order": "0,1,1", "seasonal_order": "0,1,1,24", "horizon": 40, "origins": 1})
        assert allowed.status_code == 200 and allowed.json()["horizon"] == 40
        refused = client.get(_backtest_url(), params={"order": "0,1,1", "seasonal_order": "0,1,1,24", "horizon": 49})
        assert refused.status_code == 422 and "between 1 and 48" in refused.json()["detail"]


def test_one_computation_per_series_at_a_time(check_db):
    with _client(check_db) as client:
        headers = _csrf_headers(client)
        with client.app.state.series_slots.hold(CHECK_ID):
            busy = client.get(_backtest_url(), params={"order": "1,0,0", "origins": 1})
            assert busy.status_code == 429 and "already busy" in busy.json()["detail"]
            fit = client.post(f"/api/series/{quote(CHECK_ID, safe='/')}/fit", json={"order": [1, 0, 0]}, headers=headers)
            assert fit.status_code == 429
            page = client.get(f"/series/{quote(CHECK_ID, safe='/')}/forecast-check", params={"order": "1,0,0"})
            assert page.status_code == 429 and "already busy" in page.text
            fragment = client.get(f"/series/{quote(CHECK_ID, safe='/')}/forecast-check", params={"order": "1,0,0", "fragment": "true"})
            assert fragment.status_code == 429 and "already busy" in fragment.text and "<html" not in fragment.text
        done = client.get(_backtest_url(), params={"order": "1,0,0", "origins": 1})
        assert done.status_code == 200 and done.json()["origins"] == 1


def test_the_server_runs_at_most_its_limit_of_computations_at_once(check_db):
    # Checks asked on many series at once took every thread from the pages before.
    with _client(check_db) as client:
        slots = client.app.state.series_slots
        with contextlib.ExitStack() as held:
            for k in range(slots.limit):
                held.enter_context(slots.hold(f"other/{k}"))
            busy = client.get(_backtest_url(), params={"order": "1,0,0", "origins": 1})
            assert busy.status_code == 429 and "the server is busy" in busy.json()["detail"]
            assert client.get("/").status_code == 200  # the pages still answer
        assert client.get(_backtest_url(), params={"order": "1,0,0", "origins": 1}).status_code == 200


def test_another_site_cannot_start_a_check_but_a_link_may_open_a_page(check_db):
    image = {"Sec-Fetch-Site": "cross-site", "Sec-Fetch-Mode": "no-cors", "Sec-Fetch-Dest": "image"}
    frame = {"Sec-Fetch-Site": "cross-site", "Sec-Fetch-Mode": "navigate", "Sec-Fetch-Dest": "iframe"}
    link = {"Sec-Fetch-Site": "cross-site", "Sec-Fetch-Mode": "navigate", "Sec-Fetch-Dest": "document", "Sec-Fetch-User": "?1"}
    with _client(check_db) as client:
        check = f"/series/{quote(CHECK_ID, safe='/')}/forecast-check"
        assert client.get(_backtest_url(), params={"order": "1,0,0"}, headers=image).status_code == 403
        assert client.get(check, params={"order": "1,0,0"}, headers=image).status_code == 403
        assert client.get(check, params={"order": "1,0,0"}, headers=frame).status_code == 403
        assert client.get(f"/series/{quote(CHECK_ID, safe='/')}", headers=link).status_code == 200
        assert client.get("/", headers={**link, "Sec-Fetch-Site": "same-site"}).status_code == 200


# --- 14. a damaged database ----------------------------------------------------------------------

def _damage(path: Path) -> None:
    """Overwrite every page but the first (the header and the schema's root) with a pattern."""
    size = path.stat().st_size
    with path.open("r+b") as handle:
        handle.seek(4096)
        handle.write(b"\xa5" * (size - 4096))


@pytest.mark.parametrize("command", ["serve", "analyze", "import", "status"])
def test_a_damaged_database_is_named_in_one_line_at_start(seeded_db, command):
    _damage(seeded_db)
    args = {
        "serve": ["serve", "--db", str(seeded_db), "--port", "9", "--no-browser"],
        "analyze": ["analyze", "--db", str(seeded_db), "--workers", "1"],
        "import": ["import", str(REPO / "tests" / "hardening" / "corpus" / "bom.csv"), "--db", str(seeded_db)],
        "status": ["status", "--db", str(seeded_db)],
    }[command]
    done = run_lagdesk(*args, timeout=120)
    assert done.returncode == 2, done
    assert_no_traceback(done.stderr)
    lines = [line for line in done.stderr.strip().splitlines() if line.startswith("lagdesk")]
    assert len(lines) == 1, done.stderr
    assert str(seeded_db) in lines[0] and "damaged" in lines[0] and "written" not in lines[0]


def test_a_read_of_a_database_damaged_while_served_says_so_not_written(seeded_db):
    with _client(seeded_db) as client:
        assert client.get("/api/portfolio").status_code == 200  # opened and checked
        _damage(seeded_db)
        response = client.get("/api/series")
        assert response.status_code == 503
        detail = response.json()["detail"]
        assert "damaged" in detail and "written" not in detail and "rolled back" not in detail
        page = client.get("/")
        assert page.status_code == 503 and "damaged" in page.text and "rolled back" not in page.text


def test_a_read_failure_says_could_not_be_read():
    text = storage_error_text(sqlite3.OperationalError("disk I/O error"), "x.db", writing=False)
    assert text == "x.db: the database could not be read (disk I/O error)"
    assert "rolled back" in storage_error_text(sqlite3.OperationalError("disk I/O error"), "x.db")


# --- 15. orders decided on data that changed since ------------------------------------------

def _exported(check_db: Path, tmp_path: Path, client: TestClient) -> dict[str, object]:
    """``data_changed`` of the one order as each way out says it, and the CLI's summary line."""
    output = tmp_path / "orders.json"
    done = run_lagdesk("export", "--db", str(check_db), "-o", str(output))
    assert done.returncode == 0, done.stderr
    [cli] = json.loads(output.read_text())["orders"]
    [api] = client.get("/api/orders").json()["orders"]
    [download] = client.get("/export/lagdesk-orders.json").json()["orders"]
    [row] = csv.DictReader(io.StringIO(client.get("/export/lagdesk-orders.csv").text))
    return {"cli": cli["data_changed"], "api": api["data_changed"], "json": download["data_changed"],
            "csv": row["data_changed"], "summary": done.stdout}


def test_an_order_decided_before_new_data_is_marked_everywhere(check_db, tmp_path):
    with _client(check_db) as client:
        decided = client.post(_verdict_url(CHECK_ID), json={"status": "overridden", "order": [1, 0, 0], "version": 0, "reviewer": "Ada",
                                                                "confirm": True},
                              headers=_csrf_headers(client))
        assert decided.status_code == 200
        fresh = _exported(check_db, tmp_path, client)
        assert (fresh["cli"], fresh["api"], fresh["json"], fresh["csv"]) == (False, False, False, "false")
        assert "changed" not in fresh["summary"]

        values = good_values(CHECK_POINTS + 6)
        new_file = tmp_path / "more.csv"
        new_file.write_bytes(csv_bytes(series_rows(CHECK_ID, values, month_starts(CHECK_POINTS + 6))))
        db = open_database(check_db)
        try:
            import_portfolio(db, new_file)
        finally:
            db.close()
        stale = _exported(check_db, tmp_path, client)
        assert (stale["cli"], stale["api"], stale["json"], stale["csv"]) == (True, True, True, "true")
        assert "marked data_changed" in stale["summary"] and CHECK_ID in stale["summary"]


# --- 16. killed runs, export permissions, slow headers -----------------------------------------

KILLED_RUN = (
    "import os, signal, sys\n"
    "from app.jobs.analyze import begin_analysis\n"
    "run = begin_analysis(sys.argv[1], workers=1)\n"
    "os.kill(os.getpid(), signal.SIGKILL)\n"
)


def _run_killed_with_kill_9(db_path: Path) -> None:
    done = subprocess.run([sys.executable, "-c", KILLED_RUN, str(db_path)], cwd=REPO, capture_output=True, timeout=120)
    assert done.returncode == -signal.SIGKILL, done.stderr
    assert _run_states(db_path) == ["running"]


def _run_states(db_path: Path) -> list[str]:
    conn = sqlite3.connect(db_path)
    try:
        return [state for (state,) in conn.execute("SELECT state FROM runs ORDER BY run_id")]
    finally:
        conn.close()


def test_a_run_killed_with_kill_9_is_shown_interrupted(seeded_db):
    _run_killed_with_kill_9(seeded_db)
    with _client(seeded_db) as client:
        assert client.get("/api/runs/latest").json()["state"] == "interrupted"
        assert "interrupted" in client.get("/runs").text
    assert _run_states(seeded_db) == ["interrupted"]


def test_serve_closes_a_killed_run_when_it_starts(seeded_db, live_server):
    _run_killed_with_kill_9(seeded_db)
    live_server(seeded_db)
    assert _run_states(seeded_db) == ["interrupted"]


def _export_with_umask(db_path: Path, output: Path, umask: int) -> None:
    done = subprocess.run(
        [sys.executable, "-m", "app.cli", "export", "--db", str(db_path), "-o", str(output)],
        cwd=REPO, capture_output=True, text=True, timeout=120, preexec_fn=lambda: os.umask(umask),
    )
    assert done.returncode == 0, done.stderr


@pytest.mark.parametrize(("umask", "mode"), [(0o022, 0o644), (0o027, 0o640), (0o077, 0o600)])
def test_a_new_export_file_gets_the_users_umask(seeded_db, tmp_path, umask, mode):
    output = tmp_path / "orders.json"
    _export_with_umask(seeded_db, output, umask)
    assert output.stat().st_mode & 0o777 == mode


def test_an_export_written_again_keeps_the_permissions_it_was_given(seeded_db, tmp_path):
    output = tmp_path / "orders.json"
    _export_with_umask(seeded_db, output, 0o022)
    output.chmod(0o600)  # restricted on purpose: orders are business data
    _export_with_umask(seeded_db, output, 0o022)
    assert output.stat().st_mode & 0o777 == 0o600


SLOW_HEADER_LINES = 200  # a line every POLL_S: far longer than the 1 s deadline below
POLL_S = 0.1


def _trickle_until_closed(conn: socket.socket) -> bool:
    """Send a header line every POLL_S without ever ending the headers; True once the server
    has closed the connection."""
    for _ in range(SLOW_HEADER_LINES):
        readable, _, _ = select.select([conn], [], [], POLL_S)
        if readable and conn.recv(4096) == b"":
            return True
        try:
            conn.sendall(b"X-Slow: 1\r\n")
        except (BrokenPipeError, ConnectionResetError):
            return True
    return False


def test_headers_sent_too_slowly_end_the_connection(seeded_db):
    with served(seeded_db, request_timeout_s=1.0) as port:
        with socket.create_connection(("127.0.0.1", port), timeout=30) as conn:
            conn.sendall(f"GET /login HTTP/1.1\r\nHost: 127.0.0.1:{port}\r\n".encode())
            assert _trickle_until_closed(conn)
        with socket.create_connection(("127.0.0.1", port), timeout=30) as conn:
            conn.sendall(f"GET /login HTTP/1.1\r\nHost: 127.0.0.1:{port}\r\n\r\n".encode())
            started = time.monotonic()
            reply = b""
            while b"</html>" not in reply and time.monotonic() - started < 30:
                reply += conn.recv(65536)
            assert reply.startswith(b"HTTP/1.1 200")
            conn.sendall(f"GET /login HTTP/1.1\r\nHost: 127.0.0.1:{port}\r\n".encode())  # the next request, slowly
            assert _trickle_until_closed(conn)
