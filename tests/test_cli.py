"""The ``lagdesk`` command line: output shapes, exit codes and messages, end to end on tmp files.

The ``identify --json`` shape is the one fixed in issue 2 (checked with a JSON Schema); the
``status --json`` shape the one fixed in issue 4. A file that cannot be used exits with code 2
and one line on stderr; a series that cannot be used is listed with its reason and the command
still succeeds. ``decide`` records verdicts through the review service; a request it refuses
(a stale version, a bad combination of options) exits with code 2 and one line, and changes
nothing.
"""

from __future__ import annotations

import json
import os
import shlex
import sqlite3
import subprocess
import sys
from contextlib import closing
from dataclasses import replace
from pathlib import Path

import jsonschema
import numpy as np
import pandas as pd
import pytest
from jobs.simulated_portfolio import SHORT_SERIES_ID, simulated_series, write_portfolio_csv
from threadpoolctl import threadpool_limits

from app.cli import (
    DECIDE_ACTIONS,
    build_parser,
    demo_next_steps,
    identify_table,
    lagdesk_script,
    main,
    path_as_typed,
    server_settings,
    typed_command,
)
from app.core.errors import LagdeskError, SeriesProblem
from app.core.order import Order
from app.core.portfolio_file import RawSeries, read_portfolio
from app.core.prepare import prepare_series
from app.core.series_ids import visible
from app.core.vocabulary import DECIDED, SAFETY_CAUTION, Confidence, reason_words
from app.jobs.analyze import run_analysis
from app.jobs.demo import DEMO_PORTFOLIO, build_demo_database
from app.jobs.work import SeriesTask, identify_task
from app.store.analyses import analysis_record, load_analysis, main_reason
from app.store.database import DB_ENV_VAR, open_database
from app.store.imports import import_portfolio
from app.store.runs import latest_run
from app.store.status import portfolio_status
from app.store.verdicts import STATUSES, get_verdict, verdict_history

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
                     "additionalProperties": False, "properties": {k: COUNT for k in STATUSES}},
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
    assert lines[0].split() == ["series", "n", "d", "suggested", "transform", "confidence", "flags", "main", "reason"]
    # The transform each suggestion is on (a new user saw only the flag 'transformed').
    column = lines[0].index("transform")
    assert all(line[column:].split()[0] in ("none", "log", "Box-Cox") for line in lines[1 : 1 + SERIES])
    ids = [s.series_id for s in read_portfolio(small_csv).series if s.series_id != SHORT_SERIES_ID]
    assert [line.split()[0] for line in lines[1 : 1 + SERIES]] == ids
    assert all("ARIMA(" in line for line in lines[1 : 1 + SERIES])
    assert f"{SERIES} series identified" in out and "1 could not be analysed" in out
    assert f"problem: series '{SHORT_SERIES_ID}'" in out


def test_identify_table_gives_the_main_reason_in_words_when_not_firm(small_csv):
    with threadpool_limits(limits=1):
        engine = [identify_task(SeriesTask(s.series_id, s.values, s.lines)).result for s in read_portfolio(small_csv).series]
    found = [r for r in engine if r is not None]
    # The same results once firm and once tentative for a flag, so both cases are shown whatever
    # the engine made of the simulated series.
    results = [replace(r, confidence=Confidence.FIRM) for r in found] + [
        replace(r, confidence=Confidence.TENTATIVE, confidence_reasons=("flag: too_short", "something else")) for r in found]
    lines = identify_table(results, []).splitlines()[1 : 1 + len(results)]
    assert all(line.endswith("  -") for line in lines[: len(found)])
    words = reason_words("flag: too_short")
    assert words != "flag: too_short" and all(line.endswith(words) for line in lines[len(found):])
    for result, line in zip(found, identify_table(found, []).splitlines()[1:]):
        shown = "-" if result.confidence == Confidence.FIRM or main_reason(result) is None else reason_words(main_reason(result))
        assert line.endswith(shown)


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
    assert found["series"] == [r.to_dict() for r in engine if r is not None]


def test_identify_no_screening_fits_every_candidate_in_full(run_cli, small_csv):
    _, screened_out, _ = run_cli("identify", small_csv, "--json", "--workers", 1)
    code, out, _ = run_cli("identify", small_csv, "--json", "--workers", 1, "--no-screening")

    assert code == 0
    screened, full = json.loads(screened_out)["series"], json.loads(out)["series"]
    assert all(series["screened_out"] == [] for series in full)
    for a, b in zip(screened, full):
        assert a["suggested"] == b["suggested"]
        fitted = {c["label"] for c in b["candidates"]}
        assert fitted == {c["label"] for c in a["candidates"]} | {Order.from_json(o).label() for o in a["screened_out"]}


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
         "dup", f"(line {FIRST_BAD_LINE + 40}): timestamp 7 appears more than once (first at line {FIRST_BAD_LINE + 6})"),
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


def test_version_prints_the_package_version(capsys):
    from app import __version__

    with pytest.raises(SystemExit) as done:
        main(["--version"])
    assert done.value.code == 0
    assert capsys.readouterr().out == f"lagdesk {__version__}\n"


def test_a_file_whose_every_series_fails_exits_1_after_reporting_each(run_cli, tmp_path):
    path = tmp_path / "all-bad.csv"
    path.write_text("series_id,timestamp,value\n" + "".join(f"flat,{t},4.0\n" for t in range(1, 41))
                    + "".join(f"five,{t},{t}.5\n" for t in range(1, 6)))

    code, out, _ = run_cli("identify", path, "--json", "--workers", 1)
    assert code == 1
    assert sorted(p["series_id"] for p in json.loads(out)["problems"]) == ["five", "flat"]

    code, out, _ = run_cli("import", path, "--db", tmp_path / "all-bad.db")
    assert code == 1
    assert out.splitlines()[0] == f"{path}: 0 added, 0 updated, 0 unchanged, 2 rejected"


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
    assert f"by status: {SERIES} pending, 0 approved" in out
    assert "earlier" not in out

    # After an upgrade of the engine, the analyses an earlier one made are counted and the
    # next run analyses them again, though the data did not change.
    with closing(open_database(db)) as handle:
        handle.execute("UPDATE analyses SET engine_version = '0.1.0'")
        handle.conn.commit()
    code, out, _ = run_cli("status", "--db", db)
    assert f"  earlier   {SERIES:>6}  of these made by an earlier engine; analyze brings them up to date" in out.splitlines()
    code, out, _ = run_cli("analyze", "--db", db, "--workers", 1)
    assert code == 0 and f"finished: {SERIES} series analysed, 0 failed" in out
    code, out, _ = run_cli("status", "--db", db, "--json")
    assert json.loads(out)["earlier_engine"] == 0


def test_status_counts_by_confidence_and_status_and_names_the_series_not_analysed(run_cli, small_csv, tmp_path):
    db = tmp_path / "portfolio.db"
    with closing(open_database(db)) as handle:
        report = import_portfolio(handle, small_csv)
    run_analysis(db, workers=1)
    with closing(open_database(db)) as handle:
        levels = [load_analysis(handle, sid).confidence for sid in report.added]
    [rejection] = report.rejected

    code, out, _ = run_cli("status", "--db", db)
    lines = out.splitlines()
    assert code == 0
    assert "  rejected       1  refused by the import (too short, constant ...), so not stored" in lines
    assert f"by confidence: {', '.join(f'{levels.count(c)} {c}' for c in reversed(Confidence))}" in lines
    pending = {status: SERIES if status == "pending" else 0 for status in STATUSES}
    assert f"by status: {', '.join(f'{n} {s}' for s, n in pending.items())}" in lines
    shown = lines.index("not analysed (1):")
    reason = rejection["message"].removeprefix(f"series {SHORT_SERIES_ID!r}: ")
    assert lines[shown + 1] == f"  {SHORT_SERIES_ID}: rejected at import: {reason}"

    code, out, _ = run_cli("status", "--db", db, "--json")
    status = json.loads(out)
    assert (status["rejected"], status["confidence"]) == (1, {str(c): levels.count(c) for c in reversed(Confidence)})
    assert status["not_analysed"] == [{"series_id": SHORT_SERIES_ID, "stage": "import", "reason": reason}]


def test_export_names_the_states_it_accepts_in_its_help_and_its_error(run_cli, small_csv, tmp_path, capsys):
    with pytest.raises(SystemExit):
        main(["export", "--help"])
    help_text = " ".join(capsys.readouterr().out.split())
    assert f"comma-separated: {' or '.join(DECIDED)} or both" in help_text
    db, target = tmp_path / "portfolio.db", tmp_path / "orders.json"
    run_cli("import", small_csv, "--db", db)

    code, out, err = run_cli("export", "--db", db, "--status", "approved,pending", "-o", target)

    assert (code, out) == (2, "")
    assert err.strip() == f"lagdesk export: the export takes statuses {' and '.join(DECIDED)}, not 'pending'"
    assert not target.exists()


def test_export_to_a_dash_writes_the_export_on_stdout_and_the_summary_on_stderr(run_cli, small_csv, tmp_path, capsys, monkeypatch):
    with pytest.raises(SystemExit):
        main(["export", "--help"])
    assert "or - for standard output" in " ".join(capsys.readouterr().out.split())
    db = tmp_path / "portfolio.db"
    run_cli("import", small_csv, "--db", db)
    monkeypatch.chdir(tmp_path)
    files = sorted(tmp_path.iterdir())

    code, out, err = run_cli("export", "--db", db, "-o", "-")

    assert code == 0 and sorted(tmp_path.iterdir()) == files  # no file named '-'
    assert err == f"0 orders written to standard output as json; left out: {SERIES} pending, 0 parked, 0 recheck\n"
    run_cli("export", "--db", db, "-o", "orders.json")
    document = json.loads((tmp_path / "orders.json").read_text(encoding="utf-8"))
    assert json.loads(out) == {**document, "generated_at": json.loads(out)["generated_at"]}
    code, out, err = run_cli("export", "--db", db, "-o", "-", "--format", "csv")
    run_cli("export", "--db", db, "-o", "orders.csv", "--format", "csv")
    assert code == 0 and out == (tmp_path / "orders.csv").read_bytes().decode("utf-8") and "as csv" in err


@pytest.mark.parametrize("command", ["identify", "import"])
def test_a_wide_file_without_the_default_time_column_is_told_which_option_names_it(run_cli, tmp_path, command):
    path = tmp_path / "wide.csv"
    path.write_text("month,a,b\n" + "".join(f"2024-{m:02d}-01,{m},{2 * m}\n" for m in range(1, 13)))
    more = ["--db", tmp_path / "p.db"] if command == "import" else ["--max-points", "1"]  # identify: rejects both, fast

    code, out, err = run_cli(command, path, "--layout", "wide", *more)
    assert (code, out) == (2, "") and err.endswith("; name the time column with --time-col (the upload's \"Time\" field)\n")
    code, out, err = run_cli(command, path, "--layout", "wide", "--time-col", "month", *more)
    assert code == (0 if command == "import" else 1) and err == "", err


def test_lagdesk_script_is_the_installed_script_unless_the_name_on_the_path_runs_it(tmp_path):
    script = tmp_path / ".venv" / "bin" / "lagdesk"
    script.parent.mkdir(parents=True)
    script.write_text("")
    nowhere = lambda name: None  # noqa: E731 - no lagdesk on the PATH
    assert lagdesk_script(str(script), which=nowhere) == script
    assert lagdesk_script(str(script), which=lambda name: str(script)) is None  # an activated environment
    # Run as python -m app.cli: the script installed beside that Python.
    assert lagdesk_script(str(tmp_path / "app" / "cli.py"), executable=str(script.parent / "python"), which=nowhere) == script
    assert lagdesk_script(str(tmp_path / "lagdesk"), which=nowhere) is None  # no script installed: plain lagdesk
    assert path_as_typed(script, cwd=tmp_path) == ".venv/bin/lagdesk"
    assert path_as_typed(script, cwd=tmp_path / "elsewhere") == shlex.quote(str(script))
    assert path_as_typed(tmp_path / "my data.db", cwd=tmp_path) == "'./my data.db'"


@pytest.mark.parametrize("activated", [False, True], ids=["fresh-clone", "activated-venv"])
def test_the_next_hint_runs_as_typed(small_csv, tmp_path, activated):
    """As typed in the repository after make: .venv/bin/lagdesk, or lagdesk once the venv is activated."""
    venv_bin = Path(sys.executable).parent
    others = [p for p in os.environ.get("PATH", "").split(os.pathsep) if p and Path(p).absolute() != venv_bin.absolute()]
    env = {**os.environ, "PATH": os.pathsep.join([str(venv_bin)] * activated + others)}
    db = tmp_path / "portfolio.db"
    typed = "lagdesk" if activated else str(Path(os.path.relpath(venv_bin, REPO)) / "lagdesk")

    done = subprocess.run([typed, "import", str(small_csv), "--db", str(db)], cwd=REPO, env=env,
                          capture_output=True, text=True, timeout=120)

    assert done.returncode == 0, done.stderr
    hint = done.stdout.splitlines()[-1]
    assert hint == f"Next: {typed} analyze --db {shlex.quote(str(db))}"
    program = shlex.split(hint.removeprefix("Next: "))[0]
    again = subprocess.run([program, "status", "--db", str(db)], cwd=REPO, env=env, capture_output=True, text=True, timeout=120)
    assert again.returncode == 0 and again.stdout.startswith(f"{db}: {SERIES} series"), again.stderr


def test_run_files_are_ignored_by_git():
    if not (REPO / ".git").exists():
        pytest.skip("not a git checkout")
    names = ["lagdesk.db", "lagdesk.db-wal", "lagdesk.db-shm", "lagdesk.db-journal", "lagdesk.db-analysis.lock",
             "sales.db-analysis.lock", "lagdesk-orders.json", "lagdesk-orders.csv", ".lagdesk-orders.json.0123abcd.tmp"]
    done = subprocess.run(["git", "check-ignore", "--no-index", *names], cwd=REPO, capture_output=True, text=True)
    assert done.stdout.splitlines() == names


def test_import_of_an_unusable_file_stores_nothing(run_cli, small_csv, tmp_path):
    db = tmp_path / "portfolio.db"
    run_cli("import", small_csv, "--db", db)
    bad = tmp_path / "bad.csv"
    bad.write_text("id,timestamp,value\na,1,2\n")

    code, out, err = run_cli("import", bad, "--db", db)

    assert code == 2 and out == ""
    assert err.splitlines() == [
        f"lagdesk import: {bad}: no column named 'series_id'; the header has 'id', 'timestamp', 'value'; "
        "name the series id column with --id-col (the upload's \"Series id\" field)"
    ]
    with open_database(db) as handle:
        assert portfolio_status(handle)["series"] == SERIES


def test_import_of_an_unusable_file_into_a_new_path_creates_no_database(run_cli, tmp_path):
    db = tmp_path / "new.db"
    bad = tmp_path / "bad.csv"
    bad.write_text("id,timestamp,value\na,1,2\n")

    code, _, err = run_cli("import", bad, "--db", db)

    assert code == 2 and "no column named 'series_id'" in err
    assert list(tmp_path.iterdir()) == [bad]


def test_import_and_identify_apply_the_limits_and_date_format_given(run_cli, tmp_path):
    path = tmp_path / "three.csv"
    path.write_text(HEADER + "\n" + "".join(f"{sid},{d:02d}/01/2024,{d * (i + 1)}\n" for i, sid in enumerate("abc") for d in range(1, 13)))
    db = tmp_path / "p.db"

    code, _, err = run_cli("import", path, "--db", db, "--max-series", "2")
    assert code == 2 and err.endswith("holds more than 2 series; at most 2 are accepted in one file\n") and not db.exists()

    code, out, _ = run_cli("identify", path, "--max-points", "11", "--date-format", "%d/%m/%Y", "--workers", "1", "--json")
    problems = json.loads(out)["problems"]
    assert code == 1 and [(p["series_id"], p["row"], p["flag"]) for p in problems] == [("a", 13, "too_long"), ("b", 25, "too_long"), ("c", 37, "too_long")]

    code, _, err = run_cli("import", path, "--db", db)  # 01/01/2024 ... 12/01/2024: day first or month first?
    assert code == 2 and "line 3 (series 'a'): timestamp '02/01/2024' reads as another date day first" in err

    code, out, _ = run_cli("import", path, "--db", db, "--date-format", "%m/%d/%Y")
    assert code == 0 and out.startswith(f"{path}: 3 added")


@pytest.mark.parametrize(("text", "shown"), [
    ("shop/caf\u00e9 \U0001f4c8", "shop/caf\u00e9 \U0001f4c8"),
    ("red\x1b[31m", "red\\x1b[31m"),
    ("two\nlines\r", "two\\nlines\\r"),
    ("back\u202ewards", "back\\u202ewards"),
])
def test_visible_escapes_what_a_terminal_would_act_on(text, shown):
    assert visible(text) == shown


@pytest.mark.parametrize("command", ["analyze", "status"])
def test_commands_that_read_a_database_do_not_create_one(run_cli, tmp_path, command):
    db = tmp_path / "missing.db"

    code, out, err = run_cli(command, "--db", db)

    assert code == 2 and out == ""
    assert err.splitlines() == [f"lagdesk {command}: {db}: no such database; create it with {typed_command(f'import PATH --db {db}')}"]
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

    with pytest.raises(LagdeskError, match="not demo series") as refused:
        build_demo_database(db_path, workers=1)
    assert f"'lagdesk serve --db {db_path}'" in str(refused.value)  # what to do with the file instead
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
    assert "review it in the browser" in out and "the demo does this now" not in out  # --build-only serves nothing
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


# ---------------------------------------------------------------------------------------------
# lagdesk decide: verdicts from the command line, on a small analysed database.
# ---------------------------------------------------------------------------------------------

# Simulated series (seeded, see jobs/simulated_portfolio.py) under ids of three prefixes; the
# ARMA(1,1) path is the one the engine is not firm about.
DECIDE_IDS = {
    "sim/000/white-noise": "north/a", "sim/001/ar1": "north/b", "sim/002/ar2": "north/c",
    "sim/003/ma1": "south/a", "sim/004/arma11": "north/d", "sim/005/random-walk": "west/a",
}
PREFIX = "north/"


@pytest.fixture(scope="module")
def decide_template(tmp_path_factory) -> Path:
    """The series of :data:`DECIDE_IDS` imported and analysed once; every verdict pending."""
    folder = tmp_path_factory.mktemp("decide")
    series = simulated_series(len(DECIDE_IDS), (200, 300), seed=2)
    rows = [(DECIDE_IDS[sid], step, repr(float(v))) for sid, values in series.items() for step, v in values.items()]
    csv_path = folder / "portfolio.csv"
    pd.DataFrame(rows, columns=["series_id", "timestamp", "value"]).to_csv(csv_path, index=False)
    db_path = folder / "template.db"
    with open_database(db_path) as db:
        import_portfolio(db, csv_path)
    run = run_analysis(db_path, workers=1)
    assert (run["state"], run["done"], run["failed"]) == ("finished", len(DECIDE_IDS), 0)
    return db_path


@pytest.fixture
def decide_db(decide_template, tmp_path) -> Path:
    """A private copy of the analysed template, for one test to change."""
    target = tmp_path / "lagdesk.db"
    with closing(sqlite3.connect(decide_template)) as source, closing(sqlite3.connect(target)) as copy:
        source.backup(copy)
    return target


def _snapshot(db_path: Path) -> dict[str, list]:
    """Every verdict and every history row, as stored."""
    with closing(sqlite3.connect(db_path)) as conn:
        conn.row_factory = sqlite3.Row
        return {table: [dict(row) for row in conn.execute(f"SELECT * FROM {table} ORDER BY rowid")]
                for table in ("verdicts", "verdict_history")}


def _read(db_path: Path, read, *args):
    with open_database(db_path) as db:
        return read(db, *args)


def test_decide_approve_records_the_suggestion_and_a_history_row(run_cli, decide_db):
    suggested = _read(decide_db, load_analysis, "north/b").suggested.order

    code, out, err = run_cli("decide", "north/b", "approve", "--reviewer", " Ann   Lee\n", "--note", "a clear AR(1)",
                             "--db", decide_db)

    assert (code, err) == (0, f"Caution: {SAFETY_CAUTION}\n")  # said wherever an order is decided
    constant = suggested.term_words().strip() or "without a constant"
    assert out.splitlines() == [f"north/b: approved {suggested.label()} ({constant}) (version 1, by Ann Lee)"]
    verdict = _read(decide_db, get_verdict, "north/b")
    analysis = _read(decide_db, load_analysis, "north/b")
    assert (verdict["status"], verdict["order"], verdict["seasonal_order"]) == (
        "approved", list(suggested.order), list(suggested.seasonal_order))
    # The reviewer's name is stored as the pages and the API store it: trimmed, one line.
    assert (verdict["reviewer"], verdict["note"], verdict["version"]) == ("Ann Lee", "a clear AR(1)", 1)
    assert verdict["transform"] == analysis.transform.to_json() and verdict["decided_at"] is not None
    [row] = _read(decide_db, verdict_history, "north/b")
    assert (row["version"], row["from_status"], row["status"], row["order"], row["reviewer"]) == (
        1, "pending", "approved", list(suggested.order), "Ann Lee")


def test_decide_override_stores_the_order_given_and_json_prints_the_stored_verdict(run_cli, decide_db):
    order, seasonal = [1, 0, 0], [1, 0, 0, 4]
    assert not _read(decide_db, load_analysis, "north/a").suggested.order.same_orders(order, seasonal)

    code, out, err = run_cli("decide", "north/a", "override", "--order", "1,0,0", "--seasonal", "1,0,0,4",
                             "--reviewer", "bob", "--note", "a season of four", "--json", "--db", decide_db)

    assert (code, err) == (0, f"Caution: {SAFETY_CAUTION}\n")  # on stderr: stdout stays the JSON
    printed = json.loads(out)
    verdict = _read(decide_db, get_verdict, "north/a")
    assert printed == verdict
    assert (verdict["status"], verdict["order"], verdict["seasonal_order"], verdict["version"]) == (
        "overridden", order, seasonal, 1)
    [row] = _read(decide_db, verdict_history, "north/a")
    assert (row["from_status"], row["status"], row["order"], row["seasonal_order"], row["reviewer"], row["note"]) == (
        "pending", "overridden", order, seasonal, "bob", "a season of four")


def test_a_refused_approval_prints_the_override_that_runs_as_printed(run_cli, decide_db):
    # Found by a new user: the command printed had a placeholder reviewer, no --db or --note, and
    # words in place of the options given. It is now the command typed, with override for approve.
    code, out, err = run_cli("decide", "north/a", "approve", "--order", "1,0,0", "--seasonal", "1,0,0,4", "--reviewer", "bob",
                             "--note", "a season of four", "--transform", "none", "--db", decide_db)
    assert (code, out) == (2, "")
    command = shlex.split(err.split("what you gave, as an override: ")[1])
    assert Path(command[0]).name == "lagdesk" or command[0] == "lagdesk"
    code, out, err = run_cli(*command[1:])
    assert (code, err) == (0, f"Caution: {SAFETY_CAUTION}\n")
    [row] = _read(decide_db, verdict_history, "north/a")
    assert (row["status"], row["order"], row["seasonal_order"], row["reviewer"], row["note"]) == (
        "overridden", [1, 0, 0], [1, 0, 0, 4], "bob", "a season of four")


def test_decide_with_a_stale_version_is_refused_in_one_line_and_changes_nothing(run_cli, decide_db):
    assert run_cli("decide", "north/b", "approve", "--reviewer", "ann", "--db", decide_db)[0] == 0
    before = _snapshot(decide_db)

    code, out, err = run_cli("decide", "north/b", "override", "--order", "1,0,1", "--version", 0,
                             "--reviewer", "bob", "--db", decide_db)

    assert (code, out) == (2, "")
    [line] = err.splitlines()
    assert line.startswith("lagdesk decide: series 'north/b': the verdict changed since version 0 was read")
    assert "now version 1, approved by ann" in line and "Traceback" not in err
    assert _snapshot(decide_db) == before


def test_decide_pending_reopens_a_decided_series_and_the_history_keeps_every_step(run_cli, decide_db):
    code, out, _ = run_cli("decide", "south/a", "approve", "--reviewer", "ann", "--json", "--db", decide_db)
    approved = json.loads(out)
    code, out, _ = run_cli("decide", "south/a", "override", "--order", "2,0,0", "--reviewer", "bob",
                           "--version", approved["version"], "--json", "--db", decide_db)
    overridden = json.loads(out)

    code, out, err = run_cli("decide", "south/a", "pending", "--reviewer", "cy", "--note", "look again",
                             "--version", overridden["version"], "--json", "--db", decide_db)

    assert (code, err) == (0, "")
    reopened = json.loads(out)
    assert reopened == _read(decide_db, get_verdict, "south/a")
    assert (reopened["status"], reopened["order"], reopened["seasonal_order"], reopened["decided_at"]) == (
        "pending", None, None, None)
    assert (reopened["version"], reopened["reviewer"], reopened["note"]) == (3, "cy", "look again")
    steps = [(r["version"], r["from_status"], r["status"], r["order"], r["reviewer"])
             for r in _read(decide_db, verdict_history, "south/a")]
    assert steps == [
        (1, "pending", "approved", approved["order"], "ann"),
        (2, "approved", "overridden", [2, 0, 0], "bob"),
        (3, "overridden", "pending", None, "cy"),
    ]
    assert _read(decide_db, portfolio_status)["verdicts"]["pending"] == len(DECIDE_IDS)


def test_decide_all_firm_approves_only_the_pending_firm_series_under_the_prefix(run_cli, decide_db):
    with open_database(decide_db) as db:
        confidence = {sid: load_analysis(db, sid).confidence for sid in DECIDE_IDS.values()}
    parked = min(s for s in confidence if s.startswith(PREFIX) and confidence[s] == "firm")
    assert run_cli("decide", parked, "park", "--reviewer", "ann", "--db", decide_db)[0] == 0
    with open_database(decide_db) as db:
        status = {sid: get_verdict(db, sid)["status"] for sid in DECIDE_IDS.values()}
    expected = sorted(s for s in DECIDE_IDS.values() if s.startswith(PREFIX) and status[s] == "pending" and confidence[s] == "firm")
    # The portfolio tests each rule: firm and pending under the prefix, a parked firm one and a
    # pending one the engine is not firm about under it, firm pending ones outside it.
    assert expected and status[parked] == "parked"
    assert any(s.startswith(PREFIX) and status[s] == "pending" and confidence[s] != "firm" for s in status)
    assert any(not s.startswith(PREFIX) and status[s] == "pending" and confidence[s] == "firm" for s in status)
    before = _snapshot(decide_db)
    untouched = {row["series_id"] for row in before["verdicts"]} - set(expected)

    code, out, err = run_cli("decide", "--all-firm", "--prefix", PREFIX, "--reviewer", "dee", "--note", "bulk",
                             "--json", "--db", decide_db)

    assert (code, err) == (0, f"Caution: {SAFETY_CAUTION}\n")  # on stderr: stdout stays the JSON
    approved = json.loads(out)
    assert sorted(approved) == expected and len(set(approved)) == len(approved)
    with open_database(decide_db) as db:
        for sid in expected:
            verdict, suggested = get_verdict(db, sid), load_analysis(db, sid).suggested.order
            assert (verdict["status"], verdict["order"], verdict["seasonal_order"], verdict["reviewer"], verdict["note"]) == (
                "approved", list(suggested.order), list(suggested.seasonal_order), "dee", "bulk")
    after = _snapshot(decide_db)
    def kept(rows):
        return [r for r in rows if r["series_id"] in untouched]

    assert kept(after["verdicts"]) == kept(before["verdicts"])
    new_rows = after["verdict_history"][len(before["verdict_history"]):]
    assert sorted(r["series_id"] for r in new_rows) == expected
    # Nothing is left to approve there: a second run approves none and says so.
    code, out, _ = run_cli("decide", "--all-firm", "--prefix", PREFIX, "--reviewer", "dee", "--db", decide_db)
    assert (code, out.splitlines()) == (0, [f"0 firm suggestions approved under {PREFIX!r}"])
    assert _snapshot(decide_db)["verdicts"] == after["verdicts"]


@pytest.mark.parametrize(
    ("argv", "expected"),
    [
        (["north/a", "approve"], "--reviewer NAME is required"),
        (["north/a", "approve", "--reviewer", "  "], "--reviewer NAME is required"),
        (["north/a", "--reviewer", "ann"], "give a series id and an action"),
        (["north/a", "override", "--reviewer", "ann"], "override needs the order: --order p,d,q"),
        (["north/a", "approve", "--order", "5,0,5", "--reviewer", "ann"], "to save ARIMA(5,0,5), override instead; what you gave, as an override: "),
        (["north/a", "override", "--order", "11,0,0", "--reviewer", "ann"], "p = 11 is outside 0..10"),
        (["north/a", "park", "--seasonal", "0,1,1,12", "--reviewer", "ann"], "--seasonal goes with --order"),
        (["north/a", "pending", "--order", "1,0,0", "--reviewer", "ann"], "give no --order"),
        (["north/a", "approve", "--prefix", "north/", "--reviewer", "ann"], "--prefix goes with --all-firm"),
        (["north/a", "approve", "--all-firm", "--reviewer", "ann"], "give no series id or action"),
        (["--all-firm", "--version", "0", "--reviewer", "ann"], "give no --order, --seasonal or --version"),
        (["--all-firm", "--order", "1,0,0", "--reviewer", "ann"], "give no --order, --seasonal or --version"),
        (["nope/x", "approve", "--reviewer", "ann"], "no series 'nope/x'"),
    ],
    ids=["no-reviewer", "blank-reviewer", "no-action", "override-without-order", "approve-another-order",
         "order-out-of-range", "seasonal-without-order", "pending-with-order", "prefix-without-all-firm",
         "all-firm-with-series", "all-firm-with-version", "all-firm-with-order", "unknown-series"],
)
def test_decide_refuses_a_bad_request_in_one_line_and_changes_nothing(run_cli, decide_db, argv, expected):
    before = _snapshot(decide_db)

    code, out, err = run_cli("decide", *argv, "--db", decide_db)

    assert (code, out) == (2, "")
    [line] = err.splitlines()
    assert line.startswith("lagdesk decide: ") and expected in line
    assert _snapshot(decide_db) == before


def test_decide_does_not_create_a_database(run_cli, tmp_path):
    db = tmp_path / "missing.db"

    code, out, err = run_cli("decide", "north/a", "approve", "--reviewer", "ann", "--db", db)

    assert (code, out) == (2, "")
    assert err.splitlines() == [f"lagdesk decide: {db}: no such database; create it with {typed_command(f'import PATH --db {db}')}"]
    assert not db.exists()


def test_the_demo_says_when_it_keeps_decisions_from_an_earlier_run(tmp_path):
    status = {"series": 3, "analysed": 3, "confidence": {"firm": 3}, "not_analysed": [],
              "verdicts": {"pending": 1, "approved": 1, "not_arima": 1}}
    assert f"2 decisions from earlier runs kept; delete {tmp_path / 'x.db'} to start afresh." in demo_next_steps(tmp_path / "x.db", status)
    fresh = demo_next_steps(tmp_path / "x.db", {**status, "verdicts": {"pending": 3, "approved": 0}})
    assert "kept" not in fresh


def test_decide_help_shows_both_forms_and_the_actions(capsys):
    with pytest.raises(SystemExit) as shown:
        main(["decide", "--help"])

    text = capsys.readouterr().out
    assert shown.value.code == 0
    assert "lagdesk decide SERIES_ID ACTION --reviewer NAME" in text and "lagdesk decide --all-firm [--prefix ID_PREFIX]" in text
    assert all(action in text for action in DECIDE_ACTIONS)
    # A bare "%" in a help text makes argparse print its internals instead of the text.
    assert "save an order whose residuals fail the Ljung-Box test at 1% anyway" in " ".join(text.split())
    assert "option_strings" not in text


def test_serve_takes_extra_host_names_for_the_host_check(tmp_path):
    args = build_parser().parse_args(["serve", "--allowed-host", "localhost:9000", "--allowed-host", "review.example",
                                      "--db", str(tmp_path / "x.db")])
    settings = server_settings(tmp_path / "x.db", args)
    assert settings.allowed_hosts == ("localhost:9000", "review.example")
    bad = build_parser().parse_args(["serve", "--allowed-host", "a b", "--db", str(tmp_path / "x.db")])
    with pytest.raises(LagdeskError, match="allowed host 'a b'"):
        server_settings(tmp_path / "x.db", bad)


@pytest.mark.parametrize("command", [["serve"], ["demo"]])
def test_a_port_in_use_is_refused_in_one_line_before_serving_or_building(run_cli, tmp_path, monkeypatch, command):
    import socket

    import app.jobs.demo

    monkeypatch.setattr(app.jobs.demo, "build_demo_database", lambda *a, **k: pytest.fail("the demo was built"))
    with socket.create_server(("127.0.0.1", 0)) as taken:
        port = taken.getsockname()[1]
        code, out, err = run_cli(*command, "--port", port, "--no-browser", "--db", tmp_path / "x.db")
    assert code == 2 and out == ""
    assert err.splitlines() == [f"lagdesk {command[0]}: cannot listen on 127.0.0.1:{port}: Address already in use "
                                "(another server, perhaps another Lagdesk, holds it: choose another with --port)"]


def test_a_reader_that_stops_early_ends_the_command_quietly(run_cli, small_csv, tmp_path):
    """``lagdesk status | head``: the closed pipe stops the command with SIGPIPE's status
    (128 + 13) and no message, as a program the signal killed would (Python's signal module
    documentation, "Note on SIGPIPE"). The reading end is closed before the program has started,
    so its first write meets a pipe nobody reads."""
    db = tmp_path / "portfolio.db"
    assert run_cli("import", small_csv, "--db", db)[0] == 0
    program = Path(sys.executable).parent / "lagdesk"
    child = subprocess.Popen([str(program), "status", "--db", str(db)], cwd=REPO, stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    assert child.stdout is not None and child.stderr is not None
    child.stdout.close()
    error = child.stderr.read()
    assert child.wait(timeout=120) == 141
    assert error == b""


def test_identify_table_without_a_result_is_the_count_and_the_problems_only():
    problem = {"message": "series 'a': is constant (every value is 4); there is nothing to model"}
    assert identify_table([], [problem]).splitlines() == [
        "0 series identified (0 firm, 0 tentative, 0 weak); 1 could not be analysed.",
        f"  problem: {problem['message']}",
    ]


def test_decide_on_a_series_the_import_rejected_says_so(run_cli, tmp_path):
    rows = ["series_id,timestamp,value"] + [f"kept,2024-{m:02d}-01,{m * 1.5 + (m % 3)}" for m in range(1, 13)]
    rows += [f"kept,2025-{m:02d}-01,{m * 1.7 + (m % 2)}" for m in range(1, 13)] + ["tiny,2024-01-01,1", "tiny,2024-02-01,2"]
    csv = tmp_path / "two.csv"
    csv.write_text("\n".join(rows) + "\n")
    db = tmp_path / "two.db"
    assert run_cli("import", csv, "--db", db)[0] == 0

    code, out, err = run_cli("decide", "tiny", "override", "--order", "0,0,0", "--reviewer", "ann", "--db", db)

    assert (code, out) == (2, "")
    [line] = err.splitlines()
    assert line.startswith("lagdesk decide: no series 'tiny' in the database: the import of ") and str(csv) in line
    assert "rejected it (has 2 observations" in line and line.endswith("correct the data and import the file again")


def test_status_names_the_file_and_line_of_a_refused_update(run_cli, tmp_path):
    # README: a refused update is reported "with the file, line and reason"; status said the file only.
    first, second = tmp_path / "first.csv", tmp_path / "second.csv"
    months = pd.date_range("2020-01-01", periods=40, freq="MS").strftime("%Y-%m-%d")
    first.write_text("series_id,timestamp,value\n" + "".join(f"a,{m},{i % 7 + 1}\n" for i, m in enumerate(months)))
    rows = [f"a,{m},{i % 7 + 1}\n" for i, m in enumerate(months)] + ["a,2023-05-01,n/a\n"]
    second.write_text("series_id,timestamp,value\n" + "".join(rows))
    db = tmp_path / "p.db"
    assert run_cli("import", first, "--db", db)[0] == 0
    run_cli("import", second, "--db", db)
    code, out, _ = run_cli("status", "--db", db)
    assert code == 0 and f"  a: {second}, line 42: value 'n/a' is not a number" in out
