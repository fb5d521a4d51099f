"""The example consumer (demo_data/forecast_from_export.py) forecasts every exported order.

It runs as a separate process on a JSON export built here from demo series through the real
store, and reads nothing but the export and the portfolio file. Its forecasts from the exported
parameters must be the forecasts of those fitted models: they are compared with Lagdesk's own
forecasts of the same orders (:func:`app.core.backtest.forecast_order`, statsmodels' Kalman
filter), so the hand-off loses nothing on the way. The overrides are saved through the review
service with the reviewer's transform and constant, which the consumer must use; a series marked
"not an ARIMA series" must be routed elsewhere, not forecast.
"""

from __future__ import annotations

import importlib.util
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from statsmodels.tsa.arima.model import ARIMA
from threadpoolctl import threadpool_limits

import app
from app.core.backtest import forecast_order
from app.core.portfolio_file import read_portfolio
from app.jobs.order_fits import load_prepared
from app.jobs.work import SeriesTask, identify_task
from app.review.decisions import decide
from app.review.export import write_export
from app.store.analyses import save_analysis
from app.store.database import open_database
from app.store.imports import import_portfolio
from app.store.orders import decided_orders
from app.store.series import series_fingerprint
from app.store.verdicts import set_verdict

REPO = Path(app.__file__).resolve().parent.parent
CONSUMER = REPO / "demo_data" / "forecast_from_export.py"
HORIZON = 6
SHIFTED = "polarquay/chiller-4/humidity-pct"  # a level shift the engine estimates (demo_data/truth.csv)
APPROVED = ("hearthloaf/station-row/coffee-cake", "hearthloaf/station-row/monthly-sales", SHIFTED)
# order, transform and constant as the reviewer chose them
OVERRIDDEN = {"hearthloaf/chain/sugar-kg": ([0, 1, 1], "log", True), "hearthloaf/chain/oven-gas-kwh": ([0, 0, 1], "none", False)}
PENDING = "hearthloaf/chain/complaints"
NOT_ARIMA = "hearthloaf/chain/staff-hours"


@pytest.fixture(scope="module")
def exported(tmp_path_factory):
    """A store with two approved, two overridden, one pending and one not-ARIMA demo series, and
    its JSON export."""
    folder = tmp_path_factory.mktemp("consumer")
    demo = pd.read_csv(REPO / "demo_data" / "portfolio.csv", dtype=str)
    portfolio = folder / "portfolio.csv"
    demo[demo["series_id"].isin([*APPROVED, *OVERRIDDEN, PENDING, NOT_ARIMA])].to_csv(portfolio, index=False)
    db = open_database(folder / "lagdesk.db")
    import_portfolio(db, portfolio)
    with threadpool_limits(limits=1):
        for raw in read_portfolio(portfolio).series:
            result = identify_task(SeriesTask(raw.series_id, raw.values, raw.lines)).result
            save_analysis(db, raw.series_id, series_fingerprint(db, raw.series_id), result, None)
            if raw.series_id in APPROVED:
                suggested = result.suggested.order
                set_verdict(db, raw.series_id, status="approved", order=list(suggested.order),
                            seasonal_order=list(suggested.seasonal_order), transform=result.transform.to_json(),
                            reviewer="ann", version=0)
            elif raw.series_id in OVERRIDDEN:
                order, transform, constant = OVERRIDDEN[raw.series_id]
                decide(db, raw.series_id, status="overridden", order=order, seasonal_order=None, transform=transform,
                       include_constant=constant, note="", reviewer="bob", version=0, confirm=True)
            elif raw.series_id == NOT_ARIMA:
                decide(db, raw.series_id, status="not_arima", order=None, seasonal_order=None,
                       note="shift rota, not a process", reviewer="bob", version=0)
        write_export(db, folder / "orders.json", "json")
    yield db, folder, portfolio
    db.close()


def run_consumer(folder: Path, portfolio: Path, *extra: str) -> pd.DataFrame:
    output = folder / f"forecasts{''.join(extra)}.csv"
    done = subprocess.run(
        [sys.executable, str(CONSUMER), str(folder / "orders.json"), str(portfolio), str(output),
         "--horizon", str(HORIZON), *extra],
        capture_output=True, text=True, timeout=300,
    )
    assert done.returncode == 0, done.stderr
    assert "left out by the reviewers: 1 pending, 0 parked, 0 recheck" in done.stderr
    assert f"series {NOT_ARIMA!r}: not an ARIMA series (bob: shift rota, not a process); no forecast here" in done.stderr
    return pd.read_csv(output)


def test_the_consumer_forecasts_every_exported_series_as_lagdesk_fitted_it(exported):
    db, folder, portfolio = exported
    forecasts = run_consumer(folder, portfolio)
    assert sorted(set(forecasts["series_id"])) == sorted([*APPROVED, *OVERRIDDEN])
    for order in decided_orders(db):
        sid = order.record["series_id"]
        if sid in OVERRIDDEN:  # the reviewer's transform and constant, in the record and in the model
            _, transform, constant = OVERRIDDEN[sid]
            assert (order.record["transform"], order.record["include_constant"]) == (transform, constant)
            assert ({"const", "drift"} & set(order.record["parameters"]) != set()) == constant
            assert order.transform.to_json() == transform and (order.model.trend != "n") == constant
        rows = forecasts[forecasts["series_id"] == sid]
        assert rows["step"].tolist() == list(range(1, HORIZON + 1))
        prepared, _ = load_prepared(db, sid)
        expected_stamps = pd.date_range(prepared.index[-1], periods=HORIZON + 1, freq=prepared.freq)[1:]
        assert pd.to_datetime(rows["timestamp"]).tolist() == expected_stamps.tolist()
        if order.record["interventions"]:
            continue  # checked against a regression with ARIMA errors below
        reference = forecast_order(prepared.values, order.model, order.transform, HORIZON)
        np.testing.assert_allclose(rows["forecast"], reference.mean, rtol=1e-6, err_msg=sid)
        for level in (80, 95):
            lower, upper = reference.intervals[level / 100]
            np.testing.assert_allclose(rows[f"lower_{level}"], lower, rtol=1e-6, err_msg=sid)
            np.testing.assert_allclose(rows[f"upper_{level}"], upper, rtol=1e-6, err_msg=sid)


def test_the_consumer_can_refit_instead(exported):
    _, folder, portfolio = exported
    forecasts = run_consumer(folder, portfolio, "--refit")
    assert forecasts.groupby("series_id").size().to_dict() == {sid: HORIZON for sid in [*APPROVED, *OVERRIDDEN]}
    values = forecasts[["lower_95", "lower_80", "forecast", "upper_80", "upper_95"]].to_numpy()
    assert np.isfinite(values).all() and (np.diff(values, axis=1) >= 0).all()


def test_the_consumer_carries_a_level_shift_into_the_forecasts(exported):
    # The export's level shift with the order's parameters is a regression with ARIMA errors
    # (Box & Tiao 1975): statsmodels' ARIMA with the shift's step as an exogenous column,
    # filtered at the exported parameters and the shift's size as its coefficient, and the
    # step kept at 1 over the horizon, gives the same forecasts and intervals.
    db, folder, portfolio = exported
    forecasts = run_consumer(folder, portfolio)
    order = next(o for o in decided_orders(db) if o.record["series_id"] == SHIFTED)
    shifts = order.record["interventions"]
    assert [i["kind"] for i in shifts] == ["level_shift"] and order.record["transform"] == "none"
    prepared, _ = load_prepared(db, SHIFTED)
    at = prepared.index.get_loc(pd.Timestamp(shifts[0]["timestamp"]))
    step = (np.arange(prepared.n) >= at).astype(float)
    parameters = dict(order.record["parameters"])
    assert set(parameters) <= {"const", "ar.L1", "ar.L2", "ma.L1", "ma.L2", "sigma2"}
    model = ARIMA(prepared.values, exog=step, order=(order.model.p, order.model.d, order.model.q),
                  trend="c" if "const" in parameters else "n", enforce_stationarity=False, enforce_invertibility=False)
    values = {**parameters, "x1": shifts[0]["size"]}
    result = model.filter(np.array([values[name] for name in model.param_names]))
    reference = result.get_forecast(HORIZON, exog=np.ones(HORIZON))
    rows = forecasts[forecasts["series_id"] == SHIFTED]
    np.testing.assert_allclose(rows["forecast"], reference.predicted_mean, rtol=1e-6)
    lower, upper = np.asarray(reference.conf_int(alpha=0.05)).T
    np.testing.assert_allclose(rows["lower_95"], lower, rtol=1e-6)
    np.testing.assert_allclose(rows["upper_95"], upper, rtol=1e-6)


@pytest.mark.parametrize("stamps", [
    # hourly across both changes of clock in Europe/Berlin, and the same in UTC
    ["2024-03-31T00:00:00+01:00", "2024-03-31T01:00:00+01:00", "2024-03-31T03:00:00+02:00",
     "2024-10-27T02:00:00+02:00", "2024-10-27T02:00:00+01:00", "2024-10-27T03:00:00+01:00"],
    ["2024-03-30T23:00:00Z", "2024-03-31T00:00:00Z", "2024-03-31T01:00:00Z"],
    # dates at midnight keep their local date
    ["2024-03-30T00:00:00+01:00", "2024-03-31T00:00:00+02:00", "2024-04-01T00:00:00+02:00"],
    ["2024-01-01 00:00", "2024-01-01 06:00", "2024-01-01 12:00"],
    # periods without a day (found by a new user: the consumer failed on "2008 Q1")
    ["2008 Q1", "2008 Q2", "2008 Q3"], ["Q4 2008", "Q1 2009", "Q2 2009"], ["2020-W53", "2021-W01", "2021-W02"],
    ["Jan 2024", "Feb 2024", "Mar 2024"], ["2024M11", "2024M12", "2025M01"],
])
def test_the_consumer_reads_timestamps_as_lagdesk_stores_them(tmp_path, stamps):
    spec = importlib.util.spec_from_file_location("consumer", CONSUMER)
    consumer = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(consumer)
    path = tmp_path / "p.csv"
    pd.DataFrame({"series_id": "a", "timestamp": stamps, "value": range(len(stamps))}).to_csv(path, index=False)
    stored = read_portfolio(path).series[0].values.index
    assert consumer.read_timestamps(pd.Series(stamps)).tolist() == stored.tolist()
