"""The example consumer (demo_data/forecast_from_export.py) forecasts every exported order.

It runs as a separate process on a JSON export built here from demo series through the real
store, and reads nothing but the export and the portfolio file. Its forecasts from the exported
parameters must be the forecasts of those fitted models: they are compared with Lagdesk's own
forecasts of the same orders (:func:`app.core.backtest.forecast_order`, statsmodels' Kalman
filter), so the hand-off loses nothing on the way.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from threadpoolctl import threadpool_limits

import app
from app.core.backtest import forecast_order
from app.core.portfolio_file import read_portfolio
from app.jobs.order_fits import load_prepared
from app.jobs.work import SeriesTask, identify_task
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
APPROVED = ("hearthloaf/station-row/coffee-cake", "hearthloaf/station-row/monthly-sales")
OVERRIDDEN = {"hearthloaf/chain/sugar-kg": ([0, 1, 1], "log"), "hearthloaf/chain/oven-gas-kwh": ([0, 0, 1], "none")}
PENDING = "hearthloaf/chain/complaints"


@pytest.fixture(scope="module")
def exported(tmp_path_factory):
    """A store with two approved, two overridden and one pending demo series, and its JSON export."""
    folder = tmp_path_factory.mktemp("consumer")
    demo = pd.read_csv(REPO / "demo_data" / "portfolio.csv", dtype=str)
    portfolio = folder / "portfolio.csv"
    demo[demo["series_id"].isin([*APPROVED, *OVERRIDDEN, PENDING])].to_csv(portfolio, index=False)
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
                order, transform = OVERRIDDEN[raw.series_id]
                set_verdict(db, raw.series_id, status="overridden", order=order, seasonal_order=[0, 0, 0, 0],
                            transform=transform, reviewer="bob", version=0)
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
    return pd.read_csv(output)


def test_the_consumer_forecasts_every_exported_series_as_lagdesk_fitted_it(exported):
    db, folder, portfolio = exported
    forecasts = run_consumer(folder, portfolio)
    assert sorted(set(forecasts["series_id"])) == sorted([*APPROVED, *OVERRIDDEN])
    for order in decided_orders(db):
        sid = order.record["series_id"]
        rows = forecasts[forecasts["series_id"] == sid]
        assert rows["step"].tolist() == list(range(1, HORIZON + 1))
        prepared, _ = load_prepared(db, sid)
        expected_stamps = pd.date_range(prepared.index[-1], periods=HORIZON + 1, freq=prepared.freq)[1:]
        assert pd.to_datetime(rows["timestamp"]).tolist() == expected_stamps.tolist()
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
