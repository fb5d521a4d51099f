"""Who may reach the dashboard, and what a request may carry.

* **Host.** A request is answered only when its ``Host`` header is one this server answers to
  (:class:`HostAllowList`): 127.0.0.1, localhost and [::1] on the configured port, the
  configured ``host``, and ``Settings.allowed_hosts``; any other gets 400. A page of another site
  whose name its owner made resolve to 127.0.0.1 (DNS rebinding) shares an origin with nothing
  here, yet its requests reach this server; only the name they carry gives them away. A server
  listening on every interface (0.0.0.0, ::), which needs an access token, answers to any name:
  the names a machine is reached by cannot be listed, and the token keeps strangers out.
* **Access token.** A server bound to anything but the loopback interface must be started with
  an access token (:func:`require_token_off_loopback`). Every request then carries it: browsers
  as the ``lagdesk_token`` cookie set by the login page, scripts as the ``X-Lagdesk-Token``
  header. A state-changing API call needs the header: a cookie alone would let any web page the
  reviewer visits post to the API in their name. Tokens are compared in constant time.
* **Other sites.** A state-changing request whose ``Origin`` is not in the host allow-list is
  refused (403), and so is any request a browser marks as sent for another site
  (``Sec-Fetch-Site``) unless it is the top-level page a link opens: an ``<img>``, a frame or a
  script elsewhere cannot make this server compute a forecast check.
* **CSRF.** Every state-changing request carries a CSRF token equal to the ``lagdesk_csrf``
  cookie the server set (the double-submit pattern): another site can make a browser send a
  request here but cannot read the cookie to copy it. The token is signed (a random part and
  its HMAC-SHA256 under a key this server process draws at start), and a cookie whose
  signature fails is replaced, not trusted: cookies are not kept apart by port, so a program
  serving another port of this machine could set the cookie to a value it also puts in a form
  (a server attack showed a forged pair accepted). After a restart, a page open from before
  gets one refusal asking to reload. Page forms send it as the ``csrf_token``
  field (or the header); the API needs the ``X-CSRF-Token`` header, which a cross-site form
  cannot send at all. A script gets the token and the cookie from ``GET /api/csrf``; a call
  carrying the access token in its ``X-Lagdesk-Token`` header needs no CSRF token, as no
  browser adds that header by itself.
* **Bodies.** Limits of size, framing and time: :mod:`app.web.limits`.

References
----------
OWASP Cross-Site Request Forgery Prevention Cheat Sheet: "Double-Submit Cookie",
"Custom Request Headers", "Verifying Origin With Standard Headers" and "Fetch Metadata headers".
"""

from __future__ import annotations

import hmac
import ipaddress
import json
import secrets
from collections.abc import Iterable
from urllib.parse import quote, urlsplit

from fastapi import Request
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from app.config import Settings
from app.core.errors import LagdeskError
from app.web.limits import CLOSE, BodyLimit, Refusal, counted_receive, framing_refusal

TOKEN_HEADER = "x-lagdesk-token"
TOKEN_COOKIE = "lagdesk_token"
TOKEN_ENV_VAR = "LAGDESK_TOKEN"
GENERATE = "generate"
CSRF_COOKIE = "lagdesk_csrf"
CSRF_FIELD = "csrf_token"
CSRF_HEADER = "x-csrf-token"
CSRF_PATH = "/api/csrf"
LOGIN_PATH = "/login"
# Reachable without the token: the login page and the files it needs.
OPEN_PREFIXES = (LOGIN_PATH, "/static/")
API_PREFIXES = ("/api/", "/openapi.json")
SAFE_METHODS = frozenset({"GET", "HEAD", "OPTIONS"})
LOOPBACK_NAMES = ("127.0.0.1", "localhost", "::1")
WILDCARD_HOSTS = frozenset({"0.0.0.0", "::", ""})
DEFAULT_PORTS = {"http": 80, "https": 443}
ANY_PORT = 0
SHOWN_HOST_CHARS = 100
OTHER_SITE = "requests from another site are refused"


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


def split_host(netloc: str, default_port: int) -> tuple[str, int] | None:
    """``(name, port)`` of a ``Host`` header or an origin's ``host[:port]`` (IPv6 without its
    brackets, lower case); None when it is not a plain host name with an optional port."""
    if not netloc or any(c in netloc for c in "@/?#\\ "):
        return None
    try:
        parts = urlsplit(f"//{netloc}")
        return (parts.hostname or "", parts.port if parts.port is not None else default_port)
    except ValueError:
        return None


class HostAllowList:
    """The ``Host`` values this server answers to (see the module notes).

    127.0.0.1, localhost, [::1] and the configured host on the configured port; each of
    ``allowed_hosts`` on its own port, or on any port when it names none; every well-formed name
    when the server listens on all interfaces with an access token. A configured port 0 (any
    free port) checks names only.
    """

    def __init__(self, settings: Settings) -> None:
        self.any_name = settings.host in WILDCARD_HOSTS and settings.access_token is not None
        names = [*LOOPBACK_NAMES, *([] if settings.host in WILDCARD_HOSTS else [settings.host])]
        self.allowed: set[tuple[str, int]] = {(name.strip("[]").lower(), settings.port) for name in names}
        # Settings checked each entry's form, so every one splits.
        self.allowed |= {name_port for entry in settings.allowed_hosts if (name_port := split_host(entry, ANY_PORT))}

    def allows(self, netloc: str, default_port: int) -> bool:
        """Whether a request naming ``netloc`` (``Host`` header, or an ``Origin``'s host and
        port; ``default_port`` when it names none) is for this server."""
        name_port = split_host(netloc, default_port)
        if name_port is None:
            return False
        if self.any_name:
            return True
        name, port = name_port
        return any(name == allowed and allowed_port in (port, ANY_PORT) for allowed, allowed_port in self.allowed)

    def __str__(self) -> str:
        return ", ".join(sorted(_netloc(name, port) for name, port in self.allowed))


def _netloc(name: str, port: int) -> str:
    host = f"[{name}]" if ":" in name else name
    return host if port == ANY_PORT else f"{host}:{port}"


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
    if not _matches_cookie(request, given):
        raise CsrfRejected("the form is missing its security token (or it has expired); reload the page and try again")


def _matches_cookie(request: Request, given: str | None) -> bool:
    """Whether ``given`` equals the cookie and the cookie is this server's (signed by it: the
    guard keeps only such a cookie as the request's token, :class:`AccessGuard`)."""
    cookie = request.cookies.get(CSRF_COOKIE)
    return bool(cookie) and cookie == request.scope["state"]["csrf_token"] and tokens_match(given, cookie or "")


def safe_next(target: str | None) -> str:
    """A local path to go back to after logging in (never another host)."""
    if target and target.startswith("/") and not target.startswith("//") and "\\" not in target:
        return target
    return "/"


class AccessGuard:
    """ASGI middleware enforcing the host allow-list, the origin checks, the access token, the
    API's CSRF header and the body limits, and giving each browser its CSRF cookie (see the
    module docstring)."""

    def __init__(self, app: ASGIApp, settings: Settings) -> None:
        self.app = app
        self.settings = settings
        self.token = settings.access_token
        self.hosts = HostAllowList(settings)
        self.csrf_key = secrets.token_bytes(32)

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        request = Request(scope)
        cookie = request.cookies.get(CSRF_COOKIE)
        existing = cookie if self._signed(cookie) else None
        token = existing or self._new_csrf_token()
        scope.setdefault("state", {})["csrf_token"] = token
        limit = BodyLimit.for_path(request.url.path, self.settings)
        refusal = self._refusal(request, limit)
        if refusal is not None:
            await _respond(send, refusal, api=_is_api(request.url.path))
            return
        receive = counted_receive(receive, limit, self.settings.request_timeout_s)
        if existing:
            await self.app(scope, receive, send)
            return

        async def send_with_cookie(message: Message) -> None:
            if message["type"] == "http.response.start":
                cookie = f"{CSRF_COOKIE}={token}; Path=/; HttpOnly; SameSite=Strict"
                message["headers"] = [*message.get("headers", []), (b"set-cookie", cookie.encode())]
            await send(message)

        await self.app(scope, receive, send_with_cookie)

    def _new_csrf_token(self) -> str:
        nonce = secrets.token_urlsafe(24)
        return f"{nonce}.{self._signature(nonce)}"

    def _signature(self, nonce: str) -> str:
        return hmac.new(self.csrf_key, nonce.encode(), "sha256").hexdigest()

    def _signed(self, token: str | None) -> bool:
        """Whether ``token`` is one this server made (its signature holds; compared in constant time)."""
        if not token or "." not in token:
            return False
        nonce, _, signature = token.rpartition(".")
        return tokens_match(signature, self._signature(nonce))

    def _refusal(self, request: Request, limit: BodyLimit) -> Refusal | None:
        """Why the request may not go on, checked in order; None when it may."""
        return (
            self._host_refusal(request)
            or self._site_refusal(request)
            or framing_refusal(request.headers, limit)
            or self._token_refusal(request)
            or self._csrf_refusal(request)
        )

    def _host_refusal(self, request: Request) -> Refusal | None:
        host = request.headers.get("host", "")
        if self.hosts.allows(host, DEFAULT_PORTS.get(request.url.scheme, 80)):
            return None
        return Refusal(400, f"this server answers to {self.hosts}, not to Host {host[:SHOWN_HOST_CHARS]!r}")

    def _site_refusal(self, request: Request) -> Refusal | None:
        origin = request.headers.get("origin")
        if request.method not in SAFE_METHODS and origin is not None and not self._own_origin(origin, request):
            return Refusal(403, OTHER_SITE)
        if request.headers.get("sec-fetch-site") in ("cross-site", "same-site") and not _opened_by_a_link(request):
            return Refusal(403, OTHER_SITE)
        return None

    def _own_origin(self, origin: str, request: Request) -> bool:
        parts = urlsplit(origin)
        if self.hosts.any_name:  # no list to compare with: the origin must name the host asked for
            return parts.netloc == request.headers.get("host", "")
        return parts.scheme in DEFAULT_PORTS and self.hosts.allows(parts.netloc, DEFAULT_PORTS[parts.scheme])

    def _token_refusal(self, request: Request) -> Refusal | None:
        if self.token is None or request.url.path.startswith(OPEN_PREFIXES) or self._token_header(request):
            return None
        unsafe = request.method not in SAFE_METHODS
        by_cookie = tokens_match(request.cookies.get(TOKEN_COOKIE), self.token)
        if _is_api(request.url.path):
            if unsafe and by_cookie:
                return Refusal(401, f"state-changing API calls need the {TOKEN_HEADER} header, not only the cookie")
            if by_cookie:
                return None
            return Refusal(401, f"this server needs its access token in the {TOKEN_HEADER} header")
        if by_cookie:
            return None
        if unsafe:
            return Refusal(401, "log in with the access token first")
        target = request.url.path + (f"?{request.url.query}" if request.url.query else "")
        return Refusal(303, "log in with the access token first", {"location": f"{LOGIN_PATH}?next={quote(target, safe='')}"})

    def _csrf_refusal(self, request: Request) -> Refusal | None:
        if request.method in SAFE_METHODS or not _is_api(request.url.path) or self._token_header(request):
            return None
        if _matches_cookie(request, request.headers.get(CSRF_HEADER)):
            return None
        return Refusal(403, (
            f"a state-changing API call needs the {CSRF_HEADER} header equal to the {CSRF_COOKIE} cookie: "
            f"GET {CSRF_PATH} gives both to a client that keeps cookies"
        ))

    def _token_header(self, request: Request) -> bool:
        """Whether the request carries the access token in its header (a script, never a browser on its own)."""
        return self.token is not None and tokens_match(request.headers.get(TOKEN_HEADER), self.token)


def _is_api(path: str) -> bool:
    return path.startswith(API_PREFIXES)


def _opened_by_a_link(request: Request) -> bool:
    """A top-level page load (a link followed from another site): the one cross-site request let in."""
    headers = request.headers
    return (
        request.method in ("GET", "HEAD")
        and headers.get("sec-fetch-mode") == "navigate"
        and headers.get("sec-fetch-dest") == "document"
    )


async def _respond(send: Send, refusal: Refusal, api: bool) -> None:
    if api:
        body, kind = json.dumps({"detail": refusal.message}).encode(), b"application/json"
    else:
        body, kind = refusal.message.encode(), b"text/plain; charset=utf-8"
    headers: Iterable[tuple[str, str]] = [*refusal.headers.items(), *CLOSE.items()]
    raw_headers = [(b"content-type", kind), (b"content-length", str(len(body)).encode())]
    raw_headers += [(name.encode(), value.encode()) for name, value in headers]
    await send({"type": "http.response.start", "status": refusal.status, "headers": raw_headers})
    await send({"type": "http.response.body", "body": body})
