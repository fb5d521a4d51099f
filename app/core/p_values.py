"""p-values in words, the same on every page, table and message.

Three decimals, and ``< 0.001`` below that: a printed "0.000" reads as a p-value of zero, which
no test gives (common practice; the American Psychological Association's style rules ask for
the same).
"""

from __future__ import annotations

import math

P_FLOOR = 0.001


def p_text(p: float) -> str:
    """``0.004`` or ``< 0.001``; ``nan`` for a p-value that is not a number."""
    if not math.isfinite(p):
        return "nan"
    return f"< {P_FLOOR}" if p < P_FLOOR else f"{p:.3f}"


def p_words(p: float) -> str:
    """``p = 0.004`` or ``p < 0.001``."""
    text = p_text(p)
    return f"p {text}" if text.startswith("<") else f"p = {text}"
