"""The real series of the forecast benchmark (tests/benchmarks/real_series.py): the default 77
stay the published ones, and the second set (:func:`more_series`) keeps the rules of that
module's notes."""

import sys
from collections import Counter
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

sys.path.insert(0, str(Path(__file__).parent / "benchmarks"))
from real_series import MAX_LENGTH, MAX_MODE_SHARE, MIN_LENGTH, PERIODS, RealSeries, is_copy, more_series, real_series  # noqa: E402

# Kept aside for independent checks, or forecasting-textbook and competition collections.
EXCLUDED_PACKAGES = {"fpp", "fpp2", "fpp3", "fma", "expsmooth", "Mcomp", "Tcomp", "tscompdata"}
PANDAS_FREQ = {"monthly": "MS", "quarterly": "QS-JAN", "daily": "D", "yearly": "YS-JAN", "hourly": "h"}
MAX_PER_TABLE = 6


@pytest.fixture(scope="module")
def default() -> list[RealSeries]:
    return real_series()


@pytest.fixture(scope="module")
def more() -> list[RealSeries]:
    return more_series()


def _package(entry: RealSeries) -> str:
    return entry.name.split("/", 1)[0]


def test_the_default_set_is_still_the_published_77(default):
    assert len(default) == 77
    assert (default[0].name, default[-1].name) == ("datasets/AirPassengers", "nycflights13/weather:JFK")


def test_the_second_set_has_the_size_and_frequencies_its_notes_give(more):
    assert len(more) == 133
    assert Counter(e.frequency for e in more) == {"monthly": 80, "quarterly": 22, "weekly": 19, "daily": 12}
    order = ["monthly", "quarterly", "weekly", "daily"]
    assert [e.frequency for e in more] == sorted((e.frequency for e in more), key=order.index)


def test_names_are_unique_across_both_sets_and_no_series_is_in_both(default, more):
    names = [e.name for e in default + more]
    assert len(set(names)) == len(names)
    assert not {e.name for e in default} & {e.name for e in more}


@pytest.mark.parametrize("which", ["default", "more"])
def test_every_series_is_regular_long_enough_finite_and_from_an_allowed_package(which, request):
    for entry in request.getfixturevalue(which):
        v = entry.values
        assert isinstance(v.index, pd.DatetimeIndex), entry.name
        expected = PANDAS_FREQ.get(entry.frequency)
        freq = v.index.freqstr
        assert freq == expected if expected else freq.startswith("W-"), (entry.name, freq)
        assert v.index.equals(pd.date_range(v.index[0], periods=len(v), freq=freq)), entry.name
        assert MIN_LENGTH <= len(v) <= MAX_LENGTH[entry.frequency], (entry.name, len(v))
        assert np.isfinite(v.to_numpy(dtype=float)).all(), entry.name
        assert entry.period == PERIODS[entry.frequency] and v.name == entry.name
        assert _package(entry) not in EXCLUDED_PACKAGES and not any(p in entry.source.split() for p in EXCLUDED_PACKAGES), entry.name
        assert v.value_counts().iloc[0] <= MAX_MODE_SHARE * len(v), entry.name


def test_the_second_set_keeps_its_selection_rules(default, more):
    for entry in more:
        assert entry.frequency in {"monthly", "quarterly", "weekly", "daily"}, entry.name
        assert _package(entry) != "forecast" and entry.derivation, entry.name
    # Rule 7: at most six series from one table, the default set's counted.
    per_table = Counter(e.source for e in default + more)
    assert all(per_table[e.source] <= MAX_PER_TABLE for e in more)
    # Rule 6(b): no series of the second set copies one before it (the 77 first).
    earlier = list(default)
    for entry in more:
        copies = [e.name for e in earlier if is_copy(entry, e)]
        assert not copies, (entry.name, copies)
        earlier.append(entry)


def test_a_copy_is_found_in_another_table_and_a_related_series_is_not(default):
    by_name = {e.name: e for e in default}
    deaths = by_name["datasets/ldeaths"]
    rescaled = RealSeries("x", "invented", "monthly", 12, "ldeaths in hundreds", deaths.values / 100)
    assert is_copy(rescaled, deaths)
    # The same calendar cycle alone does not make a copy: nottem (temperature) against ldeaths.
    shifted = by_name["datasets/nottem"].values
    other = RealSeries("y", "invented", "monthly", 12, "nottem moved onto ldeaths' dates",
                       pd.Series(shifted.to_numpy()[: len(deaths.values)], index=deaths.values.index))
    assert not is_copy(other, deaths)
