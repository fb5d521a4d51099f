"""A one-line progress display for the terminal: done / total, rate, time left."""

from __future__ import annotations

import sys
import time
from typing import TextIO

REFRESH_SECONDS = 0.25
# A rate measured over less than this says nothing (two series finishing together gave "22126.8/s").
RATE_AFTER_SECONDS = 1.0


class ProgressLine:
    """Redraws ``label: 37/91 series  4.1/s  ~13 s left`` on ``stream`` (stderr by default).

    The line is drawn as soon as it is made (``label: 0/91 series``), so a run shows its size
    before the first series is done. The rate and the time left are measured from the first
    finished series on: what comes before it (starting the workers, compiling the likelihood
    once) is paid once per run, and counted in would promise hours at the start of a minute's run.

    On a terminal the line is redrawn in place; otherwise (a log file, CI) one line is written
    every tenth of the work so logs stay short.
    """

    def __init__(self, total: int, label: str, stream: TextIO | None = None) -> None:
        self.total, self.label = total, label
        self.stream = stream or sys.stderr
        self.done = 0
        self.failed = 0
        self.started = time.monotonic()
        self.first_done: float | None = None
        self._last_draw = 0.0
        self._last_decile = -1
        self._tty = bool(getattr(self.stream, "isatty", lambda: False)())
        if total:
            self._draw(self.started, force=True)

    def text(self) -> str:
        now = time.monotonic()
        elapsed = now - self.started
        failed = f", {self.failed} failed" if self.failed else ""
        if self.done >= self.total:
            tail = f"  {self.done / max(elapsed, 1e-9):.1f}/s  {elapsed:.1f} s"
        elif self.first_done is not None and self.done > 1 and now - self.first_done >= RATE_AFTER_SECONDS:
            rate = (self.done - 1) / max(now - self.first_done, 1e-9)
            tail = f"  {rate:.1f}/s  ~{(self.total - self.done) / rate:.0f} s left"
        else:
            tail = f"  {elapsed:.0f} s"
        return f"{self.label}: {self.done}/{self.total} series{failed}{tail}"

    def advance(self, failed: bool = False) -> None:
        self.done += 1
        self.failed += int(failed)
        now = time.monotonic()
        if self.first_done is None:
            self.first_done = now
        self._draw(now, force=self.done == self.total)

    def _draw(self, now: float, force: bool) -> None:
        if self._tty:
            if force or now - self._last_draw >= REFRESH_SECONDS:
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
