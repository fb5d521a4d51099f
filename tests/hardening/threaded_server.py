"""The dashboard served in the test's own process, by the uvicorn configuration ``lagdesk serve``
runs (:func:`app.web.server.server_config`), for tests that need settings the command line does
not offer (a short request timeout, an extra allowed host name) or need to see what the server
answered when the browser does not say (a response it blocks from the page)."""

from __future__ import annotations

import socket
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import uvicorn
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from app.config import Settings
from app.web.server import server_config

START_LIMIT_S = 30
POLL_S = 0.05


class AnswerLog:
    """ASGI wrapper noting ``(method, path, status)`` of every answer the app sends."""

    def __init__(self, app: ASGIApp) -> None:
        self.app = app
        self.answers: list[tuple[str, str, int]] = []

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        async def noting(message: Message) -> None:
            if message["type"] == "http.response.start":
                self.answers.append((scope["method"], scope["path"], message["status"]))
            await send(message)

        await self.app(scope, receive, noting if scope["type"] == "http" else send)


@contextmanager
def served(db_path: Path, answers: list | None = None, **settings) -> Iterator[int]:
    """Serve the database on a free loopback port until the block ends; yields the port.
    ``answers`` (a list) receives ``(method, path, status)`` of every answer."""
    sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
    sock.bind(("127.0.0.1", 0))
    port = sock.getsockname()[1]
    config = server_config(Settings(db_path=db_path, port=port, **settings))
    if answers is not None:
        log = AnswerLog(config.app)
        log.answers = answers
        config.app = log
    server = uvicorn.Server(config)
    thread = threading.Thread(target=server.run, kwargs={"sockets": [sock]}, daemon=True)
    thread.start()
    try:
        deadline = time.monotonic() + START_LIMIT_S
        while not server.started:
            if time.monotonic() > deadline or not thread.is_alive():
                raise RuntimeError("the in-process server did not start")
            time.sleep(POLL_S)
        yield port
    finally:
        server.should_exit = True
        thread.join(timeout=START_LIMIT_S)
        sock.close()
