"""How much a request may send, and how slowly.

* **Size.** A JSON body or a form carries at most :data:`JSON_BODY_LIMIT` (1 MiB); an upload
  (``POST /upload``, ``POST /api/imports``) at most ``Settings.max_upload_bytes`` plus
  :data:`FORM_ENVELOPE_BYTES` for the multipart envelope. A ``Content-Length`` over the limit is
  refused (413) before a byte is read, and the bytes are counted as they arrive whatever the
  headers said, so a body that claims one byte and sends more is cut off at the limit.
* **Framing.** A body without a length (``Transfer-Encoding``) is refused with 411, and one
  that declares both a length and a transfer encoding with 400: the two headers together are
  how request smuggling starts, and they let a body past a check of the declared length.
* **Time.** A body that stops arriving for ``Settings.request_timeout_s`` is answered with 408;
  slow headers are dropped by the server itself (:mod:`app.web.server`).

Every refusal closes the connection, so the rest of a refused body is not read.
"""

from __future__ import annotations

from typing import NamedTuple

import anyio
from starlette.datastructures import Headers
from starlette.exceptions import HTTPException
from starlette.types import Message, Receive

from app.config import MEBIBYTE, Settings

JSON_BODY_LIMIT = MEBIBYTE
# The multipart envelope around an uploaded file (boundaries, part headers, form fields).
FORM_ENVELOPE_BYTES = 64 * 1024
UPLOAD_PATHS = frozenset({"/upload", "/api/imports"})
CLOSE = {"connection": "close"}


class Refusal(NamedTuple):
    """A request answered without reaching the app: status, message, extra headers."""

    status: int
    message: str
    headers: dict[str, str] = {}


class BodyRefused(HTTPException):
    """A body over its limit, or one that stopped arriving, found while it was read."""

    def __init__(self, status: int, message: str) -> None:
        super().__init__(status_code=status, detail=message, headers=CLOSE)


class BodyLimit(NamedTuple):
    """The most a request to one path may send, and the words that say so."""

    size: int
    message: str

    @classmethod
    def for_path(cls, path: str, settings: Settings) -> BodyLimit:
        if path in UPLOAD_PATHS:
            limit_mib = settings.max_upload_bytes // MEBIBYTE
            return cls(settings.max_upload_bytes + FORM_ENVELOPE_BYTES, f"the request is larger than the upload limit of {limit_mib} MiB")
        return cls(JSON_BODY_LIMIT, f"the request body is larger than {JSON_BODY_LIMIT // MEBIBYTE} MiB, the most any request but an upload may send")


def framing_refusal(headers: Headers, limit: BodyLimit) -> Refusal | None:
    """A refusal from the headers alone: a body without a length, with two framings, or
    declared larger than ``limit``; None when the body may be read (and counted)."""
    length = headers.get("content-length")
    if "transfer-encoding" in headers:
        if length is not None:
            return Refusal(400, "a request may not carry both Content-Length and Transfer-Encoding")
        return Refusal(411, "a request body needs a Content-Length")
    if length is None:
        return None
    if not length.isdigit():
        return Refusal(400, f"Content-Length must be a whole number, not {length[:40]!r}")
    return Refusal(413, limit.message) if int(length) > limit.size else None


def counted_receive(receive: Receive, limit: BodyLimit, timeout_s: float) -> Receive:
    """``receive`` that counts the body's bytes as they arrive and waits at most ``timeout_s``
    for each part, raising :class:`BodyRefused` (413, 408) once either bound is passed."""
    received = 0
    finished = False

    async def receive_counted() -> Message:
        nonlocal received, finished
        if finished:  # after the body only a disconnect can come: no deadline on that
            return await receive()
        try:
            with anyio.fail_after(timeout_s):
                message = await receive()
        except TimeoutError:
            raise BodyRefused(408, f"the request body stopped arriving for {timeout_s:g} s") from None
        if message["type"] == "http.request":
            received += len(message.get("body", b""))
            if received > limit.size:
                raise BodyRefused(413, limit.message)
            finished = not message.get("more_body", False)
        return message

    return receive_counted
