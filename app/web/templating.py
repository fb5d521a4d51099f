"""The Jinja environment of the pages: where templates and static files live, and display filters."""

from __future__ import annotations

import math
from pathlib import Path
from urllib.parse import quote

from fastapi import Request
from fastapi.templating import Jinja2Templates
from jinja2 import Environment, FileSystemLoader, StrictUndefined, pass_context
from markupsafe import Markup

import app
from app.core.order import order_label
from app.core.p_values import p_text
from app.core.prepare import frequency_words
from app.core.series_ids import visible
from app.core.vocabulary import SAFETY_CAUTION, flag_words, reason_words
from app.store.series import FLAG_SEVERITY
from app.web.deps import get_reviewer
from app.web.security import CSRF_FIELD, csrf_token

# templates/ and static/ sit beside the package, found from its location, not the working directory.
PROJECT_DIR = Path(app.__file__).resolve().parent.parent
TEMPLATES_DIR = PROJECT_DIR / "templates"
STATIC_DIR = PROJECT_DIR / "static"


def freq_words(freq: str | None) -> str:
    """A stored frequency code in the few words of a list column (``W-SUN`` -> weekly):
    :func:`app.core.prepare.frequency_words` without the anchor."""
    return frequency_words(freq, anchored=False) if freq else ""


def when(timestamp: str | None) -> str:
    """A stored timestamp for reading: no midnight time, no seconds, no 'T'."""
    if not timestamp:
        return ""
    text = str(timestamp).replace("T", " ")
    if text.endswith(" 00:00:00"):
        return text[:-9]
    return text[:16]


def significant(value: float | None, digits: int = 4) -> str:
    """A parameter estimate: ``digits`` significant digits (estimates range over many magnitudes).

    A value of ``10 ** digits`` or more is written whole with thousands separators (a variance
    of 2,010 rather than "2.01e+03"); only tiny values keep an exponent."""
    if value is None or not isinstance(value, (int, float)) or not math.isfinite(value):
        return "—"
    if abs(value) >= 10**digits:
        return f"{value:,.0f}"
    return f"{value:.{digits}g}"


def number(value: float | None, digits: int = 2) -> str:
    """A statistic for a table: fixed decimals, an em dash for a missing or infinite value."""
    if value is None or not isinstance(value, (int, float)) or not math.isfinite(value):
        return "—"
    return f"{value:.{digits}f}"


def p_value(value: float | None) -> str:
    """A p-value for a table cell: three decimals, ``< 0.001`` below that (never "0.000", which
    reads as an impossible p of zero), an em dash for a missing one."""
    if value is None or not math.isfinite(value):
        return "—"
    return p_text(value)


def percent(share: float | None) -> str:
    """A share (0 to 1) as a whole percentage: ``0.8 -> "80%"``."""
    if share is None or not math.isfinite(share):
        return "—"
    return f"{100 * share:.0f}%"


def quote_path(series_id: str) -> str:
    """A series id for a URL path: percent-encoded, its slashes kept (routes take ``{series_id:path}``)."""
    return quote(series_id, safe="/")


# Each weight of app.store.series.FLAG_SEVERITY, for the help overlay.
SEVERITY_WORDS = {3: "most (they make a suggestion weak)", 2: "more (they keep it from firm)",
                  1: "least (they say how the series was read)"}


def _severity_tiers() -> list[tuple[str, list[str]]]:
    """The flags of each weight in the attention order, heaviest first, with the weight in words."""
    weights = sorted(set(FLAG_SEVERITY.values()), reverse=True)
    return [(SEVERITY_WORDS[w], sorted(f for f, weight in FLAG_SEVERITY.items() if weight == w)) for w in weights]


@pass_context
def url_for(context: dict, name: str, /, **path_params) -> str:
    """The path of a route or static file, without scheme and host: the pages link only to the
    server that sent them, whatever name the browser used to reach it."""
    return context["request"].app.url_path_for(name, **path_params)


@pass_context
def csrf_field(context: dict) -> Markup:
    """The hidden CSRF field every state-changing form carries (see :mod:`app.web.security`)."""
    return Markup('<input type="hidden" name="{}" value="{}">').format(CSRF_FIELD, csrf_token(context["request"]))


def _environment() -> Environment:
    env = Environment(loader=FileSystemLoader(TEMPLATES_DIR), autoescape=True, undefined=StrictUndefined)
    env.filters.update(number=number, p_value=p_value, percent=percent, flag_words=flag_words, reason_words=reason_words, quote_path=quote_path,
                       freq_words=freq_words, when=when, significant=significant, visible=visible)
    env.globals.update(order_label=order_label, url_for=url_for,
                       csrf_field=csrf_field, severity_tiers=_severity_tiers(), safety_caution=SAFETY_CAUTION)
    return env


def _page_globals(request: Request) -> dict:
    """What every page needs: the reviewer remembered in this browser."""
    return {"reviewer": get_reviewer(request)}


templates = Jinja2Templates(env=_environment(), context_processors=[_page_globals])
