"""The export's query: one record per decided series, parameters from the analysis or a kept refit.

The analysis results are the engine's real output for log10 lynx (the ``relabel`` fixture), so
the parameters a record must carry are those the engine fitted; the refits kept in
``order_fits`` are compared field by field with what was saved.
"""

from __future__ import annotations

from datetime import datetime

import pandas as pd
import pytest

from app.core.errors import LagdeskError
from app.core.transform import TransformChoice
from app.store.analyses import save_analysis
from app.store.imports import import_portfolio
from app.store.orders import (
    ORDER_FIELDS,
    decided_orders,
    export_snapshot,
    left_out_counts,
    save_order_fit,
)
from app.store.series import get_series, series_fingerprint
from app.store.timestamps import stored_form, timestamp_keys
from app.store.verdicts import decision_fingerprint, mark_recheck, set_verdict


@pytest.fixture
def decided_db(fresh_db, write_csv, monthly, relabel):
    """Six series with analyses: a approved (a candidate), b overridden (a custom order, log),
    c parked, d pending, e recheck, f approved (a candidate)."""
    series = {sid: monthly(seed) for seed, sid in enumerate("abcdef", start=1)}
    import_portfolio(fresh_db, write_csv("p.csv", series))
    for sid in series:
        save_analysis(fresh_db, sid, series_fingerprint(fresh_db, sid), relabel(sid), None)
    decide = dict(seasonal_order=[0, 0, 0, 0], reviewer="ann", version=0)
    set_verdict(fresh_db, "a", status="approved", order=[2, 0, 0], note="as suggested", **decide)
    set_verdict(fresh_db, "b", status="overridden", order=[1, 1, 1], transform="log", note="needs a log", **decide)
    set_verdict(fresh_db, "c", status="parked", order=None, **{**decide, "seasonal_order": None})
    set_verdict(fresh_db, "e", status="approved", order=[2, 0, 1], **decide)
    mark_recheck(fresh_db, "e", "the data changed")
    set_verdict(fresh_db, "f", status="approved", order=[2, 0, 1], **decide)
    return fresh_db


def test_one_record_per_decided_series_with_every_field_from_the_store(decided_db, engine_result):
    orders = {o.record["series_id"]: o for o in decided_orders(decided_db)}
    assert list(orders) == ["a", "b", "f"]
    a = orders["a"].record
    assert tuple(a) == ORDER_FIELDS
    candidate = engine_result.candidate_of([2, 0, 0], None)
    assert a == {
        "series_id": "a", "p": 2, "d": 0, "q": 0, "seasonal_p": 0, "seasonal_d": 0, "seasonal_q": 0, "period": None,
        "transform": "none", "include_constant": candidate.order.trend != "n", "decision": "approved", "reviewer": "ann",
        "decided_at": a["decided_at"], "note": "as suggested", "data_sha256": decision_fingerprint(decided_db, "a"),
        "data_changed": False, "last_timestamp": get_series(decided_db, "a")["end"], "engine_version": engine_result.engine_version,
        "parameters": candidate.parameter_values(),
        "interventions": [{"timestamp": stored_form(i.timestamp), "kind": str(i.kind), "size": i.size}
                          for i in engine_result.interventions],
    }
    assert a["decided_at"] is not None and a["data_sha256"] == series_fingerprint(decided_db, "a")
    # A custom order (and another transform than the analysis') has no fitted parameters yet.
    b = orders["b"]
    assert (b.record["d"], b.record["transform"], b.record["decision"], b.record["parameters"]) == (1, "log", "overridden", None)
    assert (b.model.order, b.transform.kind) == ((1, 1, 1), "log")


def test_every_time_stamp_of_the_export_is_spelt_as_the_store_spells_it():
    # The pages write a moment as a reader does (app.core.prepare.moment); the export writes it
    # as last_timestamp is written, ISO 8601 (datetime.isoformat) or the step's whole number.
    hourly = pd.date_range("2013-12-30 22:00", periods=3, freq="h")
    assert [stored_form(text) for text in ("2013-12-30 22:00", "2013-12-31", "2013-12-31 00:00")] == [
        timestamp_keys(hourly)[0], "2013-12-31T00:00:00", "2013-12-31T00:00:00"]
    assert stored_form("2013-12-30 22:00") == datetime(2013, 12, 30, 22).isoformat()
    assert [stored_form(text) for text in ("12", "-7")] == ["12", "-7"]


def test_a_kept_refit_fills_the_parameters_until_the_data_change(decided_db, write_csv, monthly):
    b = next(o for o in decided_orders(decided_db) if o.record["series_id"] == "b")
    fitted = {"ar.L1": 0.3, "ma.L1": -0.5, "sigma2": 0.01}
    save_order_fit(decided_db, "b", b.fingerprint, b.model, b.transform, fitted, "9.9")
    again = next(o for o in decided_orders(decided_db) if o.record["series_id"] == "b").record
    assert (again["parameters"], again["engine_version"]) == (fitted, "9.9")
    # A refit of another model (here another transform) is not used.
    save_order_fit(decided_db, "b", b.fingerprint, b.model, TransformChoice("none"), fitted, "9.9")
    assert next(o for o in decided_orders(decided_db) if o.record["series_id"] == "b").record["parameters"] is None
    save_order_fit(decided_db, "b", b.fingerprint, b.model, b.transform, fitted, "9.9")
    changed = monthly(2)
    changed.iloc[5] += 3.0
    import_portfolio(decided_db, write_csv("v2.csv", {"b": changed}))
    after = next(o for o in decided_orders(decided_db) if o.record["series_id"] == "b").record
    assert after["parameters"] is None  # the refit was of the older data
    assert after["data_sha256"] != series_fingerprint(decided_db, "b")  # decided on the older data


def test_a_stale_analysis_does_not_provide_parameters(decided_db, write_csv, monthly):
    changed = monthly(1)
    changed.iloc[0] += 1.0
    import_portfolio(decided_db, write_csv("v2.csv", {"a": changed}))
    assert next(o for o in decided_orders(decided_db) if o.record["series_id"] == "a").record["parameters"] is None


def test_left_out_counts_every_undecided_status_and_an_unchosen_decision(decided_db):
    assert left_out_counts(decided_db) == {"pending": 1, "parked": 1, "recheck": 1}
    assert left_out_counts(decided_db, ["approved"]) == {"pending": 1, "overridden": 1, "parked": 1, "recheck": 1}
    orders, counts = export_snapshot(decided_db, ["overridden"])
    assert [o.record["series_id"] for o in orders] == ["b"] and counts["approved"] == 2


@pytest.mark.parametrize("statuses, message", [
    (["approved", "pending"], "not 'pending'"),
    ([], "at least one status"),
])
def test_only_decided_statuses_can_be_exported(decided_db, statuses, message):
    with pytest.raises(LagdeskError, match=message):
        decided_orders(decided_db, statuses)


