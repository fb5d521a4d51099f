"""p-values in words: never "0.000", which reads as an impossible p of zero (common practice)."""

from __future__ import annotations

import numpy as np
import pytest

from app.core.p_values import p_text, p_words
from app.core.seasonal_stability import canova_hansen


@pytest.mark.parametrize(("p", "text", "words"), [
    (0.0, "< 0.001", "p < 0.001"), (0.00049, "< 0.001", "p < 0.001"), (0.001, "0.001", "p = 0.001"),
    (0.0412, "0.041", "p = 0.041"), (1.0, "1.000", "p = 1.000"), (float("nan"), "nan", "p = nan"),
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
