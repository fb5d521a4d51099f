"""Who may reach the dashboard and what a request may carry (app.web.security).

The rules checked are those the module states: loopback by default; any other address only
with an access token; the token as a cookie after the login page or as the ``X-Lagdesk-Token``
header, the header required for state-changing API calls; a CSRF token on every form post; a
cross-site ``Origin`` refused; bodies over the upload limit refused before they are read;
series ids and notes shown as text.
"""

from __future__ import annotations

import hmac
import html
import socket
from urllib.parse import quote

import httpx
import pytest
from conftest import SEED_ID, assert_no_traceback, run_lagdesk, stored_series, table_rows
from corpus_files import CORPUS_DIR, csv_bytes, good_values, series_rows
from fastapi.testclient import TestClient

from app.config import Settings
from app.store.database import open_database
from app.store.imports import import_portfolio
from app.web import limits, security
from app.web.main import create_app
from app.web.security import CSRF_COOKIE, CSRF_FIELD, CSRF_HEADER, TOKEN_COOKIE, TOKEN_HEADER, require_token_off_loopback

TOKEN = "correct-horse-battery-staple-42"
TEST_HOSTS = ("testserver",)  # the test client's Host header
SCRIPT = "<script>alert('note')</script>"


def _client(db_path, **settings) -> TestClient:
    return TestClient(create_app(Settings(db_path=db_path, analysis_workers=1, allowed_hosts=TEST_HOSTS, **settings)))


def _csrf(client: TestClient, page: str = "/") -> str:
    client.get(page)
    return client.cookies[CSRF_COOKIE]


def _api_csrf(client: TestClient) -> dict[str, str]:
    """The header a script sends with every state-changing API call."""
    return {CSRF_HEADER: _csrf(client)}


# --- serve: loopback by default, a token for anything else ------------------------------------

def test_serve_refuses_a_public_address_without_a_token_in_one_line(seeded_db):
    done = run_lagdesk("serve", "--db", str(seeded_db), "--host", "0.0.0.0", "--port", "9", "--no-browser",
                       env={security.TOKEN_ENV_VAR: ""})
    assert done.returncode == 2
    assert_no_traceback(done.stderr)
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and "0.0.0.0" in lines[0] and "--token" in lines[0]
    assert done.stdout == ""


def test_serve_refuses_a_short_token(seeded_db):
    done = run_lagdesk("serve", "--db", str(seeded_db), "--host", "10.1.2.3", "--token", "short", "--no-browser")
    assert done.returncode == 2 and "at least" in done.stderr and len(done.stderr.strip().splitlines()) == 1


@pytest.mark.parametrize("host", ["127.0.0.1", "127.8.9.10", "localhost", "::1"])
def test_loopback_needs_no_token(host, tmp_path):
    require_token_off_loopback(Settings(db_path=tmp_path / "x.db", host=host))


@pytest.mark.parametrize("host", ["0.0.0.0", "::", "192.168.1.20", "lagdesk.example"])
def test_other_addresses_need_a_token(host, tmp_path):
    with pytest.raises(security.ExposedWithoutToken):
        require_token_off_loopback(Settings(db_path=tmp_path / "x.db", host=host))
    require_token_off_loopback(Settings(db_path=tmp_path / "x.db", host=host, access_token=TOKEN))


def test_serve_is_loopback_by_default(seeded_db, live_server):
    server = live_server(seeded_db)
    assert "http://127.0.0.1:" in server.first_line
    others = [a for a in _local_addresses() if not a.startswith("127.")]
    for address in others:  # this machine's own other addresses: nothing listens there
        with pytest.raises(OSError), socket.create_connection((address, server.port), timeout=1):
            pass


def _local_addresses() -> list[str]:
    try:
        return sorted({info[4][0] for info in socket.getaddrinfo(socket.gethostname(), None, socket.AF_INET)})
    except OSError:
        return []


def test_generated_token_is_printed_once_and_required(seeded_db, live_server):
    server = live_server(seeded_db, "--token", "generate")
    token = server.first_line.rsplit(" ", 1)[-1].strip()
    assert len(token) >= 40
    assert httpx.get(f"{server.url}/api/portfolio").status_code == 401
    assert httpx.get(f"{server.url}/api/portfolio", headers={TOKEN_HEADER: token}).status_code == 200
    assert token not in server.process.stdout.readline()  # the next line is the address, without it


def test_token_from_the_environment(seeded_db, live_server):
    server = live_server(seeded_db, env={security.TOKEN_ENV_VAR: TOKEN})
    assert httpx.get(f"{server.url}/api/portfolio").status_code == 401
    assert httpx.get(f"{server.url}/api/portfolio", headers={TOKEN_HEADER: TOKEN}).status_code == 200


# --- with a token ------------------------------------------------------------------------------

@pytest.fixture
def guarded(seeded_db):
    with _client(seeded_db, access_token=TOKEN) as client:
        yield client


def test_pages_send_a_stranger_to_the_login_page(guarded):
    response = guarded.get("/series/x?q=1", follow_redirects=False)
    assert response.status_code == 303
    assert response.headers["location"] == "/login?next=" + quote("/series/x?q=1", safe="")
    assert guarded.get("/login").status_code == 200
    assert guarded.get("/static/lagdesk.css").status_code == 200  # the login page's own style


def test_login_with_the_wrong_token_is_refused(guarded):
    csrf = _csrf(guarded, "/login")
    response = guarded.post("/login", data={"token": TOKEN[:-1] + "x", CSRF_FIELD: csrf, "next": "/"}, follow_redirects=False)
    assert response.status_code == 401 and TOKEN_COOKIE not in guarded.cookies
    assert guarded.get("/", follow_redirects=False).status_code == 303


def test_login_sets_the_cookie_and_goes_back(guarded):
    csrf = _csrf(guarded, "/login")
    response = guarded.post("/login", data={"token": TOKEN, CSRF_FIELD: csrf, "next": "/upload"}, follow_redirects=False)
    assert response.status_code == 303 and response.headers["location"] == "/upload"
    assert "httponly" in response.headers["set-cookie"].lower() and "samesite=strict" in response.headers["set-cookie"].lower()
    assert guarded.get("/").status_code == 200
    assert guarded.get("/api/portfolio").status_code == 200  # reading the API with the cookie is fine


def test_login_never_sends_the_browser_to_another_host(guarded):
    csrf = _csrf(guarded, "/login")
    for target in ("//evil.example/", "https://evil.example/", "/\\evil.example"):
        response = guarded.post("/login", data={"token": TOKEN, CSRF_FIELD: csrf, "next": target}, follow_redirects=False)
        assert response.headers["location"] == "/"


def test_api_needs_the_token_header_to_change_anything(guarded, seeded_db):
    body = {"status": "parked", "version": 0, "reviewer": "Ada"}
    url = f"/api/series/{quote(SEED_ID, safe='/')}/verdict"
    assert guarded.post(url, json=body).status_code == 401
    guarded.cookies.set(TOKEN_COOKIE, TOKEN)  # a cookie alone: what a cross-site page could ride on
    refused = guarded.post(url, json=body)
    assert refused.status_code == 401 and TOKEN_HEADER in refused.json()["detail"]
    before = table_rows(seeded_db)
    assert guarded.post(url, json=body, headers={TOKEN_HEADER: "x" * len(TOKEN)}).status_code == 401
    assert table_rows(seeded_db) == before
    accepted = guarded.post(url, json=body, headers={TOKEN_HEADER: TOKEN})
    assert accepted.status_code == 200 and accepted.json()["version"] == 1


def test_tokens_are_compared_in_constant_time(monkeypatch):
    calls = []
    compare = hmac.compare_digest

    def spy(a, b):
        calls.append((a, b))
        return compare(a, b)

    monkeypatch.setattr(security.hmac, "compare_digest", spy)
    assert security.tokens_match(TOKEN, TOKEN) and not security.tokens_match("nope", TOKEN)
    assert not security.tokens_match(None, TOKEN)
    assert len(calls) == 2


# --- forms: CSRF token and origin --------------------------------------------------------------

def test_every_form_carries_the_csrf_token(seeded_db):
    with _client(seeded_db) as client:
        csrf = _csrf(client)
        pages = ["/", "/upload", "/runs", f"/series/{quote(SEED_ID, safe='/')}", "/approve-firm"]
        for page in pages:
            text = client.get(page).text
            forms = text.count('method="post"')
            assert forms and text.count(f'name="{CSRF_FIELD}" value="{csrf}"') == forms, page


def test_a_form_post_without_the_csrf_token_is_refused(seeded_db):
    with _client(seeded_db) as client:
        csrf = _csrf(client)
        before = table_rows(seeded_db)
        url = f"/series/{quote(SEED_ID, safe='/')}/verdict"
        form = {"action": "park", "reviewer": "Ada", "version": "0"}
        assert client.post(url, data=form).status_code == 403
        assert client.post(url, data={**form, CSRF_FIELD: "forged"}).status_code == 403
        assert table_rows(seeded_db) == before
        response = client.post(url, data={**form, CSRF_FIELD: csrf}, follow_redirects=False)
        assert response.status_code == 303


def test_a_cookie_this_server_did_not_sign_is_replaced_not_trusted(seeded_db):
    # Cookies are not kept apart by port: a program on another port of 127.0.0.1 can set
    # lagdesk_csrf to a value it also puts in a form. A server attack had such a forged pair
    # (cookie x, field x, no Origin header) park a series. The token is now signed by this
    # server process, so the pair is refused, and the page hands the browser a token of its own.
    url = f"/series/{quote(SEED_ID, safe='/')}/verdict"
    form = {"action": "park", "reviewer": "Ada", "version": "0"}
    forged = {"cookie": f"{CSRF_COOKIE}=x"}
    before = table_rows(seeded_db)
    with _client(seeded_db) as client:  # its cookie jar stays empty: each request carries its own
        assert client.post(url, data={**form, CSRF_FIELD: "x"}, headers=forged).status_code == 403
        api = client.post(f"/api/series/{quote(SEED_ID, safe='/')}/verdict", json={"status": "parked", "version": 0,
                          "reviewer": "Ada"}, headers={**forged, CSRF_HEADER: "x"})
        assert api.status_code == 403
        assert table_rows(seeded_db) == before
        page = client.get("/", headers=forged)
        given = page.headers["set-cookie"].split(";")[0].removeprefix(f"{CSRF_COOKIE}=")
        assert given != "x" and f'name="{CSRF_FIELD}" value="{given}"' in page.text
        own = {"cookie": f"{CSRF_COOKIE}={given}"}
        assert client.post(url, data={**form, CSRF_FIELD: given}, headers=own, follow_redirects=False).status_code == 303
    # Another server process signs with another key: its tokens are not this one's.
    with _client(seeded_db) as other:
        assert "set-cookie" in other.get("/", headers=own).headers


def test_a_cross_site_post_is_refused_even_with_a_token(seeded_db):
    with _client(seeded_db) as client:
        csrf = _csrf(client)
        url = f"/series/{quote(SEED_ID, safe='/')}/verdict"
        form = {"action": "park", "reviewer": "Ada", "version": "0", CSRF_FIELD: csrf}
        assert client.post(url, data=form, headers={"Origin": "https://evil.example"}).status_code == 403
        api = f"/api/series/{quote(SEED_ID, safe='/')}/verdict"
        body = {"status": "parked", "version": 0}
        assert client.post(api, json=body, headers={"Origin": "https://evil.example"}).status_code == 403
        files = {"file": ("x.csv", b"series_id,timestamp,value\n", "text/csv")}
        assert client.post("/api/imports", files=files, headers={"Origin": "null"}).status_code == 403
        assert client.post(url, data=form, headers={"Origin": "http://testserver"}, follow_redirects=False).status_code == 303


# --- output is text ----------------------------------------------------------------------------

def test_a_note_with_markup_is_shown_as_text(seeded_db):
    with _client(seeded_db) as client:
        url = f"/api/series/{quote(SEED_ID, safe='/')}/verdict"
        assert client.post(url, json={"status": "parked", "version": 0, "note": SCRIPT, "reviewer": SCRIPT},
                           headers=_api_csrf(client)).status_code == 200
        for page in (f"/series/{quote(SEED_ID, safe='/')}", "/"):
            assert SCRIPT not in client.get(page).text
        review = client.get(f"/series/{quote(SEED_ID, safe='/')}").text
        assert "&lt;script&gt;" in review and SCRIPT in html.unescape(review)


def test_series_ids_with_markup_quotes_and_emoji_are_shown_as_text(seeded_db, live_server):
    """Against a live server: the test client decodes a path twice, so an id holding ``%20``
    would not reach the app as a browser sends it."""
    db = open_database(seeded_db)
    try:
        report = import_portfolio(db, CORPUS_DIR / "odd_ids.csv")
    finally:
        db.close()
    server = live_server(seeded_db)
    queue = httpx.get(f"{server.url}/").text
    assert "<script>alert(" not in queue and "&lt;script&gt;alert(" in queue
    for series_id in report.added:
        page = httpx.get(f"{server.url}/series/{quote(series_id, safe='/')}")
        assert page.status_code == 200, series_id
        assert "<script>alert(" not in page.text
        assert series_id in html.unescape(page.text)  # shown, as text


# --- upload limits -----------------------------------------------------------------------------

def test_an_upload_over_the_size_limit_is_refused_before_it_is_read(seeded_db):
    before = table_rows(seeded_db)
    with _client(seeded_db, max_upload_bytes=1024) as client:
        big = csv_bytes(series_rows("big", good_values(100_000 // 30)))
        assert len(big) > 1024 + limits.FORM_ENVELOPE_BYTES
        response = client.post("/api/imports", files={"file": ("big.csv", big, "text/csv")})
        assert response.status_code == 413 and "upload limit" in response.json()["detail"]
        small_enough = csv_bytes(series_rows("mid", good_values(100)))  # over the file limit, inside the envelope
        response = client.post("/api/imports", files={"file": ("mid.csv", small_enough, "text/csv")}, headers=_api_csrf(client))
        assert response.status_code == 413 and "mid.csv" in response.json()["detail"]
    assert table_rows(seeded_db) == before


def test_an_upload_with_too_many_series_is_refused_whole(seeded_db, tmp_path):
    before = table_rows(seeded_db)
    rows = [row for sid in ("a", "b", "c") for row in series_rows(sid, good_values())]
    with _client(seeded_db, max_upload_series=2) as client:
        response = client.post("/api/imports", files={"file": ("three.csv", csv_bytes(rows), "text/csv")}, headers=_api_csrf(client))
    assert response.status_code == 400
    assert response.json()["detail"] == "three.csv: holds more than 2 series; at most 2 are accepted in one file"
    assert table_rows(seeded_db) == before


def test_an_uploaded_series_with_too_many_points_is_rejected_and_the_rest_kept(seeded_db):
    rows = series_rows("long", good_values(30)) + series_rows("fine", good_values(20))
    with _client(seeded_db, max_upload_points=25) as client:
        response = client.post("/api/imports", files={"file": ("mixed.csv", csv_bytes(rows), "text/csv")}, headers=_api_csrf(client))
    assert response.status_code == 200
    report = response.json()
    assert report["added"] == ["fine"]
    assert report["rejected"] == [{
        "series_id": "long", "row": 27, "flag": "too_long",
        "message": "series 'long' (line 27): has 30 rows; at most 25 are accepted per series",
    }]
    assert stored_series(seeded_db) == {SEED_ID, "fine"}


def test_a_live_server_refuses_a_huge_or_unsized_body_at_once(seeded_db, live_server):
    """Only the headers are sent: a server that read (or spooled) the body first would wait."""
    server = live_server(seeded_db)
    with socket.create_connection(("127.0.0.1", server.port), timeout=10) as conn:
        conn.sendall(
            f"POST /api/imports HTTP/1.1\r\nHost: 127.0.0.1:{server.port}\r\n".encode() + b"Content-Type: multipart/form-data; boundary=x\r\n"
            b"Content-Length: 10000000000\r\n\r\n"
        )
        reply = b""
        while b"upload limit" not in reply and (chunk := conn.recv(4096)):
            reply += chunk
        reply = reply.decode()
    assert reply.startswith("HTTP/1.1 413"), reply
    assert "upload limit" in reply
    with socket.create_connection(("127.0.0.1", server.port), timeout=10) as conn:
        conn.sendall(f"POST /api/imports HTTP/1.1\r\nHost: 127.0.0.1:{server.port}\r\n".encode() + b"Transfer-Encoding: chunked\r\n\r\n5\r\nhello\r\n")
        reply = conn.recv(4096).decode()
    assert reply.startswith("HTTP/1.1 411"), reply  # no length: it could not be refused up front
