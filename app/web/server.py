"""Running the dashboard under uvicorn (``lagdesk serve`` calls :func:`run_server`).

uvicorn closes a connection left idle between requests after :data:`KEEP_ALIVE_S`, but a
client that keeps sending a byte of its headers now and then would hold its connection for
ever. :class:`HeaderDeadlineProtocol` gives every request ``Settings.request_timeout_s`` to
deliver its headers, however they trickle in; the body has the same bound between its parts
(:mod:`app.web.limits`).
"""

from __future__ import annotations

import asyncio
import errno
import os
import socket
from contextlib import closing, suppress
from typing import Any

import h11
import uvicorn
from uvicorn.protocols.http.h11_impl import H11Protocol

from app.config import REQUEST_TIMEOUT_S, Settings
from app.core.errors import LagdeskError
from app.jobs.run_lock import close_abandoned_runs
from app.store.database import open_database
from app.web.main import create_app
from app.web.security import require_token_off_loopback
from app.web.uploads import remove_stale_upload_folders

KEEP_ALIVE_S = 5
# How long a stop (Ctrl-C, SIGTERM) waits for the requests under way: without a bound it
# waited for a custom fit of minutes to end, and only SIGKILL stopped the server.
SHUTDOWN_GRACE_S = 5


class HeaderDeadlineProtocol(H11Protocol):
    """uvicorn's HTTP/1.1 protocol with a deadline for each request's headers: from the moment a
    connection opens, or a response ends, until the request's headers are complete."""

    header_timeout_s = REQUEST_TIMEOUT_S

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        self._header_deadline: asyncio.TimerHandle | None = None

    def connection_made(self, transport: asyncio.Transport) -> None:  # type: ignore[override]
        super().connection_made(transport)
        self._await_headers()

    def handle_events(self) -> None:
        super().handle_events()
        if self.conn.their_state is not h11.IDLE:  # the request line and headers are in
            self._cancel_deadline()

    def on_response_complete(self) -> None:
        self._await_headers()  # before the parent reads a request already buffered behind this one
        super().on_response_complete()

    def connection_lost(self, exc: Exception | None) -> None:
        self._cancel_deadline()
        super().connection_lost(exc)

    def _await_headers(self) -> None:
        self._cancel_deadline()
        self._header_deadline = self.loop.call_later(self.header_timeout_s, self._headers_too_slow)

    def _cancel_deadline(self) -> None:
        if self._header_deadline is not None:
            self._header_deadline.cancel()
            self._header_deadline = None

    def _headers_too_slow(self) -> None:
        self._header_deadline = None
        if self.conn.their_state is h11.IDLE and not self.transport.is_closing():
            self.transport.close()


def header_deadline_protocol(timeout_s: float) -> type[HeaderDeadlineProtocol]:
    """:class:`HeaderDeadlineProtocol` with a deadline of ``timeout_s`` seconds (uvicorn builds
    the protocol itself, from a class)."""
    return type("HeaderDeadlineProtocol", (HeaderDeadlineProtocol,), {"header_timeout_s": timeout_s})


def server_config(settings: Settings) -> uvicorn.Config:
    """The uvicorn configuration ``lagdesk serve`` runs (tests serve the same one)."""
    return uvicorn.Config(
        create_app(settings), host=settings.host, port=settings.port, log_level="warning",
        timeout_keep_alive=KEEP_ALIVE_S, http=header_deadline_protocol(settings.request_timeout_s),
        timeout_graceful_shutdown=SHUTDOWN_GRACE_S,
    )


def check_port(settings: Settings) -> None:
    """Bind ``settings.host`` and ``settings.port`` once and let go, so that a port already taken
    is one clear error before the command says it serves (uvicorn binds it again itself: a
    socket bound here and handed to uvicorn made it reset connections it refused mid-upload).

    Raises
    ------
    LagdeskError
        When the address cannot be bound (in use, not this machine's, a privileged port).
    """
    try:
        family = socket.getaddrinfo(settings.host, settings.port, type=socket.SOCK_STREAM)[0][0]
        socket.create_server((settings.host, settings.port), family=family).close()
    except OSError as exc:
        taken = " (another server, perhaps another Lagdesk, holds it: choose another with --port)" if exc.errno == errno.EADDRINUSE else ""
        reason = os.strerror(exc.errno) if exc.errno and exc.errno > 0 else (exc.strerror or str(exc))  # gaierror: negative
        raise LagdeskError(f"cannot listen on {settings.host}:{settings.port}: {reason}{taken}") from None


def run_server(settings: Settings) -> None:
    """Refuse to listen beyond this machine without an access token; open (or create) the
    database once, so a bad path or a damaged file fails before the server starts, close the
    runs of analyses that died and remove the upload folders of servers killed mid-upload; then
    serve the dashboard until interrupted."""
    require_token_off_loopback(settings)
    with closing(open_database(settings.db_path)) as db:
        close_abandoned_runs(db, settings.db_path)
    remove_stale_upload_folders()
    server = uvicorn.Server(server_config(settings))
    with suppress(KeyboardInterrupt):  # Ctrl-C is how the server is meant to stop
        server.run()
    if not server.started:
        raise LagdeskError(f"could not listen on {settings.host}:{settings.port} (uvicorn's reason is above)")
