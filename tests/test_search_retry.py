"""Tests of units that fail for reasons outside them: run again, never stored as failed."""

from __future__ import annotations

import os
import signal
import sqlite3
from pathlib import Path

import pytest

from helpers import tiny_request
from processes import pool_workers, wait_gone
from run_folders import copy_run
from search.failures import ATTEMPTS
from search.session import run_search
from search.store import FILE, RunStore
from search.unit import run_unit
from tinyconv.workflows.summary import summary_lines
from tinyconv.errors import WorkersLostError

UNLUCKY = ("8x8gray/c2k3-p2", 0, 0)   # (candidate, fold, rung) of the unit that suffers


@pytest.fixture(scope="module")
def reference(tmp_path_factory) -> Path:
    """The tiny search, uninterrupted, in this process."""
    out = tmp_path_factory.mktemp("reference") / "run"
    run_search(tiny_request(out))
    return out


def _count_run(task) -> int:
    """Number the runs of the unlucky unit across processes (files in a folder)."""
    marks = Path(os.environ["TINYCONV_TEST_MARKS"])
    n = len(list(marks.iterdir()))
    (marks / f"run-{n}").touch()
    return n


def killed_twice(task, data):
    """The unlucky unit's worker is killed with SIGKILL on its first two runs."""
    if task.key == UNLUCKY and _count_run(task) < 2:
        os.kill(os.getpid(), signal.SIGKILL)
    return run_unit(task, data)


def killed_always(task, data):
    """The unlucky unit's worker is killed with SIGKILL on every run."""
    if task.key == UNLUCKY:
        _count_run(task)
        os.kill(os.getpid(), signal.SIGKILL)
    return run_unit(task, data)


_RAISED: list = []


def out_of_memory_once(task, data):
    """The unlucky unit runs out of memory on its first run (in this process)."""
    if task.key == UNLUCKY and not _RAISED:
        _RAISED.append(task.key)
        raise MemoryError("no room for the activations")
    return run_unit(task, data)


def _same_ranking(run: Path, reference: Path) -> None:
    assert (run / "ranking.csv").read_bytes() == (reference / "ranking.csv").read_bytes()


@pytest.mark.slow
def test_worker_killed_twice_is_run_again(reference, tmp_path, monkeypatch):
    """A unit whose worker is killed, and whose next worker is killed too, runs a third
    time; nothing is stored as failed, the ranking is the uninterrupted one."""
    marks = tmp_path / "marks"
    marks.mkdir()
    monkeypatch.setenv("TINYCONV_TEST_MARKS", str(marks))
    summary = run_search(tiny_request(tmp_path / "run", workers=2), work=killed_twice)
    assert len(list(marks.iterdir())) == 3
    assert summary.outcome.state == "complete" and summary.outcome.retried >= 2
    assert (RunStore(tmp_path / "run").units()["status"] == "done").all()
    _same_ranking(tmp_path / "run", reference)
    assert wait_gone(pool_workers(os.getpid())) == []


@pytest.mark.slow
def test_worker_killed_every_time_stops_the_session_resumably(reference, tmp_path,
                                                               monkeypatch):
    """A unit whose worker dies on every run stops the session after its rung with a named
    error; it is not stored, and the next session runs it and ends as uninterrupted."""
    marks = tmp_path / "marks"
    marks.mkdir()
    monkeypatch.setenv("TINYCONV_TEST_MARKS", str(marks))
    run = tmp_path / "run"
    with pytest.raises(WorkersLostError,
                       match=r"1 unit could not run: 8x8gray/c2k3-p2 fold 0 at 1 epochs: its "
                             r"worker process died \(killed, or out of memory\), 3 times\. "
                             r"The 17 finished units are kept in .*run.sqlite\. Run the same "
                             r"command again"):
        run_search(tiny_request(run, workers=1), work=killed_always)
    assert len(list(marks.iterdir())) == ATTEMPTS
    with RunStore(run) as store:
        units = store.units()
        assert store.outcome()["state"] == "stopped"
    assert len(units) == 17 and set(units["rung"]) == {0}
    assert (units["status"] == "done").all()
    again = run_search(tiny_request(run))
    assert again.outcome.state == "complete"
    _same_ranking(run, reference)
    assert wait_gone(pool_workers(os.getpid())) == []


def test_out_of_memory_is_run_again(reference, tmp_path):
    """A unit that runs out of memory once runs again; the summary counts the retry."""
    _RAISED.clear()
    summary = run_search(tiny_request(tmp_path / "run"), work=out_of_memory_once)
    assert _RAISED == [UNLUCKY]
    assert summary.outcome.retried == 1 and summary.outcome.failed == 0
    assert "(0 diverged, 0 failed, 1 retried after a lost worker)" in \
        "\n".join(summary_lines(summary))
    _same_ranking(tmp_path / "run", reference)


def test_failures_stored_by_earlier_versions_are_run_again(reference, tmp_path):
    """A store holding a unit 'failed' because its worker died (as earlier versions
    stored it) runs that unit again on resume and ends in the uninterrupted ranking."""
    run = copy_run(reference, tmp_path / "run")
    con = sqlite3.connect(run / FILE)
    with con:
        (uid,) = con.execute("SELECT id FROM units WHERE candidate = ? AND fold = ? AND "
                             "rung = ?", UNLUCKY).fetchone()
        con.execute("DELETE FROM predictions WHERE unit = ?", (uid,))
        con.execute("UPDATE units SET status = 'failed', message = 'the worker process died "
                    "while running this unit (no message); it may have run out of memory' "
                    "WHERE id = ?", (uid,))
    con.close()
    (run / "ranking.csv").unlink()
    summary = run_search(tiny_request(run))
    assert summary.outcome.units_run == 1 and summary.outcome.retried == 1
    _same_ranking(run, reference)
