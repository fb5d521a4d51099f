"""A one-line progress display for the terminal: done / total, rate, time left."""

from __future__ import annotations

import sys
import threading
import time
from typing import TextIO

REFRESH_SECONDS = 0.25
# While no series finishes (the likelihood's compile after an install takes most of a minute), the
# elapsed time is redrawn every TICK_SECONDS on a terminal, and a line is written to a log after
# QUIET_LINE_SECONDS without one, so a run never looks hung.
TICK_SECONDS = 1.0
QUIET_LINE_SECONDS = 10.0
# A rate measured over less than this says nothing (two series finishing together gave "22126.8/s").
RATE_AFTER_SECONDS = 1.0


class ProgressLine:
    """Redraws ``label: 37/91 series  4.1/s  ~13 s left`` on ``stream`` (stderr by default).

    The line is drawn as soon as it is made (``label: 0/91 series``), so a run shows its size
    before the first series is done. The rate and the time left are measured from the first
    finished series on: what comes before it (starting the workers, compiling the likelihood
    once) is paid once per run, and counted in would promise hours at the start of a minute's run.

    On a terminal the line is redrawn in place; otherwise (a log file, CI) one line is written
    every tenth of the work so logs stay short. :meth:`tick` (called by :class:`Ticker`) keeps
    the elapsed time moving while nothing finishes; ``waiting`` says why until the first series
    finishes (``demo: 0/91 series  40 s  (compiling the likelihood first)``).
    """

    def __init__(self, total: int, label: str, stream: TextIO | None = None, waiting: str | None = None) -> None:
        self.total, self.label, self.waiting = total, label, waiting
        self.stream = stream or sys.stderr
        self.done = 0
        self.failed = 0
        self.started = time.monotonic()
        self.first_done: float | None = None
        self._last_draw = 0.0
        self._last_decile = -1
        self._last_line = self.started
        self._lock = threading.Lock()
        self._tty = bool(getattr(self.stream, "isatty", lambda: False)())
        if total:
            self._draw(self.started, force=True)

    def text(self) -> str:
        now = time.monotonic()
        elapsed = now - self.started
        failed = f", {self.failed} failed" if self.failed else ""
        measured = self.first_done is not None and self.done > 1 and now - self.first_done >= RATE_AFTER_SECONDS
        rate = (self.done - 1) / max(now - (self.first_done or now), 1e-9) if measured else 0.0
        if self.done >= self.total:
            # The same rate as while running, so the last line does not seem to slow down.
            tail = f"  {elapsed:.1f} s in all ({rate:.1f} series/s after the first series)" if measured else f"  {elapsed:.1f} s"
        elif measured:
            tail = f"  {rate:.1f}/s  ~{(self.total - self.done) / rate:.0f} s left"
        else:
            tail = f"  {elapsed:.0f} s" + (f"  ({self.waiting})" if self.waiting and not self.done else "")
        return f"{self.label}: {self.done}/{self.total} series{failed}{tail}"

    def advance(self, failed: bool = False) -> None:
        with self._lock:
            self.done += 1
            self.failed += int(failed)
            now = time.monotonic()
            if self.first_done is None:
                self.first_done = now
            self._draw(now, force=self.done == self.total)

    def tick(self) -> None:
        """Redraw the line on a terminal; in a log, write it when nothing was written for
        :data:`QUIET_LINE_SECONDS`. Nothing once the work is done."""
        with self._lock:
            now = time.monotonic()
            if self.done >= self.total:
                return
            if self._tty:
                self._draw(now, force=True)
            elif now - self._last_line >= QUIET_LINE_SECONDS:
                self._write_line(now)

    def _draw(self, now: float, force: bool) -> None:
        if self._tty:
            if force or now - self._last_draw >= REFRESH_SECONDS:
                self.stream.write("\r" + self.text().ljust(72))
                self.stream.flush()
                self._last_draw = now
        else:
            decile = (10 * self.done) // max(self.total, 1)
            if decile != self._last_decile:
                self._write_line(now)
                self._last_decile = decile

    def _write_line(self, now: float) -> None:
        self.stream.write(self.text() + "\n")
        self.stream.flush()
        self._last_line = now

    def close(self) -> None:
        with self._lock:
            if self._tty:
                self.stream.write("\n")
                self.stream.flush()


class Ticker:
    """Calls :meth:`ProgressLine.tick` every :data:`TICK_SECONDS` from a daemon thread, from
    :meth:`start` (or entering the ``with`` block) until :meth:`stop` (or leaving it)."""

    def __init__(self, line: ProgressLine, seconds: float = TICK_SECONDS) -> None:
        self.line, self.seconds = line, seconds
        self._stopped = threading.Event()
        self._thread = threading.Thread(target=self._run, name="progress-ticker", daemon=True)

    def _run(self) -> None:
        while not self._stopped.wait(self.seconds):
            self.line.tick()

    def start(self) -> Ticker:
        if self.line.total:
            self._thread.start()
        return self

    def stop(self) -> None:
        self._stopped.set()
        if self._thread.is_alive():
            self._thread.join()

    def __enter__(self) -> Ticker:
        return self.start()

    def __exit__(self, *exc: object) -> None:
        self.stop()
