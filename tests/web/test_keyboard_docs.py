"""The keys the README and the help overlay list are the keys the pages handle.

The handlers are read from the pages' scripts (``keys.X = ...`` in static/js/lagdesk.js for the
queue, ``L.keys.X = ...`` in static/js/review.js for the review page, which also registers the
digits 1-9 for the candidates); ``/``, ``?`` and Escape are handled before those tables.
"""

from __future__ import annotations

import re
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]
QUEUE_JS = (REPO / "static" / "js" / "lagdesk.js").read_text()
REVIEW_JS = (REPO / "static" / "js" / "review.js").read_text()
GLOBAL_KEYS = {"/", "?"}
DIGITS = {str(i) for i in range(1, 10)}


def handled(script: str, table: str) -> set[str]:
    return set(re.findall(rf"\b{re.escape(table)}\.(\w+) = function", script))


def readme_keyboard() -> str:
    readme = (REPO / "README.md").read_text()
    start = readme.index("- Keyboard:")
    return readme[start: readme.index("\n- ", start + 1)]


def test_the_pages_handle_keys_the_documents_can_be_checked_against():
    # The queue's j/k and the review page's n/p at least; the digits registered in a loop.
    assert {"j", "k"} <= handled(QUEUE_JS, "keys") and {"n", "p"} <= handled(REVIEW_JS, "L.keys")
    assert re.search(r"L\.keys\[key\] = function \(\) \{ pick\(key\); \}; \}\)\(String\(i\)\)", REVIEW_JS)


def test_the_readme_lists_every_handled_key_and_no_other():
    text = readme_keyboard()
    review, queue = text.split("in the queue", 1)
    documented = set(re.findall(r"`([^`]+)`", text))
    assert {"1", "9"} <= documented and "`1`–`9`" in review
    handled_keys = handled(QUEUE_JS, "keys") | handled(REVIEW_JS, "L.keys") | GLOBAL_KEYS | {"1", "9"}
    assert documented == handled_keys
    assert all(f"`{k}`" in review for k in handled(REVIEW_JS, "L.keys"))
    assert all(f"`{k}`" in queue for k in handled(QUEUE_JS, "keys"))


def test_the_help_overlay_lists_every_handled_key():
    overlay = (REPO / "templates" / "_shortcuts.html").read_text()
    shown = set(re.findall(r"<kbd>([^<]+)</kbd>", overlay))
    assert handled(QUEUE_JS, "keys") | handled(REVIEW_JS, "L.keys") | GLOBAL_KEYS | {"1", "9"} <= shown
    assert shown - (handled(QUEUE_JS, "keys") | handled(REVIEW_JS, "L.keys") | GLOBAL_KEYS | DIGITS) == {"Esc"}
