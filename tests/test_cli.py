"""The ``lagdesk`` command line: output shapes, exit codes and messages, end to end on tmp files.

The ``identify --json`` shape is the one fixed in issue 2 (checked with a JSON Schema); the
``status --json`` shape the one fixed in issue 4. A file that cannot be used exits with code 2
and one line on stderr; a series that cannot be used is listed with its reason and the command
still succeeds.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import jsonschema
import numpy as np
import pytest
from threadpoolctl import threadpool_limits

from app.cli import main
from app.core.errors import LagdeskError, SeriesProblem
from app.core.portfolio_file import RawSeries, read_portfolio
from app.core.prepare import prepare_series
from app.jobs.demo import DEMO_PORTFOLIO, build_demo_database
from app.jobs.work import SeriesTask, identify_task
from app.store.analyses import analysis_record
from app.store.database import DB_ENV_VAR, open_database
from app.store.imports import import_portfolio
from app.store.runs import latest_run
from app.store.status import portfolio_status
from jobs.simulated_portfolio import SHORT_SERIES_ID, write_portfolio_csv

REPO = Path(__file__).resolve().parents[1]
SERIES = 3
GOOD_POINTS = 60
HEADER = "series_id,timestamp,value"

ORDER = {"type": "array", "items": {"type": "integer", "minimum": 0}, "minItems": 3, "maxItems": 3}
SEASONAL_ORDER = {"type": "array", "items": {"type": "integer", "minimum": 0}, "minItems": 4, "maxItems": 4}
NUMBERS = {"type": "array", "items": {"type": "number"}}
CORRELOGRAM = {
    "type": "object",
    "required": ["lags", "values", "band"],
    "properties": {"lags": {"type": "array", "items": {"type": "integer", "minimum": 1}}, "values": NUMBERS, "band": NUMBERS},
}
IDENTIFY_SCHEMA = {  # issue 2, "lagdesk identify": extra keys are allowed
    "type": "object",
    "required": ["series", "problems"],
    "properties": {
        "series": {"type": "array", "items": {
            "type": "object",
            "required": ["series_id", "n", "d", "suggested", "confidence", "flags", "candidates", "acf", "pacf"],
            "properties": {
                "series_id": {"type": "string"},
                "n": {"type": "integer"},
                "d": {"type": "integer"},
                "suggested": {"type": "object", "required": ["order", "seasonal_order"],
                              "properties": {"order": ORDER, "seasonal_order": SEASONAL_ORDER}},
                "confidence": {"enum": ["firm", "tentative", "weak"]},
                "flags": {"type": "array", "items": {"type": "string"}},
                "candidates": {"type": "array", "minItems": 1, "items": {
                    "type": "object",
                    "required": ["order", "seasonal_order", "aicc", "bic", "ljung_box_p"],
                    "properties": {"order": ORDER, "seasonal_order": SEASONAL_ORDER, "aicc": {"type": "number"},
                                   "bic": {"type": "number"}, "ljung_box_p": {"type": "number"}},
                }},
                "acf": CORRELOGRAM,
                "pacf": CORRELOGRAM,
            },
        }},
        "problems": {"type": "array", "items": {
            "type": "object", "required": ["series_id", "message"],
            "properties": {"series_id": {"type": "string"}, "message": {"type": "string"}},
        }},
    },
}
COUNT = {"type": "integer", "minimum": 0}
STATUS_SCHEMA = {  # issue 4, "lagdesk status --json": at least these keys
    "type": "object",
    "required": ["series", "analysed", "stale", "failed", "verdicts"],
    "properties": {
        "series": COUNT, "analysed": COUNT, "stale": COUNT, "failed": COUNT,
        "verdicts": {"type": "object", "required": ["pending", "approved", "overridden", "parked", "recheck"],
                     "additionalProperties": False,
                     "properties": {k: COUNT for k in ("pending", "approved", "overridden", "parked", "recheck")}},
    },
}


@pytest.fixture
def run_cli(capsys):
    """``run_cli(*argv)`` -> (exit code, stdout, stderr) of ``lagdesk`` run in this process."""

    def run(*argv: str) -> tuple[int, str, str]:
        code = main([str(a) for a in argv])
        out, err = capsys.readouterr()
        return code, out, err

    return run


@pytest.fixture
def small_csv(tmp_path) -> Path:
    return write_portfolio_csv(tmp_path / "small.csv", SERIES, seed=2)


def _good_rows() -> list[str]:
    values = np.random.default_rng(11).normal(size=GOOD_POINTS)
    return [f"good,{step},{value!r}" for step, value in enumerate(values.tolist(), 1)]


def _with_good_series(path: Path, bad_rows: list[str]) -> Path:
    """A long CSV holding a 60-point white-noise series (lines 2-61), then ``bad_rows`` from line 62."""
    path.write_text("\n".join([HEADER, *_good_rows(), *bad_rows]) + "\n")
    return path


FIRST_BAD_LINE = 2 + GOOD_POINTS


def test_identify_prints_one_line_per_series_and_the_problems(run_cli, small_csv):
    code, out, _ = run_cli("identify", small_csv, "--workers", 1)

    lines = out.splitlines()
    assert code == 0
    assert lines[0].split() == ["series", "n", "d", "suggested", "confidence", "flags"]
    ids = [s.series_id for s in read_portfolio(small_csv).series if s.series_id != SHORT_SERIES_ID]
    assert [line.split()[0] for line in lines[1 : 1 + SERIES]] == ids
    assert all("ARIMA(" in line for line in lines[1 : 1 + SERIES])
    assert f"{SERIES} series identified" in out and "1 could not be analysed" in out
    assert f"problem: series '{SHORT_SERIES_ID}'" in out


def test_identify_json_has_the_documented_shape(run_cli, small_csv):
    code, out, _ = run_cli("identify", small_csv, "--json", "--workers", 1)

    found = json.loads(out)
    assert code == 0
    jsonschema.validate(found, IDENTIFY_SCHEMA)
    assert [p["series_id"] for p in found["problems"]] == [SHORT_SERIES_ID]
    assert len(found["series"]) == SERIES
    for series in found["series"]:
        best = series["candidates"][0]
        assert [best["order"], best["seasonal_order"]] == [series["suggested"]["order"], series["suggested"]["seasonal_order"]]
        for name in ("acf", "pacf"):
            k = len(series[name]["lags"])
            assert series[name]["lags"] == list(range(1, k + 1))
            assert len(series[name]["values"]) == len(series[name]["band"]) == k
    # The command adds nothing and loses nothing: the engine's own result for each series.
    with threadpool_limits(limits=1):
        engine = [identify_task(SeriesTask(s.series_id, s.values, s.lines)).result for s in read_portfolio(small_csv).series]
    assert found["series"] == [r for r in engine if r is not None]


def test_identify_no_screening_fits_every_candidate_in_full(run_cli, small_csv):
    _, screened_out, _ = run_cli("identify", small_csv, "--json", "--workers", 1)
    code, out, _ = run_cli("identify", small_csv, "--json", "--workers", 1, "--no-screening")

    assert code == 0
    screened, full = json.loads(screened_out)["series"], json.loads(out)["series"]
    assert all(series["screened_out"] == [] for series in full)
    for a, b in zip(screened, full):
        assert a["suggested"] == b["suggested"]
        fitted = {c["label"] for c in b["candidates"]}
        assert fitted == {c["label"] for c in a["candidates"]} | set(a["screened_out"])


@pytest.mark.parametrize(
    ("content", "expected"),
    [
        ("", "the file is empty"),
        ("id,timestamp,value\na,1,2\n", "no column named 'series_id'"),
    ],
    ids=["empty-file", "missing-column"],
)
def test_identify_file_level_error_is_one_line_without_traceback(tmp_path, content, expected):
    path = tmp_path / "input.csv"
    path.write_text(content)

    done = subprocess.run(
        [sys.executable, "-m", "app.cli", "identify", str(path), "--workers", "1"],
        cwd=REPO, capture_output=True, text=True, timeout=120,
    )

    lines = done.stderr.splitlines()
    assert done.returncode == 2
    assert done.stdout == ""
    assert len(lines) == 1 and lines[0].startswith(f"lagdesk identify: {path}: ")
    assert expected in lines[0] and "Traceback" not in done.stderr


@pytest.mark.parametrize(
    ("bad_rows", "series_id", "expected"),
    [
        (["txt,1,1.5", "txt,2,2.5", "txt,3,abc"] + [f"txt,{t},{t % 7}.0" for t in range(4, 41)],
         "txt", f"(line {FIRST_BAD_LINE + 2}): value 'abc' is not a number"),
        ([f"dup,{t},{t % 5}.0" for t in range(1, 41)] + ["dup,7,3.0"],
         "dup", f"(line {FIRST_BAD_LINE + 40}): timestamp 7 appears more than once"),
        ([f"flat,{t},4.0" for t in range(1, 41)], "flat", "is constant"),
        ([f"five,{t},{t}.5" for t in range(1, 6)], "five", "has 5 observations"),
    ],
    ids=["text-value", "duplicate-timestamp", "constant", "five-points"],
)
def test_identify_series_level_problem_is_listed_and_the_rest_analysed(run_cli, tmp_path, bad_rows, series_id, expected):
    path = _with_good_series(tmp_path / "input.csv", bad_rows)

    code, out, _ = run_cli("identify", path, "--json", "--workers", 1)

    found = json.loads(out)
    assert code == 0
    assert [s["series_id"] for s in found["series"]] == ["good"]
    assert [p["series_id"] for p in found["problems"]] == [series_id]
    assert f"series '{series_id}'" in found["problems"][0]["message"]
    assert expected in found["problems"][0]["message"]


def test_import_analyze_status_end_to_end(run_cli, small_csv, tmp_path):
    db = tmp_path / "portfolio.db"

    code, out, _ = run_cli("import", small_csv, "--db", db)
    assert code == 0
    assert out.splitlines()[0] == f"{small_csv}: {SERIES} added, 0 updated, 0 unchanged, 1 rejected"
    assert f"rejected: series '{SHORT_SERIES_ID}'" in out

    code, out, _ = run_cli("status", "--db", db, "--json")
    before = json.loads(out)
    jsonschema.validate(before, STATUS_SCHEMA)
    assert (before["series"], before["analysed"], before["stale"], before["verdicts"]["pending"]) == (SERIES, 0, SERIES, SERIES)

    code, out, err = run_cli("analyze", "--db", db, "--workers", 1)
    assert code == 0
    assert f"analyze: {SERIES}/{SERIES} series" in err
    assert f"finished: {SERIES} series analysed, 0 failed" in out
    assert f"{SERIES} of {SERIES} series have a current analysis." in out

    code, out, _ = run_cli("status", "--db", db, "--json")
    after = json.loads(out)
    jsonschema.validate(after, STATUS_SCHEMA)
    assert (after["series"], after["analysed"], after["stale"], after["failed"]) == (SERIES, SERIES, 0, 0)
    assert after["last_run"]["state"] == "finished"

    code, out, _ = run_cli("import", small_csv, "--db", db)
    assert out.splitlines()[0] == f"{small_csv}: 0 added, 0 updated, {SERIES} unchanged, 1 rejected"
    code, out, _ = run_cli("analyze", "--db", db, "--workers", 1)
    assert code == 0 and "nothing to analyse" in out

    code, out, _ = run_cli("status", "--db", db)
    assert code == 0
    assert out.splitlines()[0] == f"{db}: {SERIES} series"
    assert f"verdicts: {SERIES} pending, 0 approved" in out


def test_import_of_an_unusable_file_stores_nothing(run_cli, small_csv, tmp_path):
    db = tmp_path / "portfolio.db"
    run_cli("import", small_csv, "--db", db)
    bad = tmp_path / "bad.csv"
    bad.write_text("id,timestamp,value\na,1,2\n")

    code, out, err = run_cli("import", bad, "--db", db)

    assert code == 2 and out == ""
    assert err.splitlines() == [f"lagdesk import: {bad}: no column named 'series_id'; the header has 'id', 'timestamp', 'value'"]
    with open_database(db) as handle:
        assert portfolio_status(handle)["series"] == SERIES


@pytest.mark.parametrize("command", ["analyze", "status"])
def test_commands_that_read_a_database_do_not_create_one(run_cli, tmp_path, command):
    db = tmp_path / "missing.db"

    code, out, err = run_cli(command, "--db", db)

    assert code == 2 and out == ""
    assert err.splitlines() == [f"lagdesk {command}: {db}: no such database; create it with lagdesk import PATH --db {db}"]
    assert not db.exists()


def test_database_comes_from_the_environment_without_db(run_cli, small_csv, tmp_path, monkeypatch):
    db = tmp_path / "from-env.db"
    monkeypatch.setenv(DB_ENV_VAR, str(db))

    run_cli("import", small_csv)
    code, out, _ = run_cli("status", "--json")

    assert code == 0 and json.loads(out)["database"] == str(db)
    assert json.loads(out)["series"] == SERIES


@pytest.mark.parametrize(("given", "expected"), [("none", None), ("12", 12), ("auto", "auto")])
def test_analyze_passes_the_period_to_the_engine(run_cli, small_csv, tmp_path, given, expected):
    db = tmp_path / "portfolio.db"
    run_cli("import", small_csv, "--db", db)

    code, _, _ = run_cli("analyze", "--db", db, "--workers", 1, "--period", given)

    assert code == 0
    with open_database(db) as handle:
        assert latest_run(handle)["settings"]["options"]["period"] == expected


@pytest.mark.parametrize("given", ["1", "weekly"])
def test_a_bad_period_is_refused_before_anything_runs(run_cli, small_csv, given, capsys):
    with pytest.raises(SystemExit) as refused:
        main(["identify", str(small_csv), "--period", given])

    err = capsys.readouterr().err
    assert refused.value.code == 2
    assert "argument --period" in err and "Traceback" not in err


def test_demo_refuses_a_database_with_other_series(small_csv, tmp_path):
    db_path = tmp_path / "mine.db"
    with open_database(db_path) as db:
        import_portfolio(db, small_csv)

    with pytest.raises(LagdeskError, match="not demo series"):
        build_demo_database(db_path, workers=1)
    with open_database(db_path) as db:
        assert portfolio_status(db)["series"] == SERIES


def _preparable(raw: RawSeries) -> bool:
    try:
        prepare_series(raw.values, raw.series_id, raw.lines)
    except SeriesProblem:
        return False
    return True


@pytest.mark.slow
def test_demo_builds_an_analysed_database_and_reuses_it(run_cli, tmp_path):
    db = tmp_path / "demo.db"
    # Every series of the file but those too short or constant for the engine (rejected at import).
    stored = [s for s in read_portfolio(DEMO_PORTFOLIO).series if _preparable(s)]

    code, out, _ = run_cli("demo", "--db", db, "--workers", 2, "--build-only")

    assert code == 0
    assert f"Demo portfolio ready in {db}" in out and f"lagdesk status --db {db}" in out
    with open_database(db) as handle:
        status = portfolio_status(handle)
        failures = {s.series_id: analysis_record(handle, s.series_id)["message"] for s in stored}
        assert {i: m for i, m in failures.items() if m is not None} == {}
        assert status["series"] == status["analysed"] == len(stored)
        first = latest_run(handle)["run_id"]
    code, out, _ = run_cli("demo", "--db", db, "--workers", 2, "--build-only")
    assert code == 0
    with open_database(db) as handle:
        again = latest_run(handle)
    assert (again["run_id"], again["total"]) == (first + 1, 0)
