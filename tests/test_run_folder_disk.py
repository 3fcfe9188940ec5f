"""Tests of run folders on a full disk and on a read-only file system (real small tmpfs
mounts), and of a resume that rewrites nothing it only reads."""

from __future__ import annotations

import os
import sqlite3
from pathlib import Path

import pytest

from helpers import tiny_request
from run_folders import (clean_failure, fill, leftovers, remount, search_argv, small_disk,
                         snapshot, space_file)
from search.rank import rank_run
from search.session import run_search
from search.store import FILE, RunStore
from search.unit import DATA_FILES, run_unit
from tinyconv.cli import main


@pytest.fixture(scope="module")
def reference(tmp_path_factory) -> Path:
    """The tiny search, uninterrupted, in this process."""
    out = tmp_path_factory.mktemp("reference") / "run"
    run_search(tiny_request(out))
    return out


@pytest.fixture(autouse=True)
def no_report(monkeypatch):
    """The search command's report step is not what these tests check."""
    import tinyconv.commands.search as cmd
    monkeypatch.setattr(cmd, "write_report_if_available", lambda d: ("missing", "skipped"))


_UNITS_SEEN: list = []


def _fill_disk_at_unit(task, data):
    """Unit work (in this process) that fills the run folder's disk during the sixth unit."""
    _UNITS_SEEN.append(task.key)
    if len(_UNITS_SEEN) == 6:
        fill(Path(os.environ["TINYCONV_TEST_RUN"]).parent)
    return run_unit(task, data)


def test_full_disk_while_storing_units(reference, tmp_path, capsys, monkeypatch):
    """The disk fills up during a search: exit 2 saying so, the units before are kept, no
    temporary file is left, and once space is freed the same command ends as uninterrupted."""
    import search.executors as executors
    with small_disk(tmp_path / "disk", "2m") as disk:
        run = disk / "run"
        monkeypatch.setenv("TINYCONV_TEST_RUN", str(run))
        monkeypatch.setattr(executors, "default_work", lambda: _fill_disk_at_unit)
        _UNITS_SEEN.clear()
        argv = search_argv(space_file(tmp_path), run)
        assert main(argv) == 2
        err = capsys.readouterr().err
        assert clean_failure(err), err
        assert f"cannot write {run / FILE}: the disk is full" in err
        assert "the 5 units stored before are kept. Free some space and run the same " \
               "command again to resume" in err
        assert leftovers(run) == []
        with RunStore(run) as store:
            assert len(store.units()) == 5
        (disk / "filler").unlink()
        monkeypatch.setattr(executors, "default_work", lambda: run_unit)
        assert main(argv) == 0
        assert (run / "ranking.csv").read_bytes() == (reference / "ranking.csv").read_bytes()
        assert leftovers(run) == []


def test_full_disk_while_saving_the_data(tmp_path, capsys):
    """Data larger than the free space: exit 2 naming the file, nothing partial left; with
    more space the same command runs."""
    space = space_file(tmp_path)
    with small_disk(tmp_path / "disk", "1m") as disk:
        run = disk / "run"
        # 800 RGB images of 32 x 32: 2.4 MB of pixels on a 1 MB disk.
        argv = search_argv(space, run, "--budget-epochs", "1")
        argv[1] = "builtin:tiles?n=100&size=32&seed=0"
        assert main(argv) == 2
        err = capsys.readouterr().err
        assert clean_failure(err), err
        assert f"cannot write {run / 'images.npy'}: the disk is full; nothing partial was " \
               "left there. Free some space and run the same search command again" in err
        assert leftovers(run) == [] and not (run / "images.npy").exists()
        remount(disk, "size=8m")
        assert main(argv) == 0
        with RunStore(run) as store:
            assert store.outcome()["state"] == "budget_epochs"


def test_read_only_run_folder_is_ranked_and_reported_elsewhere(reference, tmp_path, capsys):
    """A finished run on a read-only file system: the report with --out re-ranks it; the
    report without --out and a search there exit 2 saying what to do; nothing changes."""
    space = space_file(tmp_path)
    with small_disk(tmp_path / "disk", "4m") as disk:
        run = disk / "run"
        argv = search_argv(space, run)
        assert main(argv) == 0
        remount(disk, "ro")
        before = snapshot(run)
        page = tmp_path / "page"
        assert main(["report", str(run), "--out", str(page), "--rank-by", "accuracy"]) == 0
        with RunStore(reference) as store:
            by_accuracy = rank_run(store, by="accuracy")
        assert (page / "ranking.csv").read_text() == by_accuracy.to_csv(index=False)
        capsys.readouterr()
        assert main(["report", str(run)]) == 2
        err = capsys.readouterr().err
        assert clean_failure(err)
        assert f"cannot write the report into the run folder {run}: it is not writable" in err
        assert "give --out A_FOLDER_YOU_CAN_WRITE" in err
        assert main(argv) == 2
        err = capsys.readouterr().err
        assert clean_failure(err)
        assert f"--out {run}: the run folder cannot be written (it is on a read-only file " \
               "system)" in err and f"tinyconv report {run} --out ANOTHER_FOLDER" in err
        assert snapshot(run) == before
        remount(disk, "rw")


def test_resume_rewrites_nothing_it_only_reads(reference, tmp_path):
    """Resuming a finished run leaves the data copies and the ranking file untouched and
    adds no unit; the store passes SQLite's integrity check."""
    run = tmp_path / "run"
    run_search(tiny_request(run))
    kept = {n: (run / n).stat().st_mtime_ns for n in (*DATA_FILES, "ranking.csv")}
    again = run_search(tiny_request(run))
    assert again.outcome.units_run == 0
    assert {n: (run / n).stat().st_mtime_ns for n in kept} == kept
    con = sqlite3.connect(f"file:{run / FILE}?mode=ro", uri=True)
    assert con.execute("PRAGMA integrity_check").fetchall() == [("ok",)]
    con.close()
