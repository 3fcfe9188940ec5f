"""The run store: one SQLite file, ``run.sqlite``, in the run folder.

It holds the run's settings (with the data fingerprint and the space text),
every candidate with its costs (including those over budget, which are never
trained), and one row per finished unit with its held-out predictions.

Promises:

* a finished unit is written in **one transaction** together with its
  predictions, so a process killed at any moment leaves whole units only and
  loses at most those in flight; (candidate, fold, rung) is unique;
* only the search's main process writes (one search per folder:
  :mod:`search.folder_lock`), through the store :meth:`RunStore.start`
  returns (:mod:`search.store_writer`); readers (the
  report, the export) open the file read-only with :class:`RunStore` and
  never change it, not even to play back the journal of a search killed in
  a commit (they read a private copy then);
* :meth:`RunStore.start` on a folder that already holds a run checks that the
  settings are the same (:func:`search.config.differences`) and refuses other
  ones with a :class:`~tinyconv.errors.RunError` saying what differs;
* a store is created whole (built under another name, then renamed), so a
  short or empty ``run.sqlite`` is always damage; every fault of the file
  (damaged, removed while running, full disk, read-only) is a
  :class:`~tinyconv.errors.StoreError` naming the file and what to do
  (:mod:`search.store_faults`), and nothing is ever started afresh over it.

Tables: ``meta(key, value)`` (JSON values: ``settings``, ``format``,
``removed``, ``outcome``), ``candidates``, ``units``, ``predictions`` (arrays
as little-endian blobs: int64 index, label and prediction, float32 (m, K)
probabilities).
"""

from __future__ import annotations

import json
import os
import shutil
import sqlite3
import tempfile
from pathlib import Path
from typing import Any
from urllib.parse import quote

import numpy as np
import pandas as pd

from search import store_faults as faults
from search.config import SearchSettings
from tinyconv.errors import RunError, StoreError

FILE = "run.sqlite"
SCHEMA_VERSION = 1

SCHEMA_SQL = """
CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS candidates (
    candidate TEXT PRIMARY KEY, ordinal INTEGER NOT NULL, params INTEGER NOT NULL,
    macs INTEGER NOT NULL, peak_int8_bytes INTEGER NOT NULL, flash_bytes INTEGER NOT NULL,
    within_budget INTEGER NOT NULL, over TEXT NOT NULL DEFAULT '',
    scheduled INTEGER NOT NULL DEFAULT 1);
CREATE TABLE IF NOT EXISTS units (
    id INTEGER PRIMARY KEY, candidate TEXT NOT NULL REFERENCES candidates(candidate),
    fold INTEGER NOT NULL, rung INTEGER NOT NULL, epochs INTEGER NOT NULL,
    seed INTEGER NOT NULL, status TEXT NOT NULL, message TEXT NOT NULL,
    train_acc REAL, train_loss REAL, held_acc REAL, held_loss REAL, int8_acc REAL,
    cpu_s REAL NOT NULL, wall_s REAL NOT NULL, history TEXT NOT NULL,
    finished REAL NOT NULL, UNIQUE (candidate, fold, rung));
CREATE TABLE IF NOT EXISTS predictions (
    unit INTEGER PRIMARY KEY REFERENCES units(id), n INTEGER NOT NULL, k INTEGER NOT NULL,
    idx BLOB NOT NULL, label BLOB NOT NULL, pred BLOB NOT NULL, probs BLOB NOT NULL);
"""

UNIT_COLUMNS = ("candidate", "fold", "rung", "epochs", "status", "message", "train_acc",
                "train_loss", "held_acc", "held_loss", "int8_acc", "cpu_s", "wall_s", "history",
                "seed", "unit_id")
CANDIDATE_COLUMNS = ("candidate", "params", "macs", "peak_int8_bytes", "flash_bytes",
                     "within_budget", "over", "scheduled")


def connect(path: Path, writable: bool) -> sqlite3.Connection:
    """A connection to a store file: read-write with explicit transactions, or read-only."""
    if writable:
        con = sqlite3.connect(path, timeout=60.0, isolation_level=None)  # explicit transactions
        con.execute("PRAGMA synchronous = FULL")
    else:  # SQLite's URI form (sqlite.org/uri.html): mode=ro never writes the file
        con = sqlite3.connect(f"file:{quote(str(path))}?mode=ro", uri=True, timeout=60.0,
                              isolation_level=None)
    con.execute("PRAGMA foreign_keys = ON")
    return con


class RunStore:
    """Access to a run folder's store: read-only (the API for report and export),
    or read-write for the search through :meth:`start`.

    Parameters
    ----------
    run_dir : str or Path
        A folder holding ``run.sqlite``.
    writable : bool
        Open for writing (the search's main process only, holding the folder's lock).

    Raises
    ------
    RunError
        When there is no store in the folder; a ``StoreError`` when it is
        damaged or not a run store.
    """

    def __init__(self, run_dir: str | Path, *, writable: bool = False):
        self.run_dir = Path(run_dir)
        self.path = self.run_dir / FILE
        self._copy_dir: str | None = None
        if not self.path.is_file():
            raise RunError(f"{self.run_dir}: no run here (no {FILE}); give the folder a "
                           "search wrote with --out")
        faults.check_size(self.path)
        self._opened = os.stat(self.path)
        self._con = self._open(writable)
        try:
            version = self._meta("format")
        except StoreError:
            self.close()
            raise
        if version != SCHEMA_VERSION:
            self.close()
            if version is None:
                raise faults.not_a_store(self.path)
            raise RunError(f"{self.path}: store format {version!r}, this tinyconv reads "
                           f"format {SCHEMA_VERSION}; run the search again in a new folder")

    def _open(self, writable: bool) -> sqlite3.Connection:
        """A checked connection; a reader facing a hot journal reads a private copy."""
        con = None
        try:
            con = connect(self.path, writable)
            faults.check_opened(con, self.path)
            return con
        except sqlite3.Error as exc:
            if con is not None:
                con.close()
            if faults.sqlite_name(exc) != "SQLITE_READONLY_ROLLBACK":
                raise faults.read_fault(exc, self.path) from None
        except BaseException:
            if con is not None:
                con.close()
            raise
        # A search was killed in a commit: its journal must be played back, which
        # a read-only connection cannot do. Read a copy instead; the run folder
        # stays as it is until the next search (the writer) plays it back there.
        self._copy_dir = tempfile.mkdtemp(prefix="tinyconv-read-")
        try:
            copy = faults.copy_with_journal(self.path, Path(self._copy_dir))
            con = connect(copy, writable=True)
            faults.check_opened(con, self.path)
        except sqlite3.Error as exc:
            self.close()
            raise faults.read_fault(exc, self.path) from None
        except OSError as exc:  # e.g. the journal played back meanwhile by a new search
            self.close()
            raise StoreError(f"cannot read {self.path}: a search was stopped while writing "
                             f"it, and its journal could not be copied ({exc.strerror}); "
                             "try again, or run the same search command to repair it") from None
        except BaseException:
            self.close()
            raise
        return con

    # ------------------------------------------------------------ writing

    @classmethod
    def start(cls, run_dir: str | Path, settings: dict[str, Any],
              candidates: pd.DataFrame, removed: dict[str, Any] | None = None):
        """Open a run folder for a search, creating the store on first use;
        returns a :class:`search.store_writer.RunWriter` (see its ``start``)."""
        from search.store_writer import RunWriter
        return RunWriter.start(run_dir, settings, candidates, removed)

    # ------------------------------------------------------------ reading

    def rank_order(self) -> str | None:
        """The ranking order of the last search command (None if never set)."""
        return self._meta("rank_by")

    def _rows(self, sql: str, params: tuple = ()) -> list[tuple]:
        """Rows of a query; a fault of the file becomes a StoreError."""
        try:
            return self._con.execute(sql, params).fetchall()
        except sqlite3.Error as exc:
            raise faults.read_fault(exc, self.path) from None

    def _frame(self, sql: str, params: tuple = ()) -> pd.DataFrame:
        try:
            return pd.read_sql_query(sql, self._con, params=params)
        except (sqlite3.Error, pd.errors.DatabaseError) as exc:
            raise faults.read_fault(exc, self.path) from None

    def _meta(self, key: str) -> Any:
        rows = self._rows("SELECT value FROM meta WHERE key=?", (key,))
        return None if not rows else json.loads(rows[0][0])

    def config(self) -> dict[str, Any]:
        """The run's settings in their stored form (``SearchSettings.as_dict()``): data,
        fingerprint, classes, space text, folds, seed, budgets, eta, top_epochs,
        training settings. Code that reads a setting asks :meth:`settings`."""
        return self._meta("settings")

    def settings(self) -> SearchSettings:
        """The run's settings (:meth:`SearchSettings.from_dict` of :meth:`config`)."""
        return SearchSettings.from_dict(self.config())

    def removed(self) -> dict[str, Any]:
        """Budget name -> how many candidates it removed."""
        return self._meta("removed") or {}

    def outcome(self) -> dict[str, Any] | None:
        """How the last search session ended, or None if none has ended yet."""
        return self._meta("outcome")

    def candidates(self) -> pd.DataFrame:
        """Every candidate of the space, in enumeration order, with its costs.

        Columns: candidate, params, macs, peak_int8_bytes, flash_bytes,
        within_budget (bool), over (the budgets it exceeds, comma-joined, ""
        if none), scheduled (bool: in the search's pool; False when over
        budget or left out by ``--max-candidates``).
        """
        df = self._frame(f"SELECT {', '.join(CANDIDATE_COLUMNS)} FROM candidates "
                         "ORDER BY ordinal")
        df["within_budget"] = df["within_budget"].astype(bool)
        df["scheduled"] = df["scheduled"].astype(bool)
        return df

    def units(self, status: str | None = None) -> pd.DataFrame:
        """Finished units, ordered by (rung, candidate, fold).

        Columns: candidate, fold, rung, epochs, status, message, train_acc,
        train_loss, held_acc, held_loss, cpu_s, wall_s, history (JSON text of
        per-epoch lists), seed, unit_id.
        """
        cols = ", ".join("id AS unit_id" if c == "unit_id" else c for c in UNIT_COLUMNS)
        sql = f"SELECT {cols} FROM units"
        params: tuple = ()
        if status is not None:
            sql += " WHERE status = ?"
            params = (status,)
        return self._frame(sql + " ORDER BY rung, candidate, fold", params)

    def finished(self) -> dict[tuple[str, int, int], tuple[str, float | None]]:
        """(candidate, fold, rung) -> (status, held_acc) of every finished unit."""
        rows = self._rows("SELECT candidate, fold, rung, status, held_acc FROM units")
        return {(c, f, r): (s, a) for c, f, r, s, a in rows}

    def spent(self) -> tuple[float, int]:
        """(CPU seconds, planned epochs) of all finished units."""
        ((cpu, epochs),) = self._rows(
            "SELECT COALESCE(SUM(cpu_s), 0), COALESCE(SUM(epochs), 0) FROM units")
        return float(cpu), int(epochs)

    def done_cpu(self) -> list[tuple[str, int, float]]:
        """(candidate, planned epochs, CPU seconds) of every unit that finished "done"
        (what :class:`search.cpu_forecast.CpuForecast` learns from on a resume)."""
        rows = self._rows("SELECT candidate, epochs, cpu_s FROM units WHERE status = 'done'")
        return [(c, int(e), float(s)) for c, e, s in rows]

    def _prediction_rows(self, candidate: str, rung: int | None) -> list[tuple]:
        if rung is None:
            rung = self._default_rung(candidate)
            if rung is None:
                return []
        return self._rows(
            "SELECT u.fold, p.n, p.k, p.idx, p.label, p.pred, p.probs FROM predictions p "
            "JOIN units u ON u.id = p.unit WHERE u.candidate = ? AND u.rung = ? "
            "ORDER BY u.fold", (candidate, int(rung)))

    def _default_rung(self, candidate: str) -> int | None:
        """Highest rung done on every fold; else the highest with any predictions."""
        k = self.settings().folds
        rows = self._rows(
            "SELECT rung FROM units WHERE candidate = ? AND status = 'done' GROUP BY rung "
            "HAVING COUNT(DISTINCT fold) >= ? ORDER BY rung DESC LIMIT 1", (candidate, k))
        if not rows:
            rows = self._rows("SELECT MAX(rung) FROM units WHERE candidate = ? AND "
                              "status = 'done'", (candidate,))
        return None if not rows or rows[0][0] is None else int(rows[0][0])

    def predictions(self, candidate: str, rung: int | None = None) -> pd.DataFrame:
        """Held-out predictions of a candidate at a rung, by fold then image index.

        ``rung=None`` takes the candidate's highest rung done on every fold (the
        one the ranking shows). Columns: fold, index (into the data set),
        label, pred. The probabilities, in the same row order, come from
        :meth:`prediction_probs`.
        """
        parts = []
        for fold, n, _k, idx, label, pred, _p in self._prediction_rows(candidate, rung):
            parts.append(pd.DataFrame({"fold": np.full(n, fold, dtype=np.int64),
                                       "index": _array(idx, "<i8"),
                                       "label": _array(label, "<i8"),
                                       "pred": _array(pred, "<i8")}))
        if not parts:
            return pd.DataFrame({c: np.zeros(0, np.int64)
                                 for c in ("fold", "index", "label", "pred")})
        return pd.concat(parts, ignore_index=True)

    def prediction_probs(self, candidate: str, rung: int | None = None) -> np.ndarray:
        """Class probabilities, shape (n, K) float32, rows as in :meth:`predictions`."""
        rows = self._prediction_rows(candidate, rung)
        if not rows:
            return np.zeros((0, self.settings().n_classes), np.float32)
        return np.concatenate([_array(p, "<f4").reshape(n, k)
                               for _f, n, k, _i, _l, _pr, p in rows])

    def close(self) -> None:
        if getattr(self, "_con", None) is not None:
            self._con.close()
            self._con = None
        if self._copy_dir is not None:
            shutil.rmtree(self._copy_dir, ignore_errors=True)
            self._copy_dir = None

    def __enter__(self) -> "RunStore":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

def _array(blob: bytes, dtype: str) -> np.ndarray:
    return np.frombuffer(blob, dtype=dtype).astype(dtype[1:] if dtype[0] == "<" else dtype)
