"""The project's own error and warning types.

Every failure a user can cause (a bad file, a bad series) is raised as a subclass of
:class:`LagdeskError`, with a message that names the file, the series and the row where
there is one, so the command line and the web pages can show it without a traceback. Each
class carries the HTTP status the web layer answers it with (``http_status``), so one handler
serves them all.
"""

from __future__ import annotations

from typing import Any, ClassVar

# Cells, ids and column names are echoed in messages (terminal, pages, the stored rejection
# list) at most this long: enough to recognise a value, never a 20 MB cell.
ECHO_CHARS = 80


def shorten(text: str, limit: int = ECHO_CHARS) -> str:
    """``text`` cut to its first ``limit`` characters followed by "…" when it is longer; every
    message that echoes something read from a file passes it through here."""
    return text if len(text) <= limit else f"{text[:limit]}…"


class LagdeskError(Exception):
    """Base class of every error Lagdesk reports to a user (422: a request that cannot be done)."""

    http_status: ClassVar[int] = 422

    def details(self) -> dict[str, Any]:
        """What an answer to a script carries beside the message (nothing by default)."""
        return {}


class InputFileError(LagdeskError):
    """A whole file cannot be used (unreadable, missing column, wrong layout)."""

    http_status = 400

    def __init__(self, path: str, message: str) -> None:
        self.path = path
        self.message = message
        super().__init__(f"{path}: {message}")


class SeriesProblem(LagdeskError):
    """One series cannot be used or analysed; the rest of the portfolio can.

    Parameters
    ----------
    series_id : str
        The series concerned.
    message : str
        What is wrong, in words a person understands.
    row : int, optional
        1-based line number in the input file (the header is line 1), when known.
    flag : str, optional
        A machine-readable reason (``too_short``, ``constant``, ``duplicate_timestamp`` ...).
    """

    def __init__(self, series_id: str, message: str, row: int | None = None, flag: str | None = None) -> None:
        self.series_id = series_id
        self.message = message
        self.row = row
        self.flag = flag
        where = f" (line {row})" if row is not None else ""
        super().__init__(f"series {series_id!r}{where}: {message}")

    def to_dict(self) -> dict:
        return {"series_id": self.series_id, "message": str(self), "row": self.row, "flag": self.flag}


class OrderError(LagdeskError):
    """An ARIMA order that cannot be fitted (negative, too large, too long for the data)."""
