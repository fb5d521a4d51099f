"""Fixtures for the hardening tests: a seeded database to compare before and after, and the
``lagdesk`` command run as a user runs it (a separate process, its stderr captured)."""

from __future__ import annotations

import os
import shutil
import signal
import socket
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import httpx
import pytest
from corpus_files import csv_bytes, good_values, series_rows
from fastapi.testclient import TestClient

from app.config import Settings
from app.store.database import open_database
from app.store.imports import import_portfolio
from app.web.main import create_app
from app.web.security import CSRF_COOKIE, CSRF_FIELD, CSRF_HEADER, CSRF_PATH

REPO = Path(__file__).resolve().parents[2]
SEED_ID = "seed/already-stored"
CLI_TIMEOUT_S = 300
SERVER_START_S = 30


def run_lagdesk(*args: str, env: dict | None = None, timeout: float = CLI_TIMEOUT_S) -> subprocess.CompletedProcess:
    """``lagdesk ARGS`` in a child process, as text, never raising on a non-zero exit."""
    return subprocess.run(
        [sys.executable, "-m", "app.cli", *args], cwd=REPO, capture_output=True, text=True,
        timeout=timeout, env={**os.environ, **(env or {})},
    )


def table_rows(db_path: Path) -> dict[str, list]:
    """Every row of every table of the database file, in a fixed order (read-only connection)."""
    conn = sqlite3.connect(f"file:{db_path}?mode=ro", uri=True)
    try:
        names = [r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table' ORDER BY name")]
        return {name: sorted(conn.execute(f"SELECT * FROM [{name}]").fetchall(), key=repr) for name in names}
    finally:
        conn.close()


def stored_series(db_path: Path) -> set[str]:
    return {row[0] for row in table_rows(db_path)["series"]}


def assert_no_traceback(text: str) -> None:
    assert "Traceback" not in text and 'File "' not in text, text[-2000:]


def web_client(db_path: Path, **settings) -> TestClient:
    """The app on ``db_path`` as a test client reaches it (``testserver`` is the host it sends)."""
    return TestClient(create_app(Settings(db_path=db_path, analysis_workers=1, allowed_hosts=("testserver",), **settings)))


def upload(client: TestClient, url: str, name: str, content: bytes, fields: dict[str, str]) -> httpx.Response:
    """Post a file as the upload form does (with the CSRF field of the page it was shown on) or,
    under ``/api/``, as a script does (with the CSRF header)."""
    fields, headers = dict(fields), {}
    if url.startswith("/api/"):
        client.get(CSRF_PATH)
        headers[CSRF_HEADER] = client.cookies[CSRF_COOKIE]
    else:
        client.get(url)
        fields[CSRF_FIELD] = client.cookies[CSRF_COOKIE]
    return client.post(url, files={"file": (name, content, "text/csv")}, data=fields, headers=headers)


@pytest.fixture(scope="session")
def seed_template(tmp_path_factory) -> Path:
    """A database holding one series already, so "unchanged" compares against real rows."""
    folder = tmp_path_factory.mktemp("seed")
    csv_path = folder / "seed.csv"
    csv_path.write_bytes(csv_bytes(series_rows(SEED_ID, good_values(level=70.0))))
    db_path = folder / "seed.db"
    db = open_database(db_path)
    try:
        import_portfolio(db, csv_path)
    finally:
        db.close()
    return db_path


@pytest.fixture
def seeded_db(seed_template, tmp_path) -> Path:
    """A private copy of the seeded database."""
    target = tmp_path / "lagdesk.db"
    shutil.copy(seed_template, target)
    return target


def free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


class LiveServer:
    """``lagdesk serve`` on a loopback port in a child process, for tests that need real
    sockets, concurrency and kill -9."""

    def __init__(self, db_path: Path, *extra: str, env: dict | None = None) -> None:
        self.db_path = db_path
        self.port = free_port()
        self.url = f"http://127.0.0.1:{self.port}"
        # stderr goes to a file: a pipe nobody reads would block the server once it filled.
        self.log_path = db_path.parent / f"serve-{self.port}.log"
        with self.log_path.open("w") as log:
            self.process = subprocess.Popen(
                [sys.executable, "-m", "app.cli", "serve", "--db", str(db_path), "--port", str(self.port), "--no-browser", *extra],
                cwd=REPO, stdout=subprocess.PIPE, stderr=log, text=True, env={**os.environ, **(env or {})},
            )
        self.first_line = self.process.stdout.readline()
        self._wait_until_up()

    def _wait_until_up(self) -> None:
        deadline = time.monotonic() + SERVER_START_S
        while time.monotonic() < deadline:
            if self.process.poll() is not None:
                raise RuntimeError(f"lagdesk serve exited: {self.log_path.read_text()}")
            try:
                httpx.get(f"{self.url}/login", timeout=1.0)
                return
            except httpx.TransportError:
                time.sleep(0.1)
        self.stop()
        raise RuntimeError(f"lagdesk serve did not answer within {SERVER_START_S} s")

    def kill(self) -> None:
        """kill -9: no shutdown handler runs."""
        self.process.send_signal(signal.SIGKILL)
        self.process.wait(timeout=10)

    def stop(self) -> str:
        """Stop the server (SIGTERM); its stderr."""
        if self.process.poll() is None:
            self.process.terminate()
            try:
                self.process.wait(timeout=10)
            except subprocess.TimeoutExpired:
                self.kill()
        return self.log_path.read_text()


@pytest.fixture
def live_server():
    """``live_server(db_path, *options)`` starts servers that are all stopped after the test."""
    started: list[LiveServer] = []

    def start(db_path: Path, *extra: str, env: dict | None = None) -> LiveServer:
        server = LiveServer(db_path, *extra, env=env)
        started.append(server)
        return server

    yield start
    for server in started:
        server.stop()
