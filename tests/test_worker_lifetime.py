"""Tests that local workers end with their search process, however it is killed."""

from __future__ import annotations

import os
import signal

import pytest

from helpers import tiny_request, units_stored
from processes import PATIENCE_S, descendants, kill_all, pool_workers, tinyconv, wait_for, \
    wait_gone
from run_folders import search_argv, space_file
from search.session import run_search
from search.store import FILE

pytestmark = pytest.mark.slow



@pytest.mark.parametrize("moment", ["warming up", "after two units"])
def test_kill_9_of_the_search_ends_its_workers(moment, tmp_path):
    """SIGKILL of the search process alone (not its group): its workers and the resource
    tracker end on their own, and the same command then ends as an uninterrupted run."""
    run = tmp_path / "run"
    proc = tinyconv(*search_argv(space_file(tmp_path), run, workers=2))
    left: list[int] = []
    try:
        if moment == "warming up":
            wait_for(lambda: len(pool_workers(proc.pid)) == 2, "two workers started", proc=proc)
        else:
            wait_for(lambda: units_stored(run / FILE) >= 2, "two units stored", proc=proc)
        below = descendants(proc.pid)
        assert len(pool_workers(proc.pid)) == 2
        os.kill(proc.pid, signal.SIGKILL)   # no clean-up runs in the search process
        proc.wait()
        # A bound that fails a hang (a worker waiting on a pipe for minutes), not a
        # measure of speed: the workers notice their parent is gone within a second.
        left = wait_gone(below, PATIENCE_S)
        assert left == [], f"still running after the search was killed: {left}"
    finally:
        kill_all([*left, *descendants(proc.pid)])
        proc.communicate()
    reference = tmp_path / "reference"
    run_search(tiny_request(reference))
    again = run_search(tiny_request(run))
    assert again.outcome.state == "complete"
    assert (run / "ranking.csv").read_bytes() == (reference / "ranking.csv").read_bytes()
