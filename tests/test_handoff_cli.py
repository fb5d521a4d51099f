"""The hand-off from the command line, end to end: an approved order is exported; new data that
break it bring the series back as ``recheck`` after ``lagdesk analyze`` and the export leaves it
out and counts it; ``lagdesk backtest`` prints the forecast check.

The break is checked independently: the approved white-noise model's residuals on the new data
fail the Ljung-Box test computed directly with statsmodels (Ljung & Box 1978). The export is
validated against the JSON Schema shipped in schemas/.
"""

from __future__ import annotations

import json
from pathlib import Path

import jsonschema
import numpy as np
import pandas as pd
import pytest
from statsmodels.stats.diagnostic import acorr_ljungbox

import app
from app.cli import main
from app.review.forecast_check import ForecastCheckTooLarge, backtest_series
from app.store.database import open_database
from app.store.verdicts import get_verdict, set_verdict

SCHEMA = json.loads((Path(app.__file__).resolve().parent.parent / "schemas" / "lagdesk-orders.schema.json").read_text())
SID = "depot-3/chiller/temp"
N = 60


@pytest.fixture
def run_cli(capsys):
    def run(*argv) -> tuple[int, str, str]:
        code = main([str(a) for a in argv])
        out, err = capsys.readouterr()
        return code, out, err

    return run


def write_series(path: Path, values: np.ndarray) -> Path:
    index = pd.date_range("2020-01-06", periods=len(values), freq="W-MON")
    pd.DataFrame({"series_id": SID, "timestamp": index.strftime("%Y-%m-%d"), "value": values}).to_csv(path, index=False)
    return path


def autocorrelated(n: int, phi: float = 0.95) -> np.ndarray:
    rng = np.random.default_rng(17)
    x = np.zeros(n)
    for t in range(1, n):
        x[t] = phi * x[t - 1] + rng.normal()
    return 20.0 + 4.0 + x


def test_export_recheck_and_backtest_from_the_command_line(run_cli, tmp_path):
    db_path = tmp_path / "lagdesk.db"
    noise = 20.0 + np.random.default_rng(5).normal(size=N)
    assert run_cli("import", write_series(tmp_path / "v1.csv", noise), "--db", db_path)[0] == 0
    assert run_cli("analyze", "--db", db_path, "--workers", 1, "--period", "none")[0] == 0
    with open_database(db_path) as db:
        set_verdict(db, SID, status="approved", order=[0, 0, 0], seasonal_order=[0, 0, 0, 0], reviewer="ann", note="", version=0)

    target = tmp_path / "orders.json"
    code, out, _ = run_cli("export", "--db", db_path, "-o", target)
    assert code == 0 and out.startswith(f"1 order (1 approved) written to {target} as json; left out: 0 pending")
    document = json.loads(target.read_text())
    jsonschema.validate(document, SCHEMA)
    assert [(o["series_id"], o["p"], o["d"], o["q"]) for o in document["orders"]] == [(SID, 0, 0, 0)]
    code, out, err = run_cli("export", "--db", db_path, "-o", "-")  # on stdout, the summary on stderr
    assert code == 0 and err.startswith("1 order (1 approved) written to standard output as json; left out: 0 pending")
    assert json.loads(out) == {**document, "generated_at": json.loads(out)["generated_at"]}

    longer = np.r_[noise, autocorrelated(N)]
    assert acorr_ljungbox(longer - longer.mean(), lags=[10], return_df=True)["lb_pvalue"].iloc[0] < 0.05
    run_cli("import", write_series(tmp_path / "v2.csv", longer), "--db", db_path)
    code, out, _ = run_cli("analyze", "--db", db_path, "--workers", 1, "--period", "none")
    assert code == 0
    with open_database(db_path) as db:
        verdict = get_verdict(db, SID)
    assert verdict["status"] == "recheck" and "fail the Ljung-Box test" in verdict["recheck_reason"]

    code, _, err = run_cli("export", "--db", db_path, "-o", target, "--format", "csv")
    assert code == 2 and "the file is named .json but --format is csv" in err
    as_csv = tmp_path / "orders.csv"  # the extension names the format
    code, out, _ = run_cli("export", "--db", db_path, "-o", as_csv)
    assert code == 0 and "0 orders written" in out and "as csv" in out and "1 recheck" in out
    assert as_csv.read_text().splitlines()[0].startswith("series_id,") and as_csv.read_text().splitlines()[1:] == []

    code, out, _ = run_cli("backtest", SID, "--db", db_path, "--order", "1,0,0", "--json")
    assert code == 0
    with open_database(db_path) as db:
        direct = backtest_series(db, SID, [1, 0, 0])
    shown = json.loads(out)
    assert (shown["mase"], shown["coverage"], shown["horizon"]) == (direct["mase"], direct["coverage"], 8)
    code, out, _ = run_cli("backtest", SID, "--db", db_path)
    assert code == 0 and "MASE" in out and "seasonal naive MASE" in out
    # An order beyond the engine's search limits can be approved, so the command line checks it
    # too (the server keeps its bound: anyone who can open a page can ask for a check there).
    with open_database(db_path) as db:
        set_verdict(db, SID, status="overridden", order=[7, 0, 0], seasonal_order=[0, 0, 0, 0], reviewer="ann", note="ar 7",
                    version=get_verdict(db, SID)["version"])
    code, out, _ = run_cli("backtest", SID, "--db", db_path, "--order", "7,0,0", "--json")
    assert code == 0 and json.loads(out)["label"].startswith("ARIMA(7,0,0)")
    # Without --order the check is of the order the export hands on, the override's.
    code, out, _ = run_cli("backtest", SID, "--db", db_path, "--json")
    assert code == 0 and json.loads(out)["label"].startswith("ARIMA(7,0,0)")
    with open_database(db_path) as db, pytest.raises(ForecastCheckTooLarge, match="lagdesk backtest --order checks any order"):
        backtest_series(db, SID, [7, 0, 0])


def test_backtest_checks_the_decided_model_with_its_transform_and_constant(run_cli, tmp_path):
    db_path = tmp_path / "lagdesk.db"
    run_cli("import", write_series(tmp_path / "v1.csv", autocorrelated(N)), "--db", db_path)
    assert run_cli("analyze", "--db", db_path, "--workers", 1, "--period", "none")[0] == 0
    with open_database(db_path) as db:
        set_verdict(db, SID, status="overridden", order=[1, 0, 0], seasonal_order=[0, 0, 0, 0], transform="log", trend="n",
                    reviewer="ann", note="log scale, no mean", version=get_verdict(db, SID)["version"])
        decided = backtest_series(db, SID, [1, 0, 0], [0, 0, 0, 0], "log", include_constant=False)
        with_mean = backtest_series(db, SID, [1, 0, 0], [0, 0, 0, 0], "log", include_constant=True)
    code, out, _ = run_cli("backtest", SID, "--db", db_path, "--json")
    shown = json.loads(out)
    assert code == 0 and shown["mase"] == decided["mase"] and shown["label"] == decided["label"]
    assert decided["mase"] != with_mean["mase"]  # the constant the reviewer set made a difference


def test_backtest_of_an_unknown_series_is_one_line(run_cli, tmp_path):
    db_path = tmp_path / "lagdesk.db"
    run_cli("import", write_series(tmp_path / "v1.csv", np.arange(40.0)), "--db", db_path)
    code, out, err = run_cli("backtest", "nope", "--db", db_path)
    assert code == 2 and out == "" and len(err.splitlines()) == 1 and "nope" in err


def test_decide_takes_the_transform_constant_confirmation_and_not_arima(run_cli, tmp_path):
    db_path = tmp_path / "lagdesk.db"
    noise = 20.0 + np.random.default_rng(5).normal(size=N)
    drifting = autocorrelated(N)
    index = pd.date_range("2020-01-06", periods=N, freq="W-MON").strftime("%Y-%m-%d")
    other = "depot-3/freezer/temp"
    pd.concat([pd.DataFrame({"series_id": SID, "timestamp": index, "value": noise}),
               pd.DataFrame({"series_id": other, "timestamp": index, "value": drifting})]).to_csv(tmp_path / "p.csv", index=False)
    assert run_cli("import", tmp_path / "p.csv", "--db", db_path)[0] == 0
    assert run_cli("analyze", "--db", db_path, "--workers", 1, "--period", "none")[0] == 0

    code, out, _ = run_cli("decide", SID, "override", "--order", "1,0,0", "--transform", "log", "--constant",
                           "--reviewer", "ann", "--json", "--db", db_path)
    assert code == 0
    assert {k: json.loads(out)[k] for k in ("status", "order", "transform", "trend")} == {
        "status": "overridden", "order": [1, 0, 0], "transform": "log", "trend": "c"}
    # White noise around a mean for an AR(1) with phi = 0.95: statsmodels' Ljung-Box rejects.
    assert acorr_ljungbox(drifting - drifting.mean(), lags=[10], return_df=True)["lb_pvalue"].iloc[0] < 0.01
    code, out, err = run_cli("decide", other, "override", "--order", "0,0,0", "--reviewer", "ann", "--db", db_path)
    assert (code, out) == (2, "") and len(err.splitlines()) == 1 and "confirm to save it anyway with --confirm" in err
    assert run_cli("decide", other, "override", "--order", "0,0,0", "--confirm", "--reviewer", "ann", "--db", db_path)[0] == 0
    code, out, _ = run_cli("decide", other, "not-arima", "--note", "sensor swapped", "--reviewer", "ann", "--db", db_path)
    assert code == 0 and out.startswith(f"{other}: not_arima (version 2")
    code, _, err = run_cli("decide", SID, "pending", "--transform", "log", "--reviewer", "ann", "--db", db_path)
    assert code == 2 and "--transform and --constant go with --order" in err

    target = tmp_path / "orders.json"
    code, out, _ = run_cli("export", "--db", db_path, "-o", target)
    assert code == 0 and "1 series marked not_arima (listed apart in the JSON)" in out
    document = json.loads(target.read_text())
    jsonschema.validate(document, SCHEMA)
    assert [(o["series_id"], o["transform"], o["include_constant"]) for o in document["orders"]] == [(SID, "log", True)]
    assert [(r["series_id"], r["note"]) for r in document["not_arima"]] == [(other, "sensor swapped")]


def test_decide_takes_the_reviewers_interventions_and_the_export_carries_them(run_cli, tmp_path):
    db_path = tmp_path / "lagdesk.db"
    values = 20.0 + np.random.default_rng(8).normal(size=N)
    values[40:] += 6.0  # a level shift at the 41st week
    run_cli("import", write_series(tmp_path / "v1.csv", values), "--db", db_path)
    assert run_cli("analyze", "--db", db_path, "--workers", 1, "--period", "none")[0] == 0
    weeks = pd.date_range("2020-01-06", periods=N, freq="W-MON").strftime("%Y-%m-%d")
    shift, odd = weeks[40], weeks[10]
    # Approving the suggestion takes out the analysis' own shift, and the line printed says so,
    # since the export hands it on with the order.
    code, out, _ = run_cli("decide", SID, "approve", "--reviewer", "ann", "--db", db_path)
    assert code == 0 and out.splitlines()[1:] == [f"  with the analysis' interventions, which the export hands on: level shift at {shift}"]
    # The engine's own shift, named again: the analysis' model, nothing of the reviewer's stored.
    code, out, _ = run_cli("decide", SID, "override", "--order", "0,0,0", "--intervention", f"{shift}=level_shift",
                           "--reviewer", "ann", "--json", "--db", db_path)
    assert code == 0 and json.loads(out)["interventions"] is None
    # With an outlier of the reviewer's as well, the set is the reviewer's, sized with the order:
    # under white noise with a mean the sizes are least squares, so the shift is the difference
    # of the means with the outlier's week left out.
    code, out, _ = run_cli("decide", SID, "override", "--order", "0,0,0", "--intervention", f"{shift}=level_shift",
                           "--intervention", f"{odd}=additive", "--reviewer", "ann", "--json", "--db", db_path)
    assert code == 0
    chosen = json.loads(out)["interventions"]
    assert [(i["timestamp"], i["kind"]) for i in chosen] == [(odd, "additive"), (shift, "level_shift")]
    before = np.r_[values[:10], values[11:40]]
    assert chosen[1]["size"] == pytest.approx(values[40:].mean() - before.mean(), rel=1e-6)
    target = tmp_path / "orders.json"
    assert run_cli("export", "--db", db_path, "-o", target)[0] == 0
    document = json.loads(target.read_text())
    jsonschema.validate(document, SCHEMA)
    # The export writes the times in ISO 8601, as it writes last_timestamp.
    assert [(i["timestamp"], i["kind"]) for i in document["orders"][0]["interventions"]] == [
        (f"{odd}T00:00:00", "additive"), (f"{shift}T00:00:00", "level_shift")]
    assert document["orders"][0]["last_timestamp"].endswith("T00:00:00")
    # The line printed names what was decided besides the orders: scale, constant, interventions.
    code, out, err = run_cli("decide", SID, "override", "--order", "0,0,0", "--no-constant", "--no-interventions", "--confirm",
                           "--reviewer", "ann", "--db", db_path)
    assert code == 0 and out.startswith(f"{SID}: overridden ARIMA(0,0,0) (without a constant, interventions: none) (version "), err
    with pytest.raises(SystemExit) as refused:  # argparse's own refusal of a malformed value
        run_cli("decide", SID, "override", "--order", "0,0,0", "--intervention", "2020-01-06", "--reviewer", "ann")
    assert refused.value.code == 2
    for wrong, words in ((["--intervention", "1999-01-04=additive"], "is not a time of this series"),
                         (["--no-interventions", "--intervention", f"{shift}=additive"], "not both")):
        code, _, err = run_cli("decide", SID, "override", "--order", "0,0,0", *wrong, "--reviewer", "ann", "--db", db_path)
        assert code == 2 and words in err, err
    code, _, err = run_cli("decide", SID, "pending", "--no-interventions", "--reviewer", "ann", "--db", db_path)
    assert code == 2 and "go with --order" in err
