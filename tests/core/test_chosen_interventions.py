"""Interventions a reviewer names: placed by time stamp and sized jointly with the order.

The sizes are checked against statsmodels' ARIMA with the same intervention columns as
exogenous regressors (regression with ARMA errors by exact maximum likelihood; Box & Tiao 1975
for the intervention model), on the annual Nile flow, whose drop after the Aswan dam works of
1898-1899 is the textbook level shift (Cobb 1978; Balke 1993).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from statsmodels.datasets import nile
from statsmodels.tsa.arima.model import ARIMA

from app.core.analysis import Intervention
from app.core.chosen_interventions import place_interventions, relocated
from app.core.errors import OrderError
from app.core.interventions import effect_column, sized_interventions
from app.core.order import validate_order
from app.core.vocabulary import InterventionKind


@pytest.fixture(scope="module")
def flow() -> pd.Series:
    data = nile.load_pandas().data
    return pd.Series(data["volume"].to_numpy(float), index=pd.to_datetime(data["year"].astype(int).astype(str)))


@pytest.mark.parametrize("kind", list(InterventionKind))
def test_the_joint_size_equals_statsmodels_arima_with_the_column_as_regressor(flow, kind):
    index, y = flow.index, flow.to_numpy()
    placed = place_interventions("nile", index, y, [{"timestamp": "1899-01-01", "kind": str(kind)}])
    assert placed == [(28, kind)]
    model = validate_order([1, 0, 1], None)  # a mean, as the engine gives an undifferenced order
    found = sized_interventions(y, model, placed, index)[0]
    reference = ARIMA(y, exog=effect_column(kind, 28, y.size), order=(1, 0, 1), trend="c").fit(cov_type="approx")
    # The likelihood is flat along the size near the optimum: the engine's optimum is as high as
    # statsmodels' or higher (by up to 0.005 here), and the sizes agree to a fraction of a per cent.
    assert found.size == pytest.approx(reference.params[1], rel=1e-2)
    # t from the inverse Hessian in both (statsmodels' numerical one, cov_type="approx"; ours by
    # central differences of the profile likelihood, whose inverse is the matching block of the
    # full one): the same up to differencing error.
    assert found.t_stat == pytest.approx(reference.tvalues[1], rel=0.05)
    assert found.timestamp == "1899-01-01" and found.kind is kind


def test_the_level_shift_of_the_nile_is_large_and_clear(flow):
    index, y = flow.index, flow.to_numpy()
    placed = place_interventions("nile", index, y, [{"timestamp": "1899-01-01", "kind": "level_shift"}])
    found = sized_interventions(y, validate_order([0, 0, 0], None), placed, index)[0]
    # Cobb (1978) and Balke (1993) put the drop near 250 (10^8 m^3 a year): means of 1097 before
    # and 850 after 1899 (computed here from the data themselves).
    assert found.size == pytest.approx(y[28:].mean() - y[:28].mean(), rel=1e-6)
    assert found.t_stat < -8


@pytest.mark.parametrize(("item", "words"), [
    ({"timestamp": "1700-01-01", "kind": "additive"}, "is not a time of this series (1871-01-01 to 1970-01-01)"),
    ({"timestamp": "1899-01-01", "kind": "spike"}, "kind must be one of additive, level_shift, temporary_change"),
    ({"timestamp": "", "kind": "additive"}, "needs a time stamp"),
    ({"timestamp": "1880-01-01", "kind": "additive"}, "is a missing value"),
])
def test_a_chosen_intervention_that_does_not_fit_the_series_is_refused_by_name(flow, item, words):
    y = flow.to_numpy().copy()
    y[9] = np.nan  # 1880
    with pytest.raises(OrderError, match=r"series 'nile': .*") as error:
        place_interventions("nile", flow.index, y, [item])
    assert words in str(error.value)


def test_the_same_intervention_twice_or_too_many_are_refused(flow):
    y = flow.to_numpy()
    twice = [{"timestamp": "1899-01-01", "kind": "additive"}] * 2
    with pytest.raises(OrderError, match="given twice"):
        place_interventions("nile", flow.index, y, twice)
    many = [{"timestamp": str(stamp.date()), "kind": "additive"} for stamp in flow.index[:11]]
    with pytest.raises(OrderError, match="more than 10"):
        place_interventions("nile", flow.index, y, many)


def test_a_stored_intervention_follows_its_time_when_earlier_data_arrive(flow):
    stored = Intervention(28, "1899-01-01", InterventionKind.LEVEL_SHIFT, -250.0, -9.0)
    later = flow.index[5:]  # the series now starts in 1876: 1899 is at position 23
    assert relocated("nile", later, [stored])[0].position == 23
    with pytest.raises(OrderError, match="no longer a time of this series"):
        relocated("nile", flow.index[30:], [stored])


def test_an_hourly_intervention_at_midnight_keeps_its_hour_and_older_stamps_still_match():
    # Found by a new user: "level shift at 2024-03-10" on an hourly series, where every other
    # stamp reads with its hour. Stored results written that way must still find their hour.
    index = pd.date_range("2024-03-09 12:00", periods=48, freq="h")
    y = np.random.default_rng(4).standard_normal(48) + 5.0 * (np.arange(48) >= 12)
    placed = place_interventions("h", index, y, [{"timestamp": "2024-03-10 00:00", "kind": "level_shift"}])
    [found] = sized_interventions(y, validate_order([0, 0, 0], None), placed, index)
    assert (found.position, found.timestamp) == (12, "2024-03-10 00:00")
    later = index[2:]  # the data now start two hours later: each kept at its time
    older = Intervention(12, "2024-03-10", InterventionKind.LEVEL_SHIFT, found.size, found.t_stat)
    assert [i.position for i in relocated("h", later, [found, older])] == [10, 10]
