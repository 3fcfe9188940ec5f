"""Writing a run store: the search's main process only (see :mod:`search.store`).

:class:`RunWriter` is the store :meth:`search.store.RunStore.start` returns.
Every write is one transaction; any fault (a full disk, a read-only folder,
a damaged file) is a :class:`~tinyconv.errors.StoreError` saying what was
stored and what was not, and a store removed while the search runs is found
at the next write, its units copied to a rescue file first
(:mod:`search.store_faults`).
"""

from __future__ import annotations

import contextlib
import json
import os
import sqlite3
import time
from pathlib import Path
from typing import Any, Callable

import numpy as np
import pandas as pd

from search import store_faults as faults
from search.config import EXTENDABLE, differences
from search.failures import outside_message
from search.store import FILE, SCHEMA_SQL, SCHEMA_VERSION, RunStore, connect
from search.unit import DATA_FILES, UnitResult
from tinyconv.errors import RunError, StoreError

#: Files a search leaves beside its store: a folder holding any of them but no
#: store had its store removed (a fresh start there would hide the loss).
RUN_FILES = (*DATA_FILES, "ranking.csv", faults.RESCUE_NAME)


class RunWriter(RunStore):
    """A run store open for writing; made by :meth:`start`."""

    #: Set once the file was found removed: the message every later write repeats
    #: (the units were rescued once; a second copy would only confuse).
    _gone: str | None = None
    #: Units stored as failed for a reason outside them (by an earlier version)
    #: that :meth:`start` removed so that the search runs them again.
    reopened: int = 0

    def __init__(self, run_dir: str | Path):
        super().__init__(run_dir, writable=True)

    @classmethod
    def start(cls, run_dir: str | Path, settings: dict[str, Any],
              candidates: pd.DataFrame, removed: dict[str, Any] | None = None) -> "RunWriter":
        """Open a run folder for a search, creating the store on first use.

        Parameters
        ----------
        settings : dict
            ``SearchSettings.as_dict()``.
        candidates : DataFrame
            Columns ``CANDIDATE_COLUMNS`` (``over`` and ``scheduled`` optional),
            every candidate of the space, in enumeration order.
        removed : dict, optional
            What the budget filter removed (budget name -> count), for the record.

        Returns
        -------
        RunWriter

        Raises
        ------
        RunError
            When the folder holds a run with other settings or other data.
        StoreError
            When the store is damaged, or its folder holds files of a run
            whose store is gone, or it cannot be written.
        """
        run_dir = Path(run_dir)
        if run_dir.exists() and not run_dir.is_dir():
            raise RunError(f"--out {run_dir}: exists and is not a folder; give a folder path")
        run_dir.mkdir(parents=True, exist_ok=True)
        path = run_dir / FILE
        if not path.exists():
            _refuse_orphaned_files(run_dir)
            _create(path, settings, candidates, removed)
            return cls(run_dir)
        store = cls(run_dir)
        try:
            stored = store.config()
            diff = differences(stored, settings)
            if diff:
                raise RunError(
                    f"{run_dir} holds a run with other settings or data:\n  - "
                    + "\n  - ".join(diff)
                    + f"\nUse another --out folder for this search, or repeat the "
                      f"stored settings to resume the run in {run_dir}.")
            changed = {k: settings.get(k) for k in EXTENDABLE
                       if stored.get(k) != settings.get(k)}
            if changed:
                store._write(lambda con: _put_meta(con, "settings", {**stored, **changed}),
                             "the new budgets were not recorded")
            store._reopen_outside_failures()
        except BaseException:
            store.close()
            raise
        return store

    def _reopen_outside_failures(self) -> None:
        """Remove units stored as failed for a reason outside them (a dead worker, a
        lost scheduler: :func:`search.failures.outside_message`), so they run again."""
        ids = [uid for uid, status, message in
               self._rows("SELECT id, status, message FROM units WHERE status = 'failed'")
               if outside_message(status, message)]
        if ids:
            marks = ", ".join("?" * len(ids))
            self._write(lambda con: con.execute(f"DELETE FROM units WHERE id IN ({marks})",
                                                ids),
                        "units failed for outside reasons are not reopened")
            self.reopened = len(ids)

    def _write(self, change: Callable[[sqlite3.Connection], Any], lost: str,
               on_removed: Callable[[sqlite3.Connection], Any] | None = None) -> Any:
        """Run ``change(con)`` in one transaction; any fault becomes a StoreError.

        ``lost`` says what a failure leaves unstored. When the file was removed
        (or replaced) since it was opened, the units in it are rescued into a
        new file first, with ``on_removed(rescue_connection)`` written there too.
        """
        con = self._con
        if self._gone is not None:
            raise StoreError(self._gone)
        if faults.moved(self.path, self._opened):
            raise self._removed(lost, on_removed)
        try:
            con.execute("BEGIN IMMEDIATE")
            try:
                out = change(con)
                con.execute("COMMIT")
            except BaseException:
                with contextlib.suppress(sqlite3.Error):  # SQLite may have rolled back itself
                    con.execute("ROLLBACK")
                raise
        except sqlite3.IntegrityError:
            raise  # a broken promise of the caller (e.g. a unit stored twice), not a fault
        except sqlite3.Error as exc:
            if faults.sqlite_name(exc) == "SQLITE_READONLY_DBMOVED" or \
                    faults.moved(self.path, self._opened):
                raise self._removed(lost, on_removed) from None
            n = self._count_units()
            raise faults.write_fault(exc, self.path, f"{lost}; the {n} units stored before "
                                     "are kept") from None
        return out

    def _count_units(self) -> int | str:
        try:
            return int(self._con.execute("SELECT COUNT(*) FROM units").fetchone()[0])
        except sqlite3.Error:
            return "all"

    def _removed(self, lost: str, on_removed) -> StoreError:
        """Rescue what the removed store held; the error that says where it went."""
        n = self._count_units()
        saved = faults.rescue(self._con, self.run_dir)
        if saved is not None and on_removed is not None:
            try:
                with contextlib.closing(connect(saved, writable=True)) as con:
                    con.execute("BEGIN IMMEDIATE")
                    on_removed(con)
                    con.execute("COMMIT")
                lost = "the unit that had just finished is saved with them"
            except sqlite3.Error:
                pass
        where = (f"the {n} units stored so far are saved in {saved} ({lost}); to resume, "
                 f"rename it to {self.path} and run the same command again"
                 if saved is not None else
                 f"the {n} units stored so far could not be saved anywhere ({lost})")
        self._gone = (f"{self.path} was removed (or replaced) while the search was "
                      f"writing it, so the search stopped: {where}")
        return StoreError(self._gone)

    def record(self, result: UnitResult) -> None:
        """Write one finished unit and its predictions in one transaction.

        Raises
        ------
        StoreError
            When the store cannot take it (see :meth:`_write`); a store removed
            while running is rescued with this unit in it.
        """
        t = result.task
        self._write(lambda con: _insert_unit(con, result),
                    f"unit {t.candidate} fold {t.fold} rung {t.rung} is not stored",
                    on_removed=lambda con: _insert_unit(con, result))

    def set_outcome(self, outcome: dict[str, Any]) -> None:
        """Record how the last search session ended (complete, out of budget, ...)."""
        self._write(lambda con: _put_meta(con, "outcome", outcome),
                    "how this session ended is not recorded")

    def set_rank_order(self, by: str) -> None:
        """Remember the order the user asked for (``per_param`` or ``accuracy``);
        writes nothing when it is already the one stored."""
        if self.rank_order() != by:
            self._write(lambda con: _put_meta(con, "rank_by", by),
                        "the ranking order is not recorded")


def check_folder(run_dir: str | Path) -> None:
    """Refuse now what :meth:`RunWriter.start` would refuse without looking at the data:
    a damaged store, or files of an earlier search whose store is gone.

    Cheap (no image is read); a search calls it before reading its data, so that a
    fault of the folder does not wait for every image to be read.

    Raises
    ------
    StoreError
        As :meth:`RunWriter.start` does for the same faults.
    """
    run_dir = Path(run_dir)
    if (run_dir / FILE).exists():
        with RunStore(run_dir) as store:
            store.config()
    elif run_dir.is_dir():
        _refuse_orphaned_files(run_dir)


def _refuse_orphaned_files(run_dir: Path) -> None:
    """Refuse to start a store where an earlier run's store was removed."""
    found = [name for name in RUN_FILES if (run_dir / name).exists()]
    if found:
        rescued = (f"; a copy of its units is in {run_dir / faults.RESCUE_NAME}: rename it "
                   f"to {FILE} to resume" if faults.RESCUE_NAME in found else "")
        raise StoreError(f"{run_dir} holds files of an earlier search ({', '.join(found)}) "
                         f"but no {FILE}: its store was removed{rescued}. Nothing was "
                         "changed. To start afresh, use another --out folder or empty "
                         "this one")


def _create(path: Path, settings: dict[str, Any], candidates: pd.DataFrame,
            removed: dict[str, Any] | None) -> None:
    """Build a new store under a temporary name, then rename it into place, so that
    ``run.sqlite`` either does not exist or holds a whole store."""
    for stale in path.parent.glob(f".new-*-{FILE}*"):  # from a search killed right here
        stale.unlink(missing_ok=True)
    building = path.with_name(f".new-{os.getpid()}-{FILE}")
    try:
        with contextlib.closing(connect(building, writable=True)) as con:
            con.execute("BEGIN IMMEDIATE")
            for stmt in filter(None, (q.strip() for q in SCHEMA_SQL.split(";"))):
                con.execute(stmt)
            _put_meta(con, "format", SCHEMA_VERSION)
            _put_meta(con, "settings", settings)
            _put_meta(con, "removed", removed or {})
            _put_meta(con, "created", time.time())
            con.executemany(
                "INSERT INTO candidates VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
                [(r.candidate, i, int(r.params), int(r.macs), int(r.peak_int8_bytes),
                  int(r.flash_bytes), int(bool(r.within_budget)),
                  str(getattr(r, "over", "") or ""),
                  int(bool(getattr(r, "scheduled", r.within_budget))))
                 for i, r in enumerate(candidates.itertuples(index=False))])
            con.execute("COMMIT")
        os.replace(building, path)  # atomic on POSIX
    except (sqlite3.Error, OSError) as exc:
        for leftover in (building, Path(f"{building}-journal")):
            leftover.unlink(missing_ok=True)
        if isinstance(exc, sqlite3.IntegrityError):
            raise
        if isinstance(exc, OSError):
            from tinyconv.files import fix_for, why_not_written
            raise StoreError(f"cannot create {path}: {why_not_written(exc)}; nothing was "
                             f"left behind. {fix_for(exc).capitalize()} and run the search "
                             "again") from None
        raise faults.write_fault(exc, path, "nothing was left behind") from None


def _insert_unit(con: sqlite3.Connection, result: UnitResult) -> None:
    """The rows of one finished unit (the caller holds the transaction)."""
    t = result.task
    cur = con.execute(
        "INSERT INTO units (candidate, fold, rung, epochs, seed, status, message, "
        "train_acc, train_loss, held_acc, held_loss, int8_acc, cpu_s, wall_s, history, "
        "finished) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
        (t.candidate, t.fold, t.rung, t.epochs, t.seed, result.status, result.message,
         result.train_acc, result.train_loss, result.held_acc, result.held_loss,
         result.int8_acc, float(result.cpu_s), float(result.wall_s), result.history_json(),
         time.time()))
    if result.status == "done":
        probs = np.ascontiguousarray(result.probs, dtype="<f4")
        con.execute("INSERT INTO predictions VALUES (?, ?, ?, ?, ?, ?, ?)",
                    (cur.lastrowid, probs.shape[0], probs.shape[1],
                     _blob(result.index), _blob(result.label), _blob(result.pred),
                     probs.tobytes()))


def _put_meta(con: sqlite3.Connection, key: str, value: Any) -> None:
    con.execute("INSERT OR REPLACE INTO meta VALUES (?, ?)", (key, json.dumps(value)))


def _blob(arr) -> bytes:
    return np.ascontiguousarray(arr, dtype="<i8").tobytes()
