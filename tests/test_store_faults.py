"""Tests of a damaged, foreign or removed run store: named errors, nothing lost or restarted."""

from __future__ import annotations

import os
import re
import sqlite3
import subprocess
import sys
from pathlib import Path

import pytest

from helpers import tiny_request
from run_folders import (clean_failure, copy_run, leftovers, search_argv, snapshot,
                         space_file)
from search.session import run_search
from search.store import FILE, RunStore
from search.store_faults import RESCUE_NAME
from tinyconv.cli import main
from tinyconv.errors import StoreError


@pytest.fixture(scope="module")
def finished(tmp_path_factory) -> Path:
    """A finished tiny search, run in this process."""
    out = tmp_path_factory.mktemp("finished") / "run"
    run_search(tiny_request(out))
    return out


@pytest.fixture(autouse=True)
def no_report(monkeypatch):
    """The search command's report step is not what these tests check."""
    import tinyconv.commands.search as cmd
    monkeypatch.setattr(cmd, "write_report_if_available", lambda d: ("missing", "skipped"))


def _truncate(path: Path) -> None:
    os.truncate(path, path.stat().st_size // 2)


def _destroy_header(path: Path) -> None:
    with open(path, "r+b") as fh:
        fh.write(b"\0" * 100)


def _overwrite_table_page(path: Path) -> None:
    # The root page of the units table, found the documented way (sqlite_master's
    # rootpage, pages numbered from 1; SQLite "Database File Format", 1.6 and 2.6):
    # its b-tree page header gets bytes that are no page type at all.
    with sqlite3.connect(path) as con:
        (root,) = con.execute("SELECT rootpage FROM sqlite_master WHERE name='units'").fetchone()
        (page,) = con.execute("PRAGMA page_size").fetchone()
    con.close()
    with open(path, "r+b") as fh:
        fh.seek((root - 1) * page)
        fh.write(b"\xff" * 64)


def _empty(path: Path) -> None:
    os.truncate(path, 0)


DAMAGE = {
    "truncated": (_truncate, r"it was cut short"),
    "overwritten": (_overwrite_table_page, r"bytes inside it were overwritten"),
    "header destroyed": (_destroy_header, r"the header was overwritten"),
    "zero bytes": (_empty, r"the file is empty \(0 bytes\)"),
}


@pytest.mark.parametrize("kind", list(DAMAGE))
def test_damaged_store_is_a_named_error_and_left_alone(kind, finished, tmp_path, capsys):
    """Each kind of damage stops search and report with exit 2 naming the file; no change."""
    damage, detail = DAMAGE[kind]
    run = copy_run(finished, tmp_path / "run")
    damage(run / FILE)
    before = snapshot(run)
    argv = search_argv(space_file(tmp_path), run)
    for args in (argv, ["report", str(run), "--out", str(tmp_path / "page")]):
        assert main(args) == 2
        err = capsys.readouterr().err
        assert clean_failure(err), err
        assert f"{run / FILE}: the run store is damaged: " in err and \
            "Nothing was changed" in err
        assert re.search(detail, err), err
    with pytest.raises(StoreError, match=detail):
        RunStore(run)
    assert snapshot(run) == before   # never a fresh start over it, never a repair attempt


def test_sqlite_file_of_another_kind_is_refused(tmp_path, capsys):
    """A SQLite file without the store's tables is named as not a run store."""
    run = tmp_path / "run"
    run.mkdir()
    with sqlite3.connect(run / FILE) as con:
        con.execute("CREATE TABLE notes (text TEXT)")
    con.close()
    assert main(["report", str(run)]) == 2
    err = capsys.readouterr().err
    assert clean_failure(err) and "is not a tinyconv run store" in err


def test_folder_whose_store_was_removed_is_not_restarted(finished, tmp_path, capsys):
    """Files of an earlier search without its store: exit 2 listing them; no new store."""
    run = copy_run(finished, tmp_path / "run")
    (run / FILE).unlink()
    assert main(search_argv(space_file(tmp_path), run)) == 2
    err = capsys.readouterr().err
    assert clean_failure(err)
    assert "holds files of an earlier search (images.npy, labels.npy, folds.npy, " \
           "ranking.csv) but no run.sqlite: its store was removed" in err
    assert not (run / FILE).exists()


_UNITS_SEEN: list = []


def _delete_store_at_unit(task, data):
    """Unit work (in this process) that removes the run store while the fifth unit runs."""
    from search.unit import run_unit
    _UNITS_SEEN.append(task.key)
    if len(_UNITS_SEEN) == 5:
        (Path(os.environ["TINYCONV_TEST_RUN"]) / FILE).unlink()
    return run_unit(task, data)


def test_store_removed_while_running_is_rescued(finished, tmp_path, capsys, monkeypatch):
    """The removal is found at the next write; the units are rescued; resuming from the
    rescued file ends in the uninterrupted ranking."""
    import search.executors as executors
    run = tmp_path / "run"
    monkeypatch.setenv("TINYCONV_TEST_RUN", str(run))
    monkeypatch.setattr(executors, "default_work", lambda: _delete_store_at_unit)
    _UNITS_SEEN.clear()
    argv = search_argv(space_file(tmp_path), run)
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert clean_failure(err), err
    rescued = run / RESCUE_NAME
    assert f"{run / FILE} was removed (or replaced) while the search was writing it" in err
    assert f"the 4 units stored so far are saved in {rescued} (the unit that had just " \
           "finished is saved with them); to resume, rename it to" in err
    assert not (run / FILE).exists() and leftovers(run) == []
    con = sqlite3.connect(f"file:{rescued}?mode=ro", uri=True)
    assert con.execute("SELECT COUNT(*) FROM units").fetchone() == (5,)
    con.close()
    # Another search there is refused (its store is missing) and points at the copy.
    monkeypatch.undo()
    import tinyconv.commands.search as cmd
    monkeypatch.setattr(cmd, "write_report_if_available", lambda d: ("missing", "skipped"))
    assert main(argv) == 2
    assert f"a copy of its units is in {rescued}: rename it to run.sqlite" in \
        capsys.readouterr().err
    rescued.rename(run / FILE)
    assert main(argv) == 0
    assert (run / "ranking.csv").read_bytes() == (finished / "ranking.csv").read_bytes()


_KILL_IN_COMMIT = """
import os, sqlite3, sys
con = sqlite3.connect(sys.argv[1], isolation_level=None)
con.execute("PRAGMA cache_size = 1")   # spill changed pages to the file before the commit
con.execute("BEGIN IMMEDIATE")
con.execute("UPDATE units SET message = hex(randomblob(400))")
os._exit(9)                            # killed in the middle of the transaction
"""


def test_reader_after_a_kill_in_commit_reads_without_writing(finished, tmp_path):
    """A store a process was killed in the middle of writing is read as last committed,
    without playing back its journal in the run folder (a reader never writes there)."""
    run = copy_run(finished, tmp_path / "run")
    subprocess.run([sys.executable, "-c", _KILL_IN_COMMIT, str(run / FILE)], check=False)
    journal = run / f"{FILE}-journal"
    assert journal.is_file() and journal.stat().st_size > 0
    before = snapshot(run)
    with RunStore(run) as store:
        units = store.units()
    with RunStore(finished) as store:
        assert units.equals(store.units())
    assert set(units["message"]) == {""}
    assert snapshot(run) == before


def test_report_changes_nothing_in_the_run_folder(finished, tmp_path):
    """The report with --out reads the run folder and writes only into --out."""
    run = copy_run(finished, tmp_path / "run")
    before = snapshot(run)
    assert main(["report", str(run), "--out", str(tmp_path / "page")]) == 0
    assert snapshot(run) == before
    assert (tmp_path / "page" / "report.html").is_file()
