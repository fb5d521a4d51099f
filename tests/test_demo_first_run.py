"""The demo's first run explains itself: it names the series it could not analyse and why, its
hints run as typed, and Ctrl-C stops its server with exit status 0, from ``lagdesk demo`` and
from ``make demo`` at a terminal.

Slow: the demo portfolio (93 series) is analysed once for the module.
"""

from __future__ import annotations

import os
import pty
import select
import shlex
import shutil
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import httpx
import pytest

from app.core.errors import SeriesProblem
from app.core.portfolio_file import read_portfolio
from app.core.prepare import prepare_series
from app.jobs.demo import DEMO_PORTFOLIO, build_demo_database

pytestmark = pytest.mark.slow

REPO = Path(__file__).resolve().parents[1]
VENV_BIN = Path(sys.executable).parent
TYPED = str(Path(os.path.relpath(VENV_BIN, REPO)) / "lagdesk")  # .venv/bin/lagdesk in a clone after make
SERVER_START_S = 180  # a generous bound for the import of an unchanged demo and the server's start
CTRL_C = b"\x03"


@pytest.fixture(scope="module")
def demo_db(tmp_path_factory) -> Path:
    return build_demo_database(tmp_path_factory.mktemp("demo") / "demo.db", workers=2)


def fresh_clone_env() -> dict[str, str]:
    """The environment of a shell in a fresh clone: the virtual environment not activated."""
    others = [p for p in os.environ.get("PATH", "").split(os.pathsep) if p and Path(p).absolute() != VENV_BIN.absolute()]
    return {**os.environ, "PATH": os.pathsep.join(others)}


def free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


def wait_until_served(port: int, alive) -> None:
    deadline = time.monotonic() + SERVER_START_S
    while time.monotonic() < deadline and alive():
        try:
            if httpx.get(f"http://127.0.0.1:{port}/", timeout=5).status_code == 200:
                return
        except httpx.HTTPError:
            time.sleep(0.2)
    pytest.fail("the demo server did not answer")


def rejections() -> dict[str, str]:
    """What preparing each demo series refuses, by id: the engine's own words (prepare.py)."""
    found = {}
    for raw in read_portfolio(DEMO_PORTFOLIO).series:
        try:
            prepare_series(raw.values, raw.series_id, raw.lines)
        except SeriesProblem as problem:
            found[raw.series_id] = problem.message
    return found


def test_the_demo_names_the_series_it_could_not_analyse_and_its_hints_run_as_typed(demo_db):
    refused = rejections()
    assert len(refused) == 2  # the stuck sensor and the 8-point series (demo_data/README.md)

    done = subprocess.run([TYPED, "demo", "--db", str(demo_db), "--build-only"], cwd=REPO, env=fresh_clone_env(),
                          capture_output=True, text=True, timeout=600)

    assert done.returncode == 0, done.stderr
    lines = done.stdout.splitlines()
    assert lines[0] == "demo_data/portfolio.csv: 0 added, 0 updated, 91 unchanged, 2 rejected"
    for series_id, message in sorted(refused.items()):
        assert f"  {series_id}: rejected at import: {message}" in lines
    after = lines[lines.index("Next:") + 1:]
    hints = [line for line in after if line.startswith("  ")]
    assert hints and all(line.startswith(f"  {TYPED} ") for line in hints)
    assert after[len(hints):] == [line for line in after if line.startswith("(Or run 'source ")]  # last, after the commands it shortens
    status_hint = next(line for line in hints if " status " in line)
    command = shlex.split(status_hint)[:4]  # the command, without the words that follow it
    assert command == [TYPED, "status", "--db", str(demo_db)]
    status = subprocess.run(command, cwd=REPO, env=fresh_clone_env(), capture_output=True, text=True, timeout=120)
    assert status.returncode == 0 and "not analysed (2):" in status.stdout


def test_sigint_stops_the_demo_server_with_exit_status_0(demo_db):
    port = free_port()
    server = subprocess.Popen([TYPED, "demo", "--db", str(demo_db), "--no-browser", "--port", str(port)], cwd=REPO,
                              env=fresh_clone_env(), stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        wait_until_served(port, lambda: server.poll() is None)
        server.send_signal(signal.SIGINT)
        out, err = server.communicate(timeout=60)
    finally:
        if server.poll() is None:
            server.kill()
    assert server.returncode == 0, err
    assert "Ctrl-C stops it" in out


@pytest.mark.skipif(shutil.which("make") is None, reason="make is not installed")
def test_ctrl_c_at_a_terminal_stops_make_demo_with_exit_status_0(demo_db):
    """``make demo`` on a pseudo-terminal; Ctrl-C typed there sends SIGINT to the terminal's
    foreground process group, which holds make too unless the recipe runs the server as a job."""
    if not (REPO / ".venv" / "bin" / "lagdesk").is_file():
        pytest.skip("make demo runs .venv/bin/lagdesk, which this environment lacks")
    port = free_port()
    # -o: take the virtual environment as it is (make would otherwise reinstall it when
    # pyproject.toml is newer than its stamp).
    argv = ["make", "-o", ".venv/.installed", "demo", f"DEMO_ARGS=--no-browser --port {port}"]
    pid, terminal = pty.fork()
    if pid == 0:
        os.chdir(REPO)
        os.execvpe(argv[0], argv, {**fresh_clone_env(), "LAGDESK_DB": str(demo_db)})
    shown = bytearray()

    def read_for(seconds: float) -> None:
        end = time.monotonic() + seconds
        while time.monotonic() < end:
            if select.select([terminal], [], [], 0.1)[0]:
                try:
                    shown.extend(os.read(terminal, 65536))
                except OSError:
                    return

    def alive() -> bool:
        read_for(0.1)
        return os.waitpid(pid, os.WNOHANG) == (0, 0)

    status = None
    try:
        wait_until_served(port, alive)
        os.write(terminal, CTRL_C)
        deadline = time.monotonic() + 60
        while status is None and time.monotonic() < deadline:
            read_for(0.2)
            finished, code = os.waitpid(pid, os.WNOHANG)
            status = os.waitstatus_to_exitcode(code) if finished else None
    finally:
        if status is None:
            os.kill(pid, signal.SIGKILL)
            os.waitpid(pid, 0)
        os.close(terminal)
    assert status == 0, shown.decode(errors="replace")[-2000:]
