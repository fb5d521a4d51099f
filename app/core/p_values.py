"""p-values in words, the same on every page, table and message.

Three decimals, ``< 0.001`` below that and ``> 0.999`` above: a printed "0.000" or "1.000"
reads as a p-value of zero or one, which no test gives (common practice; the American
Psychological Association's style rules ask for the same).

A test that reads its p-value off a table of critical values cannot give one beyond the table's
ends: statsmodels' ``kpss`` interpolates between its p-values 0.10, 0.05, 0.025 and 0.01 and
returns the nearer end, with an ``InterpolationWarning``, for a statistic outside the table
(``statsmodels.tsa.stattools.kpss``, read in the source of statsmodels 0.15.0). Such a p-value
is a bound and reads as one: ``> 0.10``, ``< 0.01`` (:data:`TABLE_ENDS`).
"""

from __future__ import annotations

import math

P_FLOOR = 0.001
# The p-values of a test, by its name (app.core.analysis.UnitRootTest.name), that statsmodels
# clips to the ends of its table of critical values: (lowest, highest).
TABLE_ENDS = {"KPSS": (0.01, 0.10)}


def p_text(p: float, test: str = "") -> str:
    """``0.004``, ``< 0.001`` or ``> 0.999``; ``nan`` for a p-value that is not a number.

    The p-value of a ``test`` whose p-values are clipped to a table (:data:`TABLE_ENDS`) reads
    as the bound it is at either end: ``> 0.10``, ``< 0.01``."""
    if not math.isfinite(p):
        return "nan"
    if test in TABLE_ENDS:
        lowest, highest = TABLE_ENDS[test]
        if p >= highest:
            return f"> {highest:.2f}"
        if p <= lowest:
            return f"< {lowest:.2f}"
    if p < P_FLOOR:
        return f"< {P_FLOOR}"
    text = f"{p:.3f}"
    return f"> {1 - P_FLOOR:.3f}" if text == f"{1:.3f}" else text


def p_words(p: float, test: str = "", level: float | None = None) -> str:
    """``p = 0.004``, ``p < 0.001``, or for a test whose p-values are clipped to a table, ``p > 0.10``.

    Beside a ``level`` it is compared with, a p-value that three decimals would round onto the
    level's own digits gets as many more as tell them apart (``p = 0.1566`` below the 15.7%
    level, not ``p = 0.157`` "below" it)."""
    text = p_text(p, test)
    if level is not None and text[0] not in "<>" and p != level:
        digits = 3
        while f"{p:.{digits}f}" == f"{level:.{digits}f}" and digits < 8:
            digits += 1
        text = f"{p:.{digits}f}"
    return f"p {text}" if text[0] in "<>" else f"p = {text}"
