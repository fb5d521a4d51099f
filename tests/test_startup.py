"""Start-up: the commands that need no engine load none of the heavy libraries, and a run that
will compile the likelihood first says so.

What a command imported is read from a fresh interpreter's ``-X importtime`` report (one line
per module imported), so the check sees the real ``python -m app.cli`` start, argument parsing
included. No timings are asserted: they depend on the machine and its load.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

from app.cli import RunProgressLine, announce_compile, main
from app.core import numba_cache
from app.jobs.analyze import RunProgress

REPO = Path(__file__).resolve().parents[1]
ENGINE_LIBRARIES = ("numba", "statsmodels", "scipy", "plotly")
COMMANDS = ("identify", "import", "analyze", "status", "demo", "export", "backtest", "decide", "serve")


def imported_modules(*code_or_args: str) -> set[str]:
    """The top-level packages a fresh ``python -X importtime ...`` imported (run from the
    repository root, which is how ``python -m app.cli`` finds the package)."""
    done = subprocess.run(
        [sys.executable, "-X", "importtime", *code_or_args], cwd=REPO, capture_output=True, text=True, timeout=300,
    )
    assert done.returncode == 0, done.stderr[-2000:]
    names = (line.rsplit("|", 1)[-1].strip() for line in done.stderr.splitlines() if line.startswith("import time:"))
    return {name.split(".")[0] for name in names}


def engine_libraries(modules: set[str]) -> list[str]:
    return sorted(set(ENGINE_LIBRARIES) & modules)


def test_importing_the_cli_loads_neither_the_engine_nor_pandas():
    modules = imported_modules("-c", "import app.cli")
    assert engine_libraries(modules) == []
    assert "pandas" not in modules


def test_help_loads_neither_the_engine_nor_pandas():
    modules = imported_modules("-m", "app.cli", "--help")
    assert engine_libraries(modules) == []
    assert "pandas" not in modules


@pytest.mark.parametrize("command", COMMANDS)
def test_command_help_loads_no_engine_library(command):
    assert engine_libraries(imported_modules("-m", "app.cli", command, "--help")) == []


@pytest.fixture
def portfolio_db(tmp_path) -> str:
    """A database holding one imported (not analysed) series."""
    db, csv = tmp_path / "p.db", tmp_path / "s.csv"
    csv.write_text("series_id,timestamp,value\n" + "".join(f"a,{t},{t % 7}\n" for t in range(40)))
    assert main(["import", str(csv), "--db", str(db)]) == 0
    return str(db)


@pytest.mark.parametrize("output", [[], ["--json"]])
def test_status_loads_neither_the_engine_nor_pandas_nor_numpy(portfolio_db, output):
    # sqlite-utils would import pandas and numpy itself; app.store hides them from that import.
    modules = imported_modules("-m", "app.cli", "status", "--db", portfolio_db, *output)
    assert engine_libraries(modules) == []
    assert {"pandas", "numpy"} & modules == set()


def test_export_loads_no_engine_library(portfolio_db, tmp_path):
    modules = imported_modules("-m", "app.cli", "export", "--db", portfolio_db, "-o", str(tmp_path / "orders.json"))
    assert engine_libraries(modules) == []


@pytest.mark.parametrize("pending", [True, False])
def test_the_compile_notice_is_printed_exactly_when_a_compile_is_pending(monkeypatch, capsys, pending):
    monkeypatch.setattr(numba_cache, "compile_pending", lambda: pending)
    assert announce_compile() is pending
    assert capsys.readouterr().err == (numba_cache.COMPILE_NOTICE + "\n" if pending else "")


@pytest.mark.parametrize(("total", "announced"), [(3, True), (0, False)])
def test_a_run_announces_the_compile_only_when_it_has_series_to_analyse(monkeypatch, capsys, total, announced):
    monkeypatch.setattr(numba_cache, "compile_pending", lambda: True)
    shown = RunProgressLine("analyze")
    shown(RunProgress(run_id=1, total=total))
    err = capsys.readouterr().err
    shown.close()
    assert (numba_cache.COMPILE_NOTICE in err) is announced
    # Until the first series finishes, the progress line says what it waits for.
    assert ("analyze: 0/3 series  0 s  (compiling the likelihood first)" in err) is announced


def test_identify_says_it_compiles_before_the_first_series(monkeypatch, capsys, tmp_path):
    monkeypatch.setattr(numba_cache, "compile_pending", lambda: True)
    csv = tmp_path / "s.csv"
    csv.write_text("series_id,timestamp,value\n" + "".join(f"a,{t},{(t * 7919) % 61}\n" for t in range(60)))
    assert main(["identify", str(csv), "--workers", "1"]) == 0
    err = capsys.readouterr().err
    assert err.startswith(numba_cache.COMPILE_NOTICE)


def test_identify_loads_no_web_library(tmp_path):
    # Its table words the main reason as the pages do; the words live in app.core.vocabulary,
    # so the command does not pay for FastAPI (about 0.3 s).
    csv = tmp_path / "s.csv"
    csv.write_text("series_id,timestamp,value\n" + "".join(f"a,{t},{(t * 7919) % 61}\n" for t in range(60)))
    modules = imported_modules("-m", "app.cli", "identify", str(csv), "--workers", "1")
    assert {"fastapi", "starlette", "jinja2"} & modules == set()
