"""Settings of one Lagdesk server, built by the command line (or a test) and handed to the app.

This module imports nothing else from :mod:`app`, so every layer can read settings without
pulling in the rest.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path

MEBIBYTE = 1024 * 1024
# Shorter tokens can be guessed by trying; a generated one has 43 characters (256 bits).
MIN_TOKEN_LENGTH = 16
# Time a client may take to send a request's headers, or leave its body silent: generous for a
# person on a slow link, short enough that half-sent requests cannot pile up (Apache's
# mod_reqtimeout starts its header window at 20 s by default, from memory).
REQUEST_TIMEOUT_S = 20.0
# A host name or IPv4 address, or an IPv6 address in brackets, with an optional :port.
HOST_AND_PORT = re.compile(r"(?:[A-Za-z0-9](?:[A-Za-z0-9.-]*[A-Za-z0-9])?|\[[0-9A-Fa-f:.]+\])(?::\d{1,5})?")


@dataclass(frozen=True)
class Settings:
    """What a ``lagdesk serve`` process needs to know.

    Attributes
    ----------
    db_path : Path
        The portfolio database file (created on first use).
    host : str
        Interface the server listens on; the loopback address keeps the dashboard private to
        this machine.
    port : int
        TCP port of the server.
    max_upload_bytes : int
        Largest portfolio file the upload page accepts; a bigger one is refused with 413
        before it is read.
    page_size : int
        Series per page of the queue when the request does not say.
    max_page_size : int
        Largest page a request may ask for (``limit`` of ``/api/series`` and of the queue,
        which offers 50, 200 and 1,000 rows).
    analysis_workers : int or None
        Worker processes of an analysis run started from the dashboard; None for one per CPU.
    max_upload_series : int
        Most series one uploaded file may hold; a file with more is refused whole.
    max_upload_points : int
        Most rows one series of an uploaded file may have; a longer series is rejected (the
        others are still imported).
    access_token : str or None
        When set, every request must carry it (the ``lagdesk_token`` cookie set by the login
        page, or the ``X-Lagdesk-Token`` header; state-changing API calls need the header).
        ``lagdesk serve`` refuses a non-loopback ``host`` without one.
    allowed_hosts : tuple of str
        Names besides 127.0.0.1, localhost, [::1] and ``host`` (those on ``port``) that the
        ``Host`` header of a request may carry, e.g. the name of a reverse proxy or a tunnel; a
        name without ``:port`` is allowed on any port. Every other ``Host`` is refused (a page
        of another site whose name was made to resolve to this machine: DNS rebinding).
    request_timeout_s : float
        Seconds a client may take to send a request's headers, or let its body stall, before
        the server drops the request.
    """

    db_path: Path
    host: str = "127.0.0.1"
    port: int = 8000
    max_upload_bytes: int = 200 * MEBIBYTE
    page_size: int = 50
    max_page_size: int = 1000
    analysis_workers: int | None = None
    max_upload_series: int = 10_000
    max_upload_points: int = 100_000
    access_token: str | None = None
    allowed_hosts: tuple[str, ...] = ()
    request_timeout_s: float = REQUEST_TIMEOUT_S

    def __post_init__(self) -> None:
        object.__setattr__(self, "db_path", Path(self.db_path))
        if not 0 <= self.port <= 65535:
            raise ValueError(f"port ({self.port}) must be between 0 and 65535")
        if self.max_upload_bytes <= 0:
            raise ValueError(f"max_upload_bytes ({self.max_upload_bytes}) must be > 0")
        if self.analysis_workers is not None and self.analysis_workers < 1:
            raise ValueError(f"analysis_workers ({self.analysis_workers}) must be at least 1")
        if self.max_upload_series < 1 or self.max_upload_points < 1:
            raise ValueError(
                f"max_upload_series ({self.max_upload_series}) and max_upload_points "
                f"({self.max_upload_points}) must be at least 1"
            )
        if self.access_token is not None and len(self.access_token) < MIN_TOKEN_LENGTH:
            raise ValueError(f"an access token needs at least {MIN_TOKEN_LENGTH} characters")
        wrong = [entry for entry in self.allowed_hosts if not HOST_AND_PORT.fullmatch(entry)]
        if wrong:
            raise ValueError(f"allowed host {wrong[0]!r} is not a host name (or [IPv6] address) with an optional :port")
        if not self.request_timeout_s > 0:
            raise ValueError(f"request_timeout_s ({self.request_timeout_s}) must be > 0")
        if not 1 <= self.page_size <= self.max_page_size:
            raise ValueError(f"page_size ({self.page_size}) must be between 1 and max_page_size ({self.max_page_size})")

    @property
    def url(self) -> str:
        """The address a browser on this machine opens."""
        host = "127.0.0.1" if self.host in ("0.0.0.0", "") else self.host
        return f"http://{host}:{self.port}/"
