"""A one-line progress display for the terminal: done / total, rate, time left."""

from __future__ import annotations

import sys
import time
from typing import TextIO

REFRESH_SECONDS = 0.25


class ProgressLine:
    """Redraws ``label: 37/91 series  4.1/s  ~13 s left`` on ``stream`` (stderr by default).

    On a terminal the line is redrawn in place; otherwise (a log file, CI) one line is written
    every tenth of the work so logs stay short.
    """

    def __init__(self, total: int, label: str, stream: TextIO | None = None) -> None:
        self.total, self.label = total, label
        self.stream = stream or sys.stderr
        self.done = 0
        self.failed = 0
        self.started = time.monotonic()
        self._last_draw = 0.0
        self._last_decile = -1
        self._tty = bool(getattr(self.stream, "isatty", lambda: False)())

    def text(self) -> str:
        elapsed = max(time.monotonic() - self.started, 1e-9)
        rate = self.done / elapsed
        left = (self.total - self.done) / rate if rate > 0 else float("nan")
        failed = f", {self.failed} failed" if self.failed else ""
        eta = f"  ~{left:.0f} s left" if self.done < self.total and rate > 0 else f"  {elapsed:.1f} s"
        return f"{self.label}: {self.done}/{self.total} series{failed}  {rate:.1f}/s{eta}"

    def advance(self, failed: bool = False) -> None:
        self.done += 1
        self.failed += int(failed)
        now = time.monotonic()
        if self._tty:
            if now - self._last_draw >= REFRESH_SECONDS or self.done == self.total:
                self.stream.write("\r" + self.text().ljust(72))
                self.stream.flush()
                self._last_draw = now
        else:
            decile = (10 * self.done) // max(self.total, 1)
            if decile != self._last_decile:
                self.stream.write(self.text() + "\n")
                self.stream.flush()
                self._last_decile = decile

    def close(self) -> None:
        if self._tty:
            self.stream.write("\n")
            self.stream.flush()
