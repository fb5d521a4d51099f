"""The terminal progress line: drawn as soon as a run knows its size, and its rate and time left
measured from the first finished series, so a one-off start-up (the likelihood's compile, the
workers' start) does not promise hours at the start of a short run. A fake clock drives it."""

from __future__ import annotations

import io
import threading

import pytest

from app.jobs import progress
from app.jobs.progress import ProgressLine


class Clock:
    def __init__(self) -> None:
        self.now = 0.0

    def __call__(self) -> float:
        return self.now


@pytest.fixture
def clock(monkeypatch) -> Clock:
    fake = Clock()
    monkeypatch.setattr(progress.time, "monotonic", fake)
    return fake


def test_the_line_is_drawn_before_the_first_series_is_done(clock):
    stream = io.StringIO()
    ProgressLine(89, "demo", stream)
    assert stream.getvalue() == "demo: 0/89 series  0 s\n"


def test_an_empty_run_draws_nothing(clock):
    stream = io.StringIO()
    ProgressLine(0, "analyze", stream)
    assert stream.getvalue() == ""


def test_rate_and_time_left_leave_out_the_start_up_before_the_first_series(clock):
    line = ProgressLine(10, "demo", io.StringIO())
    clock.now = 30.0  # the first series lands after a 30 s compile
    line.advance()
    assert line.text() == "demo: 1/10 series  30 s"  # one point gives no rate yet
    clock.now = 32.0  # then one series a second: 2 more in 2 s
    line.advance()
    line.advance()
    assert line.text() == "demo: 3/10 series  1.0/s  ~7 s left"
    for _ in range(7):
        line.advance()
    # The rate as while running (9 series in the 2 s after the first), and the whole run's time.
    assert line.text() == "demo: 10/10 series  32.0 s in all (4.5 series/s after the first series)"


def test_no_rate_is_shown_before_a_second_has_passed_since_the_first_series(clock):
    line = ProgressLine(3, "identify", io.StringIO())
    clock.now = 2.0
    line.advance()
    clock.now = 2.0001  # a second series finishes at once (a rejected one, say)
    line.advance()
    assert line.text() == "identify: 2/3 series  2 s"


class Terminal(io.StringIO):
    def isatty(self) -> bool:
        return True


def test_a_tick_redraws_the_elapsed_time_on_a_terminal_while_nothing_finishes(clock):
    # The compile after an install takes most of a minute before the first series lands.
    stream = Terminal()
    line = ProgressLine(91, "demo", stream)
    clock.now = 7.0
    line.tick()
    assert stream.getvalue().endswith("\rdemo: 0/91 series  7 s".ljust(73))


def test_in_a_log_a_tick_writes_a_line_only_after_a_quiet_spell(clock):
    stream = io.StringIO()
    line = ProgressLine(91, "demo", stream)
    clock.now = progress.QUIET_LINE_SECONDS - 1
    line.tick()
    assert stream.getvalue() == "demo: 0/91 series  0 s\n"
    clock.now = progress.QUIET_LINE_SECONDS
    line.tick()
    assert stream.getvalue().splitlines() == ["demo: 0/91 series  0 s", "demo: 0/91 series  10 s"]
    line.advance()  # 1 of 91 is still the first tenth: no decile line; 9 s after the last line, no tick line
    clock.now = 2 * progress.QUIET_LINE_SECONDS - 1
    line.tick()
    assert len(stream.getvalue().splitlines()) == 2


def test_the_reason_for_waiting_is_shown_until_the_first_series_finishes(clock):
    # A new-user trial saw twelve log lines of "demo: 0/91 series" during the likelihood's
    # compile and could not tell a compile from a hang.
    stream = io.StringIO()
    line = ProgressLine(91, "demo", stream, waiting="compiling the likelihood first")
    clock.now = progress.QUIET_LINE_SECONDS
    line.tick()
    assert stream.getvalue().splitlines()[-1] == "demo: 0/91 series  10 s  (compiling the likelihood first)"
    clock.now = progress.QUIET_LINE_SECONDS + 1
    line.advance()
    assert line.text() == "demo: 1/91 series  11 s"


def test_nothing_is_drawn_after_the_work_is_done(clock):
    stream = Terminal()
    line = ProgressLine(1, "identify", stream)
    line.advance()
    drawn = stream.getvalue()
    clock.now = 60.0
    line.tick()
    assert stream.getvalue() == drawn


def test_the_ticker_ticks_from_its_thread_until_stopped():
    ticks = threading.Event()

    class Line:
        total = 3

        def tick(self) -> None:
            ticks.set()

    ticker = progress.Ticker(Line(), seconds=0.01)  # type: ignore[arg-type]
    with ticker:
        assert ticks.wait(5.0)
    assert not ticker._thread.is_alive()
