"""The export: JSON and CSV round trips against the store, the shipped JSON Schema, left-out counts,
CSV injection, atomic writes.

Reference values come from the store's own readers (verdicts, series, stored analyses) and, for
the parameters of orders no analysis fitted, from the fit of that order run directly
(``fit_candidate`` on the transformed series, itself checked against statsmodels in
tests/core/test_fitting.py). The CSV rule is OWASP's guidance on CSV injection
(https://owasp.org/www-community/attacks/CSV_Injection): cells starting with ``=``, ``+``, ``-``,
``@``, tab or carriage return get a leading single quote.
"""

from __future__ import annotations

import csv
import json
from pathlib import Path

import jsonschema
import pandas as pd
import pytest
from threadpoolctl import threadpool_limits

import app
import app.review.export as export_module
from app.core.analysis import Analysis
from app.core.errors import LagdeskError
from app.core.fitting import fit_candidate
from app.core.order import validate_order
from app.core.portfolio_file import read_portfolio
from app.core.prepare import prepare_series
from app.core.transform import TransformChoice, apply_transform
from app.jobs.work import SeriesTask, identify_task
from app.review.export import (
    SCHEMA_VERSION,
    build_orders_document,
    export_command,
    export_summary,
    neutralise_formula,
    orders_csv,
    write_export,
)
from app.store.analyses import load_analysis, save_analysis
from app.store.database import open_database
from app.store.imports import import_portfolio
from app.store.orders import ORDER_FIELDS
from app.store.series import get_series, load_series, series_fingerprint
from app.store.verdicts import decision_fingerprint, get_verdict, set_verdict

REPO = Path(app.__file__).resolve().parent.parent
SCHEMA = json.loads((REPO / "schemas" / "lagdesk-orders.schema.json").read_text(encoding="utf-8"))
DEMO_IDS = (
    "hearthloaf/chain/complaints", "hearthloaf/chain/oven-gas-kwh", "hearthloaf/chain/staff-hours",
    "hearthloaf/chain/sugar-kg", "hearthloaf/station-row/coffee-cake", "hearthloaf/station-row/monthly-sales",
)
FORMULA_ID = "+shop/=SUM(A1:A9)"  # a series id a spreadsheet would run
TEXT_FIELDS = ("series_id", "decision", "reviewer", "decided_at", "note", "data_sha256", "last_timestamp", "engine_version")
INTEGER_FIELDS = ("p", "d", "q", "seasonal_p", "seasonal_d", "seasonal_q")


@pytest.fixture(scope="module")
def portfolio_csv(tmp_path_factory) -> Path:
    """Six demo series, and one more under an id that starts like a formula."""
    demo = pd.read_csv(REPO / "demo_data" / "portfolio.csv", dtype=str)
    chosen = demo[demo["series_id"].isin(DEMO_IDS)]
    odd = demo[demo["series_id"] == "hearthloaf/station-row/coffee-cake"].assign(series_id=FORMULA_ID)
    path = tmp_path_factory.mktemp("export") / "portfolio.csv"
    pd.concat([chosen, odd]).to_csv(path, index=False)
    return path


@pytest.fixture(scope="module")
def engine_results(portfolio_csv) -> dict[str, Analysis]:
    with threadpool_limits(limits=1):
        outcomes = [identify_task(SeriesTask(s.series_id, s.values, s.lines)) for s in read_portfolio(portfolio_csv).series
                    if s.series_id in DEMO_IDS]
    return {o.series_id: o.result for o in outcomes}


@pytest.fixture
def db(tmp_path, portfolio_csv, engine_results):
    """The portfolio imported and analysed; two approved, three overridden, one parked, one pending."""
    db = open_database(tmp_path / "lagdesk.db")
    import_portfolio(db, portfolio_csv)
    for sid, result in engine_results.items():
        save_analysis(db, sid, series_fingerprint(db, sid), result, None)

    def decide(sid, status, order=None, seasonal=None, **more):
        suggested = engine_results[sid].suggested.order if sid in engine_results else None
        set_verdict(db, sid, status=status, order=order or (suggested and list(suggested.order)),
                    seasonal_order=seasonal or (suggested and list(suggested.seasonal_order)), version=0,
                    transform=more.pop("transform", engine_results[sid].transform.to_json() if sid in engine_results else "none"),
                    **more)

    decide("hearthloaf/station-row/monthly-sales", "approved", reviewer="ann", note="seasonal, on the log scale")
    decide("hearthloaf/station-row/coffee-cake", "approved", reviewer="ann")
    decide("hearthloaf/chain/oven-gas-kwh", "overridden", order=[0, 0, 1], seasonal=[0, 0, 0, 0],
           reviewer="@bob", note="=1+2 it is an MA(1)")
    decide("hearthloaf/chain/sugar-kg", "overridden", order=[0, 1, 1], seasonal=[0, 0, 0, 0], transform="log",
           reviewer="bob", note="-log reads better than Box-Cox")
    decide(FORMULA_ID, "overridden", order=[1, 0, 0], seasonal=[0, 0, 0, 0], reviewer="cy", note="\tno analysis")
    decide("hearthloaf/chain/staff-hours", "parked", order=None, seasonal=None, reviewer="cy", note="wait for June")
    yield db
    db.close()


EXPORTED = sorted([
    "hearthloaf/station-row/monthly-sales", "hearthloaf/station-row/coffee-cake", "hearthloaf/chain/oven-gas-kwh",
    "hearthloaf/chain/sugar-kg", FORMULA_ID,
])


def expected_record(db, series_id: str) -> dict:
    """What the store says an order's record must hold (parameters checked separately)."""
    verdict = get_verdict(db, series_id)
    p, d, q = verdict["order"]
    sp, sd, sq, s = verdict["seasonal_order"]
    return {
        "series_id": series_id, "p": p, "d": d, "q": q, "seasonal_p": sp, "seasonal_d": sd, "seasonal_q": sq,
        "period": s or None, "transform": verdict["transform"], "decision": verdict["status"],
        "reviewer": verdict["reviewer"], "decided_at": verdict["decided_at"], "note": verdict["note"],
        "data_sha256": decision_fingerprint(db, series_id), "last_timestamp": get_series(db, series_id)["end"],
    }


def expected_parameters(db, record: dict) -> dict[str, float]:
    """The stored candidate's coefficients, or those of the order fitted directly."""
    result = load_analysis(db, record["series_id"])
    order = [record["p"], record["d"], record["q"]]
    seasonal = [record["seasonal_p"], record["seasonal_d"], record["seasonal_q"], record["period"] or 0]
    candidates = result.candidates if result else ()
    match = next((c for c in candidates if list(c.order.order) == order and list(c.order.seasonal_order) == seasonal), None)
    if match is not None and result.transform.to_json() == record["transform"]:
        return {p.name: p.value for p in match.params}
    same_d = [c.order.trend for c in candidates if c.order.d == order[1] and c.order.D == seasonal[1]]
    model = validate_order(order, seasonal, trend=same_d[0] if same_d else None)
    y = prepare_series(load_series(db, record["series_id"]), record["series_id"]).values
    fit = fit_candidate(apply_transform(y, TransformChoice.from_json(record["transform"])), model)
    return {p.name: p.value for p in fit.params}


def test_json_export_round_trips_against_the_store_and_validates(engine_results, db, tmp_path):
    path = tmp_path / "orders.json"
    document = write_export(db, path, "json")
    read_back = json.loads(path.read_text(encoding="utf-8"))
    assert read_back == document
    jsonschema.Draft202012Validator(SCHEMA, format_checker=jsonschema.Draft202012Validator.FORMAT_CHECKER).validate(read_back)
    assert (read_back["schema"], read_back["version"]) == ("lagdesk-orders", SCHEMA_VERSION)
    assert [o["series_id"] for o in read_back["orders"]] == EXPORTED
    # Pending and parked series are absent and counted; none is marked not_arima.
    assert read_back["left_out"] == {"pending": 1, "parked": 1, "recheck": 0}
    assert read_back["not_arima"] == []
    for order in read_back["orders"]:
        assert tuple(order) == ORDER_FIELDS
        assert {k: order[k] for k in expected_record(db, order["series_id"])} == expected_record(db, order["series_id"])
        assert order["parameters"] == pytest.approx(expected_parameters(db, order), rel=1e-6), order["series_id"]
    seasonal = next(o for o in read_back["orders"] if o["series_id"].endswith("monthly-sales"))
    # The approved seasonal order carries the transform the engine chose with it.
    chosen = engine_results[seasonal["series_id"]]
    assert (seasonal["period"], seasonal["transform"], seasonal["seasonal_d"]) == (12, chosen.transform.to_json(), 1)


def parse_csv_row(row: dict) -> dict:
    """A CSV row read back into the JSON record's types (the neutralising quote kept)."""
    out = dict(row)
    for name in INTEGER_FIELDS:
        out[name] = int(row[name])
    out["period"] = int(row["period"]) if row["period"] else None
    out["include_constant"] = {"true": True, "false": False}[row["include_constant"]]
    out["transform"] = json.loads(row["transform"]) if row["transform"].startswith("{") else row["transform"]
    out["parameters"] = json.loads(row["parameters"])
    return out


def test_csv_export_round_trips_with_formula_cells_neutralised(db, tmp_path):
    path = tmp_path / "orders.csv"
    document = write_export(db, path, "csv")
    with path.open(newline="", encoding="utf-8") as handle:
        reader = csv.DictReader(handle)
        assert tuple(reader.fieldnames) == ORDER_FIELDS
        rows = [parse_csv_row(row) for row in reader]
    assert len(rows) == len(EXPORTED)
    by_id = {neutralise_formula(o["series_id"]): o for o in document["orders"]}
    for row in rows:
        order = by_id[row["series_id"]]
        store = expected_record(db, order["series_id"])
        for name in TEXT_FIELDS:
            value = store.get(name, order[name])
            starts_like_a_formula = value[:1] in ("=", "+", "-", "@", "\t", "\r")
            assert row[name] == ("'" + value if starts_like_a_formula else value), (name, value)
        for name in INTEGER_FIELDS + ("period", "transform"):
            assert row[name] == store[name]
        assert row["include_constant"] == order["include_constant"]
        assert row["parameters"] == order["parameters"]  # floats survive the JSON text exactly
    odd = next(r for r in rows if r["series_id"] == "'" + FORMULA_ID)
    assert odd["note"] == "'\tno analysis"
    oven = next(r for r in rows if r["series_id"] == "hearthloaf/chain/oven-gas-kwh")
    assert (oven["reviewer"], oven["note"]) == ("'@bob", "'=1+2 it is an MA(1)")


@pytest.mark.parametrize("text, expected", [
    ("=1+2", "'=1+2"), ("+SUM(A1)", "'+SUM(A1)"), ("-2+3+cmd|' /C calc'!A0", "'-2+3+cmd|' /C calc'!A0"),
    ("@SUM(A1)", "'@SUM(A1)"), ("\t=1", "'\t=1"), ("\r=1", "'\r=1"),
    ("-3", "-3"), ("-0.25", "-0.25"), ("+1.5e2", "+1.5e2"), ("plain", "plain"), ("", ""), ("a=b", "a=b"),
    ("ok;=1+2", "ok;'=1+2"), ("a;-3;b", "a;-3;b"), ("=x;@y", "'=x;'@y"),
])
def test_neutralise_formula_follows_owasp_but_leaves_numbers(text, expected):
    assert neutralise_formula(text) == expected


def test_numbers_stay_numbers_in_the_csv():
    record = {name: 0 for name in ORDER_FIELDS}
    record.update(series_id="-7", p=2, period=None, transform={"box_cox": -0.5}, include_constant=False,
                  parameters={"ar.L1": -0.5}, note="-", last_timestamp="-12")
    row = next(csv.DictReader(orders_csv([record]).splitlines()))
    assert (row["series_id"], row["p"], row["period"], row["last_timestamp"]) == ("-7", "2", "", "-12")
    assert (row["transform"], row["parameters"], row["note"]) == ('{"box_cox": -0.5}', '{"ar.L1": -0.5}', "'-")


def test_the_schema_refuses_a_document_that_breaks_the_contract(db):
    document = build_orders_document(db)
    validator = jsonschema.Draft202012Validator(SCHEMA)
    validator.validate(document)
    broken = json.loads(json.dumps(document))
    del broken["orders"][0]["data_sha256"]
    assert not validator.is_valid(broken)
    renamed = json.loads(json.dumps(document))
    renamed["orders"][0]["P"] = renamed["orders"][0].pop("seasonal_p")
    assert not validator.is_valid(renamed)
    unknown = json.loads(json.dumps(document))
    unknown["left_out"]["waiting"] = 1
    assert not validator.is_valid(unknown)


def test_not_arima_series_are_listed_apart_in_version_2_and_the_schema_holds_the_list_to_its_fields(db):
    parked = get_verdict(db, "hearthloaf/chain/staff-hours")
    set_verdict(db, "hearthloaf/chain/staff-hours", status="not_arima", order=None, seasonal_order=None,
                reviewer="cy", note="rota-driven", version=parked["version"])
    document = build_orders_document(db)
    validator = jsonschema.Draft202012Validator(SCHEMA, format_checker=jsonschema.Draft202012Validator.FORMAT_CHECKER)
    validator.validate(document)
    decided_at = get_verdict(db, "hearthloaf/chain/staff-hours")["decided_at"]
    assert document["not_arima"] == [
        {"series_id": "hearthloaf/chain/staff-hours", "reviewer": "cy", "decided_at": decided_at, "note": "rota-driven"}]
    # Listed, so not left out: the parked one it was is no longer counted.
    assert document["left_out"] == {"pending": 1, "parked": 0, "recheck": 0}
    assert [o["series_id"] for o in document["orders"]] == EXPORTED
    for broken in ({**document, "version": 1}, {k: v for k, v in document.items() if k != "not_arima"},
                   {**document, "not_arima": [{**document["not_arima"][0], "order": [1, 0, 0]}]},
                   {**document, "left_out": {**document["left_out"], "not_arima": 1}}):
        assert not validator.is_valid(broken)
    assert "1 series marked not_arima (in the JSON export only)" in export_summary(document, Path("o.csv"), "csv")


def test_a_failed_write_leaves_the_old_file_and_no_temporary_file(db, tmp_path, monkeypatch):
    path = tmp_path / "orders.json"
    path.write_text("the previous export\n", encoding="utf-8")

    def crash(*args, **kwargs):
        raise OSError("disk full")

    monkeypatch.setattr(export_module.os, "fsync", crash)
    with pytest.raises(OSError, match="disk full"):
        write_export(db, path, "json")
    assert path.read_text(encoding="utf-8") == "the previous export\n"
    assert sorted(p.name for p in tmp_path.iterdir() if p.name.startswith(".orders")) == []
    with pytest.raises(LagdeskError, match="not 'pending'"):
        write_export(db, path, "json", ["pending"])
    with pytest.raises(LagdeskError, match="format must be json or csv"):
        write_export(db, path, "xlsx")
    assert path.read_text(encoding="utf-8") == "the previous export\n"


def test_export_command_writes_and_summarises(db, tmp_path, portfolio_csv):
    db_path = tmp_path / "lagdesk.db"
    line = export_command(db_path, "csv", tmp_path / "out.csv", "approved")
    assert line == (f"2 orders (2 approved) written to {tmp_path / 'out.csv'} as csv; "
                    "left out: 1 pending, 3 overridden, 1 parked, 0 recheck")
    # New data for an approved series: exported on its decision, flagged in the summary.
    changed = pd.read_csv(portfolio_csv, dtype=str)
    coffee = changed["series_id"] == "hearthloaf/station-row/coffee-cake"
    changed.loc[coffee.idxmax(), "value"] = "1000"
    changed[coffee].to_csv(tmp_path / "v2.csv", index=False)
    import_portfolio(db, tmp_path / "v2.csv")
    line = export_command(db_path, "json", tmp_path / "out.json")
    assert "1 of them was decided on data that has changed since (e.g. 'hearthloaf/station-row/coffee-cake')" in line


def test_a_folder_as_the_output_gets_the_default_file_name_in_it(db, tmp_path):
    folder = tmp_path / "handoff"
    folder.mkdir()
    line = export_command(tmp_path / "lagdesk.db", "json", folder)
    assert f"written to {folder / 'lagdesk-orders.json'} as json" in line
    assert json.loads((folder / "lagdesk-orders.json").read_text(encoding="utf-8"))["schema"] == "lagdesk-orders"


def test_a_folder_written_with_a_trailing_slash_is_a_folder_even_when_it_is_missing(db, tmp_path):
    # Before, "-o newdir/" wrote a file called newdir.
    with pytest.raises(LagdeskError, match="does not exist"):
        export_command(tmp_path / "lagdesk.db", "json", f"{tmp_path / 'newdir'}/")
    assert not (tmp_path / "newdir").exists()


def test_a_file_that_cannot_be_created_is_named_in_the_error_not_the_temporary_one(db, tmp_path, monkeypatch):
    target = tmp_path / "orders.json"

    def refused(name, *args, **kwargs):
        raise PermissionError(13, "Permission denied", str(name))

    monkeypatch.setattr(export_module.os, "open", refused)
    with pytest.raises(OSError) as caught:
        write_export(db, target, "json")
    assert caught.value.filename == str(target) and "cannot write it" in str(caught.value)
    assert ".tmp" not in str(caught.value)


def test_a_cell_with_a_semicolon_is_quoted_so_no_spreadsheet_cuts_a_formula_out_of_it():
    # A spreadsheet in a locale that splits CSV on semicolons cut the unquoted note
    # "fine;=HYPERLINK(...)" into a second cell starting with "=" (a server attack). RFC 4180
    # §2.6-2.7: a quoted field keeps its separators; a quote inside is doubled.
    record = {name: 0 for name in ORDER_FIELDS}
    record.update(series_id="shop;=cmd|' /C calc'!A0", period=None, transform="none", include_constant=True,
                  parameters={}, note='fine;=HYPERLINK("http://x.example/","Click")', last_timestamp="2024-01-01")
    text = orders_csv([record])
    line = text.splitlines()[1]
    assert line.startswith('"shop;\'=cmd|\' /C calc\'!A0",')
    assert ',"fine;\'=HYPERLINK(""http://x.example/"",""Click"")",' in line
    # Read with either separator, no cell starts like a formula.
    for delimiter in (",", ";"):
        cells = next(csv.reader(text.splitlines()[1:], delimiter=delimiter))
        assert not any(c.lstrip('"').startswith("=") for c in cells), (delimiter, cells)
    row = next(csv.DictReader(text.splitlines()))
    assert (row["series_id"], row["note"]) == ("shop;'=cmd|' /C calc'!A0", 'fine;\'=HYPERLINK("http://x.example/","Click")')
