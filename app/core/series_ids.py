"""What a series id may be.

An id is shown in pages, terminals and URLs (``/series/shop-3/bread``, its slashes kept so that
ids group by prefix) and exported to a forecasting job, so it must survive all of them
unchanged: no control or format characters (a newline made a series unreachable, an escape
sequence rewrote the terminal, a direction mark reorders what is shown), no path segment a
browser or a file system resolves (an empty one, ``.`` or ``..``: ``a/../b`` opened ``b``),
no last part that names a page of a series (``shop-3/compare`` could not be opened: its URL is
the comparison page of ``shop-3``), and a length a person can read.
"""

from __future__ import annotations

import unicodedata

MAX_ID_LENGTH = 200
# Control (Cc), format (Cf: zero-width and direction marks), surrogate (Cs), line and
# paragraph separator (Zl, Zp) characters.
_UNSAFE_CATEGORIES = frozenset({"Cc", "Cf", "Cs", "Zl", "Zp"})
_RESOLVED_SEGMENTS = frozenset({"", ".", ".."})
# The pages the dashboard serves after a series' own URL (app/web/routes; a test keeps the two
# lists equal).
PAGE_WORDS = frozenset({"backtest", "compare", "forecast-check"})
_CONTROL_NAMES = {"\n": "line feed", "\r": "carriage return", "\t": "tab", "\x1b": "escape", "\x00": "NUL"}


def id_problem(series_id: str) -> str | None:
    """Why ``series_id`` cannot be a series id, or None when it can (it is expected stripped)."""
    if not series_id:
        return "the series id is empty"
    if len(series_id) > MAX_ID_LENGTH:
        return f"the series id has {len(series_id):,} characters; at most {MAX_ID_LENGTH} are accepted"
    unsafe = next((c for c in series_id if unicodedata.category(c) in _UNSAFE_CATEGORIES), None)
    if unsafe is not None:
        return f"the series id contains the control character U+{ord(unsafe):04X} ({_character_name(unsafe)})"
    if any(segment in _RESOLVED_SEGMENTS for segment in series_id.split("/")):
        return "the series id has an empty, '.' or '..' part between slashes (it would not survive a URL)"
    last = series_id.rsplit("/", 1)[-1]
    if "/" in series_id and last in PAGE_WORDS:
        return f"the series id ends in '/{last}', the address of a page of the series before it; rename that part"
    return None


def _character_name(character: str) -> str:
    return _CONTROL_NAMES.get(character) or unicodedata.name(character, "unnamed").lower()


def printable(text: str, keep: str = "") -> str:
    """``text`` without the characters an id may not hold (control, format, surrogate and
    separator characters), except those in ``keep``: for reviewer names and notes, which are
    shown and exported as ids are."""
    return "".join(c for c in text if c in keep or unicodedata.category(c) not in _UNSAFE_CATEGORIES)


def visible(text: str) -> str:
    """``text`` safe to show on a terminal or a page: each character that is not printable (the
    escape that starts a terminal control sequence, a newline, a direction mark) written as its
    Python escape (``\\x1b``, ``\\u202e``), so a series id or a cell can neither rewrite the
    screen, break a line, nor turn the text around it."""
    if text.isprintable():
        return text
    return "".join(c if c.isprintable() else c.encode("unicode_escape").decode("ascii") for c in text)
