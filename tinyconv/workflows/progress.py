"""What a running search shows on stderr, in a terminal or not.

In a terminal that reports its width: two bars, the budget (or the plan, in
epochs) and the current rung (in units). Anywhere else (output piped or sent
to a file, a terminal of unknown width) bars would draw nothing, so the
search prints lines instead: one when a rung starts, and a status line at
least every :data:`STATUS_EVERY_S` seconds with the units stored, the
training CPU spent and what is left of the plan, counted in epochs (a unit
trains from a few to many epochs, so units say little about time).

The plan's epochs are an upper bound: brackets that meet a candidate at the
same epochs train it once, and candidates that stop early never reach the
longer rungs.
"""

from __future__ import annotations

import os
import sys
import threading
import time
from typing import Callable, TextIO

from search.config import format_duration
from search.runner import Progress

#: The longest a search stays silent when it prints lines (seconds).
STATUS_EVERY_S = 30.0


def terminal_width(stream: TextIO) -> int:
    """The width of the terminal ``stream`` writes to; 0 when it is not one or says none."""
    try:
        if not stream.isatty():
            return 0
        return os.get_terminal_size(stream.fileno()).columns
    except (OSError, ValueError, AttributeError):
        return 0


class SearchProgress(Progress):
    """The search's progress on ``stream`` (stderr): bars or lines, see the module notes.

    Parameters
    ----------
    budget_cpu_s, budget_epochs : the search's budgets, if any
    stream : where to write (default ``sys.stderr``)
    bars : draw bars (default: when ``stream`` is a terminal that reports a width)
    every_s : the longest silence when printing lines
    clock : seconds, for the pace and the silences (``time.monotonic``)
    """

    def __init__(self, budget_cpu_s: float | None, budget_epochs: int | None, *,
                 stream: TextIO | None = None, bars: bool | None = None,
                 every_s: float = STATUS_EVERY_S,
                 clock: Callable[[], float] = time.monotonic):
        self.cpu_budget, self.epoch_budget = budget_cpu_s, budget_epochs
        self.stream = stream if stream is not None else sys.stderr
        self.bars = terminal_width(self.stream) > 0 if bars is None else bars
        self.every_s, self.clock = every_s, clock
        self.main = self.rung_bar = None
        self._lock = threading.Lock()
        self._stop = threading.Event()
        self._ticker: threading.Thread | None = None
        self.plan_units = self.plan_epochs = self.units = self.epochs = 0
        self.cpu_s = 0.0
        self._session_epochs = 0
        self._started = self._last_line = 0.0

    # ------------------------------------------------------------ hooks

    def start(self, plan_units, plan_epochs, done_units, cpu_s, epochs):
        with self._lock:
            self.plan_units, self.plan_epochs = plan_units, plan_epochs
            self.units, self.cpu_s, self.epochs = done_units, cpu_s, epochs
            self._started = self._last_line = self.clock()
        if self.bars:
            self.main = self._main_bar()
            return
        self._say(f"plan: at most {plan_units:,} units, {plan_epochs:,} epochs in all"
                  + (f"; {done_units:,} units already stored" if done_units else ""))
        self._ticker = threading.Thread(target=self._tick, name="search-status", daemon=True)
        self._ticker.start()

    def rung(self, bracket, n_brackets, level, n_levels, candidates, folds, epochs, done):
        units = candidates * folds
        what = (f"rung {level + 1} of {n_levels} ({epochs} epoch{'s' if epochs != 1 else ''})"
                + (f", bracket {bracket + 1} of {n_brackets}" if n_brackets > 1 else ""))
        if not self.bars:
            self._say(f"{what}: {candidates} candidate{'s' if candidates != 1 else ''} "
                      f"\u00d7 {folds} folds = {units} units"
                      + (f", {done} already stored" if done else ""))
            return
        if self.rung_bar is not None:
            self.rung_bar.close()
        self.rung_bar = self._bar(total=units, initial=done, unit="unit", desc=what,
                                  position=1, leave=False)

    def unit(self, result, cpu_s, epochs):
        with self._lock:
            self._session_epochs += max(0, epochs - self.epochs)
            self.units += 1
            self.cpu_s, self.epochs = cpu_s, epochs
        if not self.bars:
            return
        if self.rung_bar is not None:
            self.rung_bar.update(1)
        if self.main is not None:
            target = round(cpu_s) if self.cpu_budget else epochs
            self.main.update(max(0, min(target, self.main.total) - self.main.n))

    def close(self):
        self._stop.set()
        if self._ticker is not None:
            self._ticker.join(timeout=5)
            self._ticker = None
            self._say(self.status(final=True))
        for bar in (self.rung_bar, self.main):
            if bar is not None:
                bar.close()

    # ------------------------------------------------------------ the status line

    def status(self, final: bool = False) -> str:
        """One line: units stored, training CPU, what is left (in epochs) and the pace;
        ``final``: what was done, the epochs trained in all."""
        with self._lock:
            units, cpu_s, epochs = self.units, self.cpu_s, self.epochs
            session, elapsed = self._session_epochs, self.clock() - self._started
        left = max(0, self.plan_epochs - epochs)
        parts = [f"{units:,} units stored", f"training CPU {format_duration(cpu_s)}"]
        if self.cpu_budget:
            parts.append(f"CPU budget {format_duration(self.cpu_budget)}")
        if self.epoch_budget:
            left = min(left, max(0, self.epoch_budget - epochs))
            parts.append(f"epoch budget {self.epoch_budget:,}")
        if final:
            return "progress: " + ", ".join(parts) + f"; {epochs:,} epochs trained in all"
        rest = f"at most {left:,} epochs of the plan left"
        if session and elapsed > 0 and left:
            rest += f" (about {format_duration(left * elapsed / session)} at this pace)"
        return "progress: " + ", ".join(parts) + "; " + rest

    def _tick(self) -> None:
        while not self._stop.wait(min(1.0, self.every_s)):
            if self.clock() - self._last_line >= self.every_s:
                self._say(self.status())

    def _say(self, text: str) -> None:
        with self._lock:
            self._last_line = self.clock()
            print(text, file=self.stream, flush=True)

    # ------------------------------------------------------------ bars

    def _bar(self, **kw):
        from tqdm import tqdm
        return tqdm(file=self.stream, dynamic_ncols=True, **kw)

    def _main_bar(self):
        if self.cpu_budget:
            total = round(self.cpu_budget)
            return self._bar(total=total, initial=min(round(self.cpu_s), total),
                             unit="cpu-s", desc="CPU budget", position=0)
        total = self.plan_epochs
        desc = "plan (at most)"
        if self.epoch_budget:
            total, desc = min(total, self.epoch_budget), "epoch budget"
        return self._bar(total=total, initial=min(self.epochs, total), unit="epoch",
                         desc=desc, position=0)
