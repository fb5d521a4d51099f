"""Who may reach the dashboard, and what a request may carry.

* **Access token.** A server bound to anything but the loopback interface must be started with
  an access token (:func:`require_token_off_loopback`). Every request then carries it: browsers
  as the ``lagdesk_token`` cookie set by the login page, scripts as the ``X-Lagdesk-Token``
  header. A state-changing API call needs the header: a cookie alone would let any web page the
  reviewer visits post to the API in their name. Tokens are compared in constant time.
* **Forms.** Every state-changing page request carries a CSRF token (the ``csrf_token`` form
  field, or the ``X-CSRF-Token`` header) equal to the ``lagdesk_csrf`` cookie the server set
  (the double-submit pattern): another site can make a browser post a form here but cannot read
  the cookie to copy it. A state-changing request whose ``Origin`` is another site is refused
  outright, on the API too, which protects a loopback server that has no token.
* **Bodies.** A request body larger than the upload limit is refused with 413 from its
  ``Content-Length`` before a byte is read; a body without a length is refused with 411.

References
----------
OWASP Cross-Site Request Forgery Prevention Cheat Sheet: "Signed Double-Submit Cookie" and
"Verifying Origin With Standard Headers".
"""

from __future__ import annotations

import hmac
import ipaddress
import json
import secrets
from urllib.parse import quote, urlsplit

from fastapi import Request
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from app.config import Settings
from app.core.errors import LagdeskError

TOKEN_HEADER = "x-lagdesk-token"
TOKEN_COOKIE = "lagdesk_token"
TOKEN_ENV_VAR = "LAGDESK_TOKEN"
GENERATE = "generate"
CSRF_COOKIE = "lagdesk_csrf"
CSRF_FIELD = "csrf_token"
CSRF_HEADER = "x-csrf-token"
LOGIN_PATH = "/login"
# Reachable without the token: the login page and the files it needs.
OPEN_PREFIXES = (LOGIN_PATH, "/static/")
API_PREFIXES = ("/api/", "/openapi.json")
SAFE_METHODS = frozenset({"GET", "HEAD", "OPTIONS"})
# The multipart envelope around an uploaded file (boundaries, part headers, form fields).
FORM_ENVELOPE_BYTES = 64 * 1024


class ExposedWithoutToken(LagdeskError):
    """A server asked to listen beyond this machine without an access token."""


class CsrfRejected(LagdeskError):
    """A form post without the CSRF token of this browser."""

    http_status = 403


def is_loopback(host: str) -> bool:
    """True for ``localhost`` and addresses of the loopback range (127.0.0.0/8, ::1)."""
    if host.lower() == "localhost":
        return True
    try:
        return ipaddress.ip_address(host.strip("[]")).is_loopback
    except ValueError:
        return False


def generate_token() -> str:
    """A fresh random access token (256 bits, URL-safe)."""
    return secrets.token_urlsafe(32)


def tokens_match(given: str | None, expected: str) -> bool:
    """Constant-time comparison, so response times do not reveal how much of a guess was right."""
    return given is not None and hmac.compare_digest(given.encode(), expected.encode())


def require_token_off_loopback(settings: Settings) -> None:
    """Refuse to serve beyond this machine without an access token.

    Raises
    ------
    ExposedWithoutToken
        When ``settings.host`` is not a loopback address and no token is set.
    """
    if not is_loopback(settings.host) and not settings.access_token:
        raise ExposedWithoutToken(
            f"--host {settings.host} lets other machines reach the dashboard; give an access token "
            f"(--token TOKEN, ${TOKEN_ENV_VAR}, or --token {GENERATE}) or serve on 127.0.0.1"
        )


def csrf_token(request: Request) -> str:
    """The CSRF token of this browser, for the hidden field of every form."""
    return request.scope["state"]["csrf_token"]


async def check_csrf(request: Request) -> None:
    """Dependency of the page routes: a state-changing request must carry this browser's CSRF token.

    Raises
    ------
    CsrfRejected
        When the form field (or header) is missing or differs from the cookie.
    """
    if request.method in SAFE_METHODS:
        return
    given = request.headers.get(CSRF_HEADER)
    if given is None and request.headers.get("content-type", "").startswith(
        ("application/x-www-form-urlencoded", "multipart/form-data")
    ):
        field = (await request.form()).get(CSRF_FIELD)
        given = field if isinstance(field, str) else None
    cookie = request.cookies.get(CSRF_COOKIE)
    if not cookie or not isinstance(given, str) or not tokens_match(given, cookie):
        raise CsrfRejected("the form is missing its security token (or it has expired); reload the page and try again")


def safe_next(target: str | None) -> str:
    """A local path to go back to after logging in (never another host)."""
    if target and target.startswith("/") and not target.startswith("//") and "\\" not in target:
        return target
    return "/"


class AccessGuard:
    """ASGI middleware enforcing the access token, the origin check, the body limit, and giving
    each browser its CSRF cookie (see the module docstring)."""

    def __init__(self, app: ASGIApp, settings: Settings) -> None:
        self.app = app
        self.token = settings.access_token
        self.max_body = settings.max_upload_bytes + FORM_ENVELOPE_BYTES

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        request = Request(scope)
        refusal = self._refusal(request)
        if refusal is not None:
            await _respond(send, *refusal, api=_is_api(request.url.path))
            return
        existing = request.cookies.get(CSRF_COOKIE)
        token = existing or secrets.token_urlsafe(32)
        scope.setdefault("state", {})["csrf_token"] = token
        if existing:
            await self.app(scope, receive, send)
            return

        async def send_with_cookie(message: Message) -> None:
            if message["type"] == "http.response.start":
                cookie = f"{CSRF_COOKIE}={token}; Path=/; HttpOnly; SameSite=Strict"
                message["headers"] = [*message.get("headers", []), (b"set-cookie", cookie.encode())]
            await send(message)

        await self.app(scope, receive, send_with_cookie)

    def _refusal(self, request: Request) -> tuple[int, str, dict] | None:
        """``(status, message, extra headers)`` when the request may not go on, else None."""
        unsafe = request.method not in SAFE_METHODS
        if unsafe and _cross_site(request):
            return 403, "requests from another site are refused", {}
        length = request.headers.get("content-length")
        if unsafe and length is None and "chunked" in request.headers.get("transfer-encoding", ""):
            return 411, "a request body needs a Content-Length", {}
        if length is not None and (not length.isdigit() or int(length) > self.max_body):
            limit = (self.max_body - FORM_ENVELOPE_BYTES) // (1024 * 1024)
            return 413, f"the request is larger than the upload limit of {limit} MiB", {}
        if self.token is None or request.url.path.startswith(OPEN_PREFIXES):
            return None
        if tokens_match(request.headers.get(TOKEN_HEADER), self.token):
            return None
        if _is_api(request.url.path):
            if unsafe and tokens_match(request.cookies.get(TOKEN_COOKIE), self.token):
                return 401, f"state-changing API calls need the {TOKEN_HEADER} header, not only the cookie", {}
            if not unsafe and tokens_match(request.cookies.get(TOKEN_COOKIE), self.token):
                return None
            return 401, f"this server needs its access token in the {TOKEN_HEADER} header", {}
        if tokens_match(request.cookies.get(TOKEN_COOKIE), self.token):
            return None
        if unsafe:
            return 401, "log in with the access token first", {}
        target = request.url.path + (f"?{request.url.query}" if request.url.query else "")
        return 303, "log in with the access token first", {"location": f"{LOGIN_PATH}?next={quote(target, safe='')}"}


def _is_api(path: str) -> bool:
    return path.startswith(API_PREFIXES)


def _cross_site(request: Request) -> bool:
    origin = request.headers.get("origin")
    if origin is None:  # not sent by a browser (scripts), or an old browser on the same site
        return False
    return urlsplit(origin).netloc != request.headers.get("host", "")


async def _respond(send: Send, status: int, message: str, headers: dict, api: bool) -> None:
    if api:
        body, kind = json.dumps({"detail": message}).encode(), b"application/json"
    else:
        body, kind = message.encode(), b"text/plain; charset=utf-8"
    raw_headers = [(b"content-type", kind), (b"content-length", str(len(body)).encode())]
    raw_headers += [(name.encode(), value.encode()) for name, value in headers.items()]
    await send({"type": "http.response.start", "status": status, "headers": raw_headers})
    await send({"type": "http.response.body", "body": body})
