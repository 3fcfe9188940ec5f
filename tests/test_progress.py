"""What a search shows while it runs when its output is not a terminal."""

from __future__ import annotations

import io
import threading
import time

from tinyconv.workflows.progress import SearchProgress, terminal_width


class _Clock:
    """A clock the test moves by hand."""

    def __init__(self):
        self.now = 0.0

    def __call__(self) -> float:
        return self.now


def _lines(stream: io.StringIO) -> list[str]:
    return stream.getvalue().splitlines()


def test_a_pipe_has_no_width_so_lines_not_bars():
    """A stream that is not a terminal reports width 0, and the progress prints lines."""
    stream = io.StringIO()
    assert terminal_width(stream) == 0
    assert SearchProgress(None, None, stream=stream).bars is False


def test_one_line_per_rung_and_the_plan_left_in_epochs():
    """Each rung prints a line counting from 1; the status line counts what is left in epochs."""
    stream, clock = io.StringIO(), _Clock()
    p = SearchProgress(None, None, stream=stream, clock=clock, every_s=3600)
    p.start(plan_units=30, plan_epochs=162, done_units=0, cpu_s=0.0, epochs=0)
    p.rung(0, 2, 0, 2, 6, 3, 3, 0)
    for _ in range(18):                       # 18 units of 3 epochs in 36 s
        clock.now += 2.0
        p.unit(None, cpu_s=clock.now, epochs=p.epochs + 3)
    p.rung(0, 2, 1, 2, 2, 3, 9, 0)
    status = p.status()
    p.close()
    lines = _lines(stream)
    assert lines[0] == "plan: at most 30 units, 162 epochs in all"
    assert lines[1] == "rung 1 of 2 (3 epochs), bracket 1 of 2: 6 candidates \u00d7 3 folds = 18 units"
    assert lines[2] == "rung 2 of 2 (9 epochs), bracket 1 of 2: 2 candidates \u00d7 3 folds = 6 units"
    # 54 of 162 epochs done in 36 s: 108 epochs left, about 72 s at that pace
    assert status == ("progress: 18 units stored, training CPU 36s; at most 108 epochs of the "
                      "plan left (about 1m 12s at this pace)")
    assert lines[-1] == ("progress: 18 units stored, training CPU 36s; 54 epochs trained "
                         "in all")                # the last word when the loop ends


def test_the_budgets_bound_what_is_left():
    """An epoch budget below the plan caps the epochs left; a CPU budget is named."""
    stream = io.StringIO()
    p = SearchProgress(60.0, 100, stream=stream, every_s=3600)
    p.start(plan_units=30, plan_epochs=162, done_units=10, cpu_s=5.0, epochs=30)
    status = p.status()
    p.close()
    assert "10 units stored" in status and "CPU budget 1m 00s" in status
    assert "epoch budget 100" in status and "at most 70 epochs of the plan left" in status
    assert _lines(stream)[0].endswith("; 10 units already stored")


def test_a_silent_stretch_gets_a_status_line():
    """With no rung starting and no unit finishing, a status line still comes every period."""
    stream = io.StringIO()
    p = SearchProgress(None, None, stream=stream, every_s=0.2)
    p.start(plan_units=3, plan_epochs=27, done_units=0, cpu_s=0.0, epochs=0)
    time.sleep(1.5)
    p.close()
    ticks = [ln for ln in _lines(stream) if ln.startswith("progress: ")]
    assert len(ticks) >= 3       # at least one per 0.2 s period, allowing for a slow machine
    assert not any(t.name == "search-status" for t in threading.enumerate())


def test_bars_count_the_plan_in_epochs():
    """In a terminal the main bar's total is the plan's epochs (its estimate is epoch-based)."""
    stream = io.StringIO()
    p = SearchProgress(None, None, stream=stream, bars=True)
    p.start(plan_units=30, plan_epochs=162, done_units=0, cpu_s=0.0, epochs=0)
    p.rung(0, 1, 0, 1, 6, 3, 3, 0)
    p.unit(None, cpu_s=1.0, epochs=3)
    assert (p.main.total, p.main.n, p.main.unit) == (162, 3, "epoch")
    assert p.rung_bar.total == 18 and p.rung_bar.n == 1
    p.close()
