"""HEAD answered wherever GET is (RFC 9110, §9.3.2): the same status and headers, no body.

FastAPI routes a method only to the routes that name it, so an uptime monitor or a link
checker asking ``HEAD /`` got 405. This middleware hands a HEAD request on as a GET and drops
the body of the answer, keeping its headers (``content-length`` included, as the RFC allows).
"""

from __future__ import annotations

from starlette.types import ASGIApp, Message, Receive, Scope, Send


class HeadAsGet:
    """ASGI middleware: a HEAD request is served as the GET of the same URL, without a body."""

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http" or scope["method"] != "HEAD":
            await self.app(scope, receive, send)
            return

        async def without_body(message: Message) -> None:
            if message["type"] == "http.response.body":
                message = {**message, "body": b""}
            await send(message)

        await self.app({**scope, "method": "GET"}, receive, without_body)
