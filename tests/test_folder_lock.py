"""Tests of search/folder_lock.py: one search per run folder, with real processes."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
from pathlib import Path

import pytest

from helpers import tiny_request
from processes import descendants, kill_all, tinyconv, wait_gone
from run_folders import clean_failure, copy_run, search_argv, space_file
from search.folder_lock import LOCK_NAME, FolderLock
from search.session import run_search
from search.store import FILE, RunStore
from tinyconv.cli import main
from tinyconv.errors import FolderBusyError

_HOLD = """
import sys, time
from search.folder_lock import FolderLock
lock = FolderLock.take(sys.argv[1])
print("held", flush=True)
time.sleep(300)
"""


@pytest.fixture(scope="module")
def reference(tmp_path_factory) -> Path:
    """The tiny search, uninterrupted, in this process."""
    out = tmp_path_factory.mktemp("reference") / "run"
    run_search(tiny_request(out))
    return out


@pytest.fixture()
def holder(tmp_path):
    """Start a process that holds a folder's lock; kill it at the end."""
    procs = []

    def start(folder: Path) -> subprocess.Popen:
        proc = subprocess.Popen([sys.executable, "-c", _HOLD, str(folder)], text=True,
                                stdout=subprocess.PIPE, cwd=os.getcwd())
        assert proc.stdout.readline().strip() == "held"
        procs.append(proc)
        return proc

    yield start
    kill_all([p.pid for p in procs])
    for proc in procs:
        proc.wait()


def test_second_search_exits_2_naming_the_holder(holder, reference, tmp_path, capsys,
                                                 monkeypatch):
    """A search on a held folder exits 2 naming folder and process; once the holder is
    killed (kill -9) the lock is free at once and the search gives the usual ranking."""
    import tinyconv.commands.search as cmd
    monkeypatch.setattr(cmd, "write_report_if_available", lambda d: ("missing", "skipped"))
    run = tmp_path / "run"
    proc = holder(run)
    argv = search_argv(space_file(tmp_path), run)
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert clean_failure(err), err
    assert f"--out {run}: another search (process {proc.pid}) is writing this run folder" \
           in err and f"kill {proc.pid}" in err
    assert not (run / FILE).exists()
    with pytest.raises(FolderBusyError, match=f"process {proc.pid}") as caught:
        FolderLock.take(run)
    assert caught.value.pid == proc.pid
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    assert main(argv) == 0   # no stale lock after a kill -9
    assert (run / "ranking.csv").read_bytes() == (reference / "ranking.csv").read_bytes()
    assert (run / LOCK_NAME).read_text().strip() == str(os.getpid())


def test_report_reads_a_folder_while_a_search_holds_it(holder, reference, tmp_path):
    """The report takes no lock: it reads a held run folder and writes elsewhere."""
    run = copy_run(reference, tmp_path / "run")
    holder(run)
    assert main(["report", str(run), "--out", str(tmp_path / "page")]) == 0
    assert (tmp_path / "page" / "ranking.csv").is_file()


def test_lock_is_released_and_taken_again(tmp_path):
    """Leaving the with-block lets go; the same process can take the folder again."""
    with FolderLock.take(tmp_path / "run"):
        pass
    with FolderLock.take(tmp_path / "run") as lock:
        assert lock.run_dir == tmp_path / "run"


@pytest.mark.slow
def test_two_searches_started_together(reference, tmp_path):
    """Two real searches started at once on one folder: one runs, the other exits 2 naming
    it; the ranking is the uninterrupted one and no unit is stored twice."""
    space, run = space_file(tmp_path), tmp_path / "run"
    argv = search_argv(space, run, workers=1)
    procs = [tinyconv(*argv), tinyconv(*argv)]
    try:
        results = [(p.pid, *p.communicate(timeout=300), p.returncode) for p in procs]
    finally:
        kill_all([pid for p in procs for pid in [p.pid, *descendants(p.pid)]])
    codes = sorted(code for *_, code in results)
    assert codes == [0, 2], results
    (winner,) = [pid for pid, _o, _e, code in results if code == 0]
    (err,) = [e for _p, _o, e, code in results if code == 2]
    assert clean_failure(err) and f"another search (process {winner})" in err, err
    assert (run / "ranking.csv").read_bytes() == (reference / "ranking.csv").read_bytes()
    units = RunStore(run).units()
    assert not units.duplicated(["candidate", "fold", "rung"]).any()
    assert wait_gone([p.pid for p in procs]) == []


_CHILD_KEEPS_NOTHING = """
import subprocess, sys
from search.folder_lock import FolderLock
with FolderLock.take(sys.argv[1]):
    child = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(60)"],
                             close_fds=False)
try:
    with FolderLock.take(sys.argv[1]):
        print("taken again while the child lives")
finally:
    child.kill()
    child.wait()
"""


def test_worker_processes_do_not_hold_the_lock(tmp_path):
    """A process started by the lock holder, even one keeping every inheritable
    descriptor, does not hold the lock once the holder lets go (close-on-exec).

    Run in a fresh process: here, threads left by earlier tests may start processes
    of their own at any moment, and a process being started holds every descriptor
    until it runs its program."""
    done = subprocess.run([sys.executable, "-c", _CHILD_KEEPS_NOTHING, str(tmp_path / "run")],
                          capture_output=True, text=True, timeout=60)
    assert done.stdout.strip() == "taken again while the child lives", done.stderr
