"""Importing portfolio files: all-or-nothing on file errors, per-series rejection, merging."""

from __future__ import annotations

import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import app.store.imports as imports_module
from app.core.errors import InputFileError
from app.core.prepare import MIN_POINTS
from app.store.analyses import analysis_record, save_analysis
from app.store.database import open_database
from app.store.imports import import_portfolio, list_imports
from app.store.series import get_series, load_series, series_fingerprint, series_ids_to_analyse
from app.store.verdicts import decision_fingerprint, get_verdict, set_verdict, verdict_history


def approve(db, series_id):
    verdict = get_verdict(db, series_id)
    return set_verdict(db, series_id, status="approved", order=[1, 0, 0], seasonal_order=[0, 0, 0, 0],
                       reviewer="ann", note="AR(1) is plain", version=verdict["version"])


def test_import_stores_each_series_and_the_report(fresh_db, write_csv, monthly):
    a, b = monthly(1), monthly(2, n=36, start="2021-06-01")
    report = import_portfolio(fresh_db, write_csv("p.csv", {"a": a, "b": b}))
    assert (report.added, report.updated, report.unchanged, report.rejected) == (["a", "b"], [], [], [])
    assert report.summary().endswith("p.csv: 2 added, 0 updated, 0 unchanged, 0 rejected")
    pd.testing.assert_series_equal(load_series(fresh_db, "b"), b.rename("b").rename_axis("timestamp"),
                                   check_index_type=False, check_freq=False)
    info = get_series(fresh_db, "b")
    assert (info["time_kind"], info["freq"], info["n"], info["start"], info["end"]) == (
        "datetime", "MS", 36, "2021-06-01T00:00:00", "2024-05-01T00:00:00")
    assert [r.to_dict() for r in list_imports(fresh_db)] == [report.to_dict()]
    assert get_verdict(fresh_db, "a")["status"] == "pending"


BROKEN_FILES = {
    "missing_column": b"series_id,timestamp,amount\na,2020-01-01,1\n",
    "not_utf8": b"series_id,timestamp,value\na,2020-01-01,\xff\xfe\n",
    "empty": b"",
    "header_only": b"series_id,timestamp,value\n",
    "bad_timestamp": b"series_id,timestamp,value\na,2020-01-01,1\na,someday,2\n",
    "empty_series_id": b"series_id,timestamp,value\na,2020-01-01,1\n,2020-02-01,2\n",
}


@pytest.mark.parametrize("kind", sorted(BROKEN_FILES))
def test_import_file_level_error_leaves_every_table_unchanged(fresh_db, write_csv, monthly, snapshot, relabel,
                                                             tmp_path, kind):
    import_portfolio(fresh_db, write_csv("first.csv", {"a": monthly(1), "b": monthly(2)}))
    save_analysis(fresh_db, "a", series_fingerprint(fresh_db, "a"), relabel("a"), None)
    approve(fresh_db, "a")
    before = snapshot(fresh_db)
    broken = tmp_path / f"{kind}.csv"
    broken.write_bytes(BROKEN_FILES[kind])
    with pytest.raises(InputFileError, match=f"{kind}.csv"):
        import_portfolio(fresh_db, broken)
    assert snapshot(fresh_db) == before


def test_import_of_a_missing_file_or_unknown_layout_stores_nothing(fresh_db, snapshot, tmp_path, write_csv, monthly):
    before = snapshot(fresh_db)
    with pytest.raises(InputFileError, match="cannot be read"):
        import_portfolio(fresh_db, tmp_path / "absent.csv")
    with pytest.raises(InputFileError, match="layout must be one of"):
        import_portfolio(fresh_db, write_csv("p.csv", {"a": monthly(1)}), layout="tall")
    assert snapshot(fresh_db) == before


def test_import_rejects_bad_series_by_name_and_line_and_keeps_the_good_ones(fresh_db, tmp_path, monthly):
    good = monthly(3, n=20)
    lines = ["series_id,timestamp,value"]
    lines += [f"good,{t:%Y-%m-%d},{float(v)!r}" for t, v in good.items()]                    # lines 2-21
    lines += [f"text,{t:%Y-%m-%d},{float(v)!r}" for t, v in good.items()]                    # lines 22-41
    lines[30] = "text,2020-10-01,twelve"                                              # line 31
    lines += [f"dupe,{t:%Y-%m-%d},{float(v)!r}" for t, v in good.items()] + ["dupe,2020-03-01,7.5"]  # line 62
    lines += [f"short,2020-{m:02d}-01,{m}.5" for m in range(1, MIN_POINTS - 1)]
    lines += [f"flat,{t:%Y-%m-%d},4.0" for t in good.index]
    path = tmp_path / "mixed.csv"
    path.write_text("\n".join(lines) + "\n")
    report = import_portfolio(fresh_db, path)
    assert report.added == ["good"]
    rejected = {r["series_id"]: r for r in report.rejected}
    assert sorted(rejected) == ["dupe", "flat", "short", "text"]
    assert rejected["text"]["row"] == 31 and "'twelve' is not a number" in rejected["text"]["message"]
    assert rejected["dupe"]["row"] == 62 and "timestamp 2020-03-01 appears more than once (first at line 44)" in rejected["dupe"]["message"]
    assert rejected["short"]["flag"] == "too_short" and f"at least {MIN_POINTS}" in rejected["short"]["message"]
    assert rejected["flat"]["flag"] == "constant" and "nothing to model" in rejected["flat"]["message"]
    assert fresh_db.execute("SELECT series_id FROM series").fetchall() == [("good",)]
    assert list_imports(fresh_db)[0].rejected == report.rejected


def test_reimport_with_changed_values_updates_and_makes_the_analysis_stale_leaving_the_verdict(
        fresh_db, write_csv, monthly, relabel):
    a = monthly(4)
    import_portfolio(fresh_db, write_csv("v1.csv", {"a": a, "b": monthly(5)}))
    old_fingerprint = series_fingerprint(fresh_db, "a")
    save_analysis(fresh_db, "a", old_fingerprint, relabel("a"), None)
    approved = approve(fresh_db, "a")
    assert analysis_record(fresh_db, "a")["state"] == "current"
    changed = a.copy()
    changed.iloc[7] += 2.5
    report = import_portfolio(fresh_db, write_csv("v2.csv", {"a": changed, "b": monthly(5)}))
    assert (report.updated, report.unchanged, report.revised) == (["a"], ["b"], ["a"])
    assert "1 updated (1 of them with stored values changed, e.g. 'a')" in report.summary()
    assert series_fingerprint(fresh_db, "a") != old_fingerprint
    assert load_series(fresh_db, "a").iloc[7] == changed.iloc[7]
    assert analysis_record(fresh_db, "a")["state"] == "stale"
    assert series_ids_to_analyse(fresh_db) == ["a", "b"]  # a is stale, b was never analysed
    # The verdict stays as decided, on the data it was decided on: the next analysis judges
    # whether the order still holds (app.jobs.recheck, tested in tests/jobs/test_recheck.py).
    assert get_verdict(fresh_db, "a") == approved
    assert decision_fingerprint(fresh_db, "a") == old_fingerprint
    assert [(h["from_status"], h["status"]) for h in verdict_history(fresh_db, "a")] == [("pending", "approved")]


def test_unchanged_reimport_is_a_no_op(fresh_db, write_csv, monthly, relabel, snapshot):
    path = write_csv("p.csv", {"a": monthly(6), "b": monthly(7)})
    import_portfolio(fresh_db, path)
    save_analysis(fresh_db, "a", series_fingerprint(fresh_db, "a"), relabel("a"), None)
    approve(fresh_db, "a")
    before = snapshot(fresh_db)
    report = import_portfolio(fresh_db, path)
    assert (report.added, report.updated, report.unchanged) == ([], [], ["a", "b"])
    after = snapshot(fresh_db)
    assert len(after.pop("imports")) == len(before.pop("imports")) + 1
    assert after == before
    assert analysis_record(fresh_db, "a")["state"] == "current"
    assert get_verdict(fresh_db, "a")["status"] == "approved"


def test_appended_observations_merge_with_the_stored_ones(fresh_db, write_csv, monthly):
    full = monthly(8, n=46)
    import_portfolio(fresh_db, write_csv("first.csv", {"a": full.iloc[:40]}))
    tail = full.iloc[40:]
    assert len(tail) < MIN_POINTS  # too short on its own, fine once merged
    report = import_portfolio(fresh_db, write_csv("tail.csv", {"a": tail}))
    assert report.updated == ["a"] and report.rejected == [] and report.revised == []  # appended, nothing rewritten
    merged = load_series(fresh_db, "a")
    np.testing.assert_array_equal(merged.to_numpy(), full.to_numpy())
    assert list(merged.index) == list(full.index)
    assert get_series(fresh_db, "a")["n"] == 46


def test_empty_cell_does_not_erase_a_stored_value(fresh_db, write_csv, monthly):
    a = monthly(9)
    import_portfolio(fresh_db, write_csv("p.csv", {"a": a}))
    fingerprint = series_fingerprint(fresh_db, "a")
    holed = a.copy()
    holed.iloc[10] = np.nan
    report = import_portfolio(fresh_db, write_csv("holed.csv", {"a": holed}))
    assert report.unchanged == ["a"]
    assert load_series(fresh_db, "a").iloc[10] == a.iloc[10]
    assert series_fingerprint(fresh_db, "a") == fingerprint


def test_gap_in_a_new_series_is_not_stored_but_counted(fresh_db, write_csv, monthly):
    a = monthly(10)
    a.iloc[[5, 6]] = np.nan
    import_portfolio(fresh_db, write_csv("p.csv", {"a": a}))
    info = get_series(fresh_db, "a")
    assert (info["n"], info["observed"], info["gaps_filled"], info["prep_flags"]) == (40, 38, 2, ["gaps"])
    assert len(load_series(fresh_db, "a")) == 38


def test_integer_steps_are_stored_as_integers(fresh_db, write_csv, monthly):
    steps = pd.Series(monthly(11).to_numpy(), index=pd.Index(np.arange(101, 141)))
    import_portfolio(fresh_db, write_csv("p.csv", {"sensor": steps}))
    loaded = load_series(fresh_db, "sensor")
    assert loaded.index.dtype == np.int64 and list(loaded.index) == list(range(101, 141))
    np.testing.assert_array_equal(loaded.to_numpy(), steps.to_numpy())
    assert fresh_db.execute("SELECT DISTINCT typeof(ts) FROM observations").fetchall() == [("integer",)]
    assert get_series(fresh_db, "sensor")["time_kind"] == "integer"


def test_switching_a_series_from_dates_to_steps_is_rejected(fresh_db, write_csv, monthly, snapshot):
    a = monthly(12)
    import_portfolio(fresh_db, write_csv("dates.csv", {"a": a}))
    before = snapshot(fresh_db)
    steps = pd.Series(a.to_numpy(), index=pd.Index(np.arange(1, 41)))
    report = import_portfolio(fresh_db, write_csv("steps.csv", {"a": steps}))
    assert [(r["series_id"], r["flag"], r["row"]) for r in report.rejected] == [("a", "time_kind", 2)]
    after = snapshot(fresh_db)
    after.pop("imports"), before.pop("imports")
    assert after == before


def test_wide_layout_imports_each_column_as_a_series(fresh_db, tmp_path, monthly):
    a, b = monthly(13), monthly(14)
    frame = pd.DataFrame({"month": a.index.strftime("%Y-%m-%d"), "north": a.to_numpy(), "south": b.to_numpy()})
    frame.loc[:2, "south"] = np.nan  # south starts three months later
    frame.to_csv(tmp_path / "wide.csv", index=False)
    report = import_portfolio(fresh_db, tmp_path / "wide.csv", layout="wide", time_col="month")
    assert report.added == ["north", "south"]
    assert get_series(fresh_db, "south")["start"] == "2020-04-01T00:00:00"
    np.testing.assert_array_equal(load_series(fresh_db, "south").to_numpy(), b.to_numpy()[3:])


def test_fingerprint_depends_on_the_data_not_the_row_order(tmp_path, monthly):
    a = monthly(15)
    frames = {
        "sorted": a,
        "shuffled": a.sample(frac=1.0, random_state=3),
    }
    fingerprints = {}
    for name, series in frames.items():
        db = open_database(tmp_path / f"{name}.db")
        path = tmp_path / f"{name}.csv"
        pd.DataFrame({"series_id": "a", "timestamp": series.index.strftime("%Y-%m-%d"),
                      "value": [repr(float(v)) for v in series]}).to_csv(path, index=False)
        import_portfolio(db, path)
        fingerprints[name] = series_fingerprint(db, "a")
        db.close()
    assert fingerprints["sorted"] == fingerprints["shuffled"]
    assert len(fingerprints["sorted"]) == 64 and int(fingerprints["sorted"], 16) >= 0  # SHA-256 hex digest


def test_a_failure_while_writing_rolls_back_the_whole_import(fresh_db, write_csv, monthly, snapshot, monkeypatch):
    a = monthly(16)
    import_portfolio(fresh_db, write_csv("v1.csv", {"a": a}))
    approve(fresh_db, "a")
    before = snapshot(fresh_db)

    def disk_full(*args, **kwargs):
        raise OSError("disk full")

    monkeypatch.setattr(imports_module, "add_pending", disk_full)
    changed = a.copy()
    changed.iloc[0] += 1.0
    with pytest.raises(OSError, match="disk full"):
        import_portfolio(fresh_db, write_csv("v2.csv", {"a": changed, "new": monthly(17)}))
    assert snapshot(fresh_db) == before


finite = st.floats(min_value=-1e12, max_value=1e12, allow_nan=False, allow_infinity=False)


@settings(max_examples=25, deadline=None)
@given(values=st.lists(finite, min_size=MIN_POINTS, max_size=30).filter(
    lambda v: np.ptp(v) > 1e-6 * max(1.0, max(abs(x) for x in v))))  # not constant in prepare_series' sense
def test_stored_values_read_back_exactly(values):
    series = pd.Series(values, index=pd.date_range("2001-01-01", periods=len(values), freq="D"))
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "p.csv"
        pd.DataFrame({"series_id": "x", "timestamp": series.index.strftime("%Y-%m-%d"),
                      "value": [repr(v) for v in values]}).to_csv(path, index=False)
        db = open_database(Path(folder) / "x.db")
        import_portfolio(db, path)
        loaded = load_series(db, "x")
        db.close()
    assert loaded.to_numpy().tolist() == values


def test_an_import_landing_while_another_plans_is_merged_not_lost(fresh_db, write_csv, monthly, monkeypatch, tmp_path):
    full = monthly(18, n=46)
    import_portfolio(fresh_db, write_csv("base.csv", {"a": full.iloc[:40]}))
    other_file = write_csv("other.csv", {"a": full.iloc[40:43]})
    plan = imports_module._plan
    interrupted = []

    def plan_while_another_import_commits(db, portfolio):
        planned = plan(db, portfolio)
        if not interrupted:
            interrupted.append(portfolio.path)
            other = open_database(tmp_path / "lagdesk.db")
            import_portfolio(other, other_file)
            other.close()
        return planned

    monkeypatch.setattr(imports_module, "_plan", plan_while_another_import_commits)
    report = import_portfolio(fresh_db, write_csv("mine.csv", {"a": full.iloc[43:]}))
    assert report.updated == ["a"]
    np.testing.assert_array_equal(load_series(fresh_db, "a").to_numpy(), full.to_numpy())
    assert get_series(fresh_db, "a")["n"] == 46
    reference = open_database(tmp_path / "reference.db")
    import_portfolio(reference, write_csv("full.csv", {"a": full}))
    assert series_fingerprint(fresh_db, "a") == series_fingerprint(reference, "a")
    reference.close()


def test_a_decided_series_whose_new_data_are_refused_comes_back_for_a_look(fresh_db, write_csv, monthly):
    a, b = monthly(40), monthly(40)
    import_portfolio(fresh_db, write_csv("first.csv", {"a": a, "b": b}))
    approve(fresh_db, "a")
    steps = pd.Series(a.to_numpy(), index=pd.Index(np.arange(1, 41)))  # the same values on a step axis: refused
    report = import_portfolio(fresh_db, write_csv("second.csv", {"a": steps, "b": steps}))
    assert {r["series_id"] for r in report.rejected} == {"a", "b"}
    verdict = get_verdict(fresh_db, "a")
    assert verdict["status"] == "recheck" and verdict["order"] == [1, 0, 0]
    assert "the import of" in verdict["recheck_reason"] and "second.csv" in verdict["recheck_reason"]
    assert "refused its new data (line 2)" in verdict["recheck_reason"]
    assert verdict["recheck_reason"].count("'a'") == 0  # the series is not named twice in its own reason
    assert get_verdict(fresh_db, "b")["status"] == "pending"  # undecided: still to be decided anyway
    # Corrected data stored later: the reason no longer says only that the stored data are older.
    import_portfolio(fresh_db, write_csv("third.csv", {"a": monthly(44)}))
    later = get_verdict(fresh_db, "a")
    assert later["status"] == "recheck" and later["recheck_reason"].startswith(verdict["recheck_reason"])
    assert later["recheck_reason"].endswith("third.csv stored new data") and "; since then the import of " in later["recheck_reason"]
