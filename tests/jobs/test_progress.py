"""The terminal progress line: drawn as soon as a run knows its size, and its rate and time left
measured from the first finished series, so a one-off start-up (the likelihood's compile, the
workers' start) does not promise hours at the start of a short run. A fake clock drives it."""

from __future__ import annotations

import io

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
    assert line.text() == "demo: 10/10 series  0.3/s  32.0 s"  # the whole run, start-up included


def test_no_rate_is_shown_before_a_second_has_passed_since_the_first_series(clock):
    line = ProgressLine(3, "identify", io.StringIO())
    clock.now = 2.0
    line.advance()
    clock.now = 2.0001  # a second series finishes at once (a rejected one, say)
    line.advance()
    assert line.text() == "identify: 2/3 series  2 s"
