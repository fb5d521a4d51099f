"""p-values in words: never "0.000", which reads as an impossible p of zero (common practice)."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from statsmodels.tools.sm_exceptions import InterpolationWarning
from statsmodels.tsa.stattools import kpss

from app.core.p_values import TABLE_ENDS, p_text, p_words
from app.core.seasonal_stability import canova_hansen
from app.core.stationarity import kpss_test


@pytest.mark.parametrize(("p", "text", "words"), [
    (0.0, "< 0.001", "p < 0.001"), (0.00049, "< 0.001", "p < 0.001"), (0.001, "0.001", "p = 0.001"),
    (0.0412, "0.041", "p = 0.041"), (1.0, "> 0.999", "p > 0.999"), (0.9994, "0.999", "p = 0.999"), (float("nan"), "nan", "p = nan"),
])
def test_p_values_read_with_three_decimals_and_a_floor(p, text, words):
    assert p_text(p) == text
    assert p_words(p) == words


def test_an_engine_sentence_with_a_tiny_p_value_says_so():
    rng = np.random.default_rng(7)
    # A seasonal random walk (Canova & Hansen 1995, §2: the alternative of wandering seasonal
    # means): the test rejects with a p-value far below 0.001 at this length.
    walk = np.zeros(480)
    shocks = rng.standard_normal(480)
    for t in range(12, 480):
        walk[t] = walk[t - 12] + shocks[t]
    words = canova_hansen(walk, 12).words()
    assert "p < 0.001" in words and "0.000" not in words


def test_a_kpss_p_value_clipped_to_the_ends_of_its_table_reads_as_a_bound():
    rng = np.random.default_rng(11)
    noise, walk = rng.standard_normal(200), np.cumsum(rng.standard_normal(200))
    # statsmodels' kpss clips the p-value at the ends of its table and warns that the true one lies beyond.
    for x, end in ((noise, 0.10), (walk, 0.01)):
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            assert kpss(x, regression="c", nlags="auto", result_object=True).pvalue == end
        assert any(issubclass(w.category, InterpolationWarning) for w in caught)
    assert TABLE_ENDS["KPSS"] == (0.01, 0.10)
    steady, wandering = kpss_test(noise, "c", "levels"), kpss_test(walk, "c", "levels")
    assert (p_text(steady.p_value, steady.name), p_words(steady.p_value, steady.name)) == ("> 0.10", "p > 0.10")
    assert (p_text(wandering.p_value, wandering.name), p_words(wandering.p_value, wandering.name)) == ("< 0.01", "p < 0.01")
    # Inside the table a KPSS p-value reads as any other; another test's 0.10 is not a bound.
    assert (p_text(0.05, "KPSS"), p_text(0.1, "ADF"), p_text(0.1)) == ("0.050", "0.100", "0.100")


@pytest.mark.parametrize(("p", "level", "words"), [
    (0.1566, 0.157, "p = 0.1566"),  # "p = 0.157, below the 15.7% level" read as a contradiction
    (0.15699, 0.157, "p = 0.15699"),
    (0.0401, 0.05, "p = 0.040"),  # three decimals tell it from the level: nothing added
    (0.0004, 0.05, "p < 0.001"),
])
def test_a_p_value_beside_its_level_gets_the_digits_that_tell_them_apart(p, level, words):
    assert p_words(p, level=level) == words
