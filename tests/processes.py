"""Shared helpers for tests with real processes: who is a child of whom, who is
still alive, and ending a test with nothing left running.

Process facts come from Linux's /proc (proc(5)): field 3 of ``/proc/PID/stat``
is the state (``Z`` a zombie: dead, waiting to be reaped), field 4 the parent
process id.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

#: How long a test waits for processes that should end (a bound, not a speed claim).
PATIENCE_S = 20.0


def _stat(pid: int) -> tuple[str, int] | None:
    """(state, parent id) of a process, or None when it is gone."""
    try:
        text = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return None
    # The command name (field 2) sits in parentheses and may hold spaces.
    fields = text[text.rindex(")") + 2:].split()
    return fields[0], int(fields[1])


def alive(pid: int) -> bool:
    """Whether a process exists and is not a zombie."""
    stat = _stat(pid)
    return stat is not None and stat[0] != "Z"


def descendants(pid: int) -> list[int]:
    """Every living process below ``pid`` (children, their children, ...)."""
    parents: dict[int, int] = {}
    for entry in Path("/proc").iterdir():
        if entry.name.isdigit():
            stat = _stat(int(entry.name))
            if stat is not None and stat[0] != "Z":
                parents[int(entry.name)] = stat[1]
    found, frontier = [], [pid]
    while frontier:
        parent = frontier.pop()
        kids = [p for p, pp in parents.items() if pp == parent]
        found += kids
        frontier += kids
    return found


def wait_gone(pids: list[int], patience: float = PATIENCE_S) -> list[int]:
    """Wait until none of ``pids`` lives; returns those still alive after ``patience``."""
    deadline = time.monotonic() + patience
    while time.monotonic() < deadline:
        left = [p for p in pids if alive(p)]
        if not left:
            return []
        time.sleep(0.1)
    return [p for p in pids if alive(p)]


def kill_all(pids: list[int]) -> None:
    """SIGKILL whatever of ``pids`` still lives (clean-up after a failed test)."""
    for pid in pids:
        if alive(pid):
            try:
                os.kill(pid, signal.SIGKILL)
            except ProcessLookupError:
                pass


def tinyconv(*args: str, **popen) -> subprocess.Popen:
    """``python -m tinyconv ARGS`` in a new session, stdout and stderr as text pipes."""
    return subprocess.Popen([sys.executable, "-m", "tinyconv", *args], text=True,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            start_new_session=True, **popen)


def wait_for(condition, what: str, patience: float = 120.0, proc=None) -> None:
    """Poll ``condition()`` until true; fail naming ``what`` (and the process's
    output, when ``proc`` ended first)."""
    deadline = time.monotonic() + patience
    while not condition():
        if proc is not None and proc.poll() is not None:
            out, err = proc.communicate()
            pytest.fail(f"the process ended (exit {proc.returncode}) before {what}:\n{err}")
        if time.monotonic() > deadline:
            pytest.fail(f"gave up waiting for {what}")
        time.sleep(0.05)


def pool_workers(pid: int) -> list[int]:
    """Living worker processes of the local pools of ``pid``: spawned ones (their command
    line runs ``spawn_main``) and those forked by its fork server (a process whose
    command line runs ``forkserver``, forked by the server below ``pid``); neither the
    resource tracker nor the server itself."""
    found = []
    for child in descendants(pid):
        try:
            cmdline = Path(f"/proc/{child}/cmdline").read_bytes()
        except OSError:
            continue
        stat = _stat(child)
        forked = b"forkserver" in cmdline and stat is not None and stat[1] != pid
        if b"spawn_main" in cmdline or forked:
            found.append(child)
    return found
