"""The run store: one SQLite file, ``run.sqlite``, in the run folder.

It holds the run's settings (with the data fingerprint and the space text),
every candidate with its costs (including those over budget, which are never
trained), and one row per finished unit with its held-out predictions.

Promises:

* a finished unit is written in **one transaction** together with its
  predictions, so a process killed at any moment leaves whole units only and
  loses at most those in flight; (candidate, fold, rung) is unique;
* only the search's main process writes; readers (the report, the export)
  open the same file with :class:`RunStore` and never change it;
* :meth:`RunStore.start` on a folder that already holds a run checks that the
  settings are the same (:func:`search.config.differences`) and refuses other
  ones with a :class:`~tinyconv.errors.RunError` saying what differs.

Tables: ``meta(key, value)`` (JSON values: ``settings``, ``format``,
``removed``, ``outcome``), ``candidates``, ``units``, ``predictions`` (arrays
as little-endian blobs: int64 index, label and prediction, float32 (m, K)
probabilities).
"""

from __future__ import annotations

import json
import sqlite3
import time
from contextlib import closing
from pathlib import Path
from typing import Any, Iterable

import numpy as np
import pandas as pd

from search.config import EXTENDABLE, differences
from search.unit import UnitResult
from tinyconv.errors import RunError

FILE = "run.sqlite"
SCHEMA_VERSION = 1

_SCHEMA = """
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
    train_acc REAL, train_loss REAL, val_acc REAL, val_loss REAL, int8_acc REAL,
    cpu_s REAL NOT NULL, wall_s REAL NOT NULL, history TEXT NOT NULL,
    finished REAL NOT NULL, UNIQUE (candidate, fold, rung));
CREATE TABLE IF NOT EXISTS predictions (
    unit INTEGER PRIMARY KEY REFERENCES units(id), n INTEGER NOT NULL, k INTEGER NOT NULL,
    idx BLOB NOT NULL, label BLOB NOT NULL, pred BLOB NOT NULL, probs BLOB NOT NULL);
"""

UNIT_COLUMNS = ("candidate", "fold", "rung", "epochs", "status", "message", "train_acc",
                "train_loss", "val_acc", "val_loss", "int8_acc", "cpu_s", "wall_s", "history",
                "seed", "unit_id")
CANDIDATE_COLUMNS = ("candidate", "params", "macs", "peak_int8_bytes", "flash_bytes",
                     "within_budget", "over", "scheduled")


def _connect(path: Path) -> sqlite3.Connection:
    con = sqlite3.connect(path, timeout=60.0, isolation_level=None)  # explicit transactions
    con.execute("PRAGMA foreign_keys = ON")
    con.execute("PRAGMA synchronous = FULL")
    return con


class RunStore:
    """Read access to a run folder's store (the API for report and export).

    Parameters
    ----------
    run_dir : str or Path
        A folder holding ``run.sqlite``.

    Raises
    ------
    RunError
        When there is no store in the folder.
    """

    def __init__(self, run_dir: str | Path):
        self.run_dir = Path(run_dir)
        self.path = self.run_dir / FILE
        if not self.path.is_file():
            raise RunError(f"{self.run_dir}: no run here (no {FILE}); give the folder a "
                           "search wrote with --out")
        self._con = _connect(self.path)
        version = self._meta("format")
        if version != SCHEMA_VERSION:
            raise RunError(f"{self.path}: store format {version!r}, this tinyconv reads "
                           f"format {SCHEMA_VERSION}; run the search again in a new folder")

    # ------------------------------------------------------------ creating

    @classmethod
    def start(cls, run_dir: str | Path, settings: dict[str, Any],
              candidates: pd.DataFrame, removed: dict[str, Any] | None = None) -> "RunStore":
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

        Raises
        ------
        RunError
            When the folder holds a run with other settings or other data.
        """
        run_dir = Path(run_dir)
        if run_dir.exists() and not run_dir.is_dir():
            raise RunError(f"--out {run_dir}: exists and is not a folder; give a folder path")
        run_dir.mkdir(parents=True, exist_ok=True)
        path = run_dir / FILE
        with closing(_connect(path)) as con:
            con.execute("BEGIN IMMEDIATE")
            try:
                for stmt in filter(None, (s.strip() for s in _SCHEMA.split(";"))):
                    con.execute(stmt)
                row = con.execute("SELECT value FROM meta WHERE key='settings'").fetchone()
                if row is None:
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
                else:
                    stored = json.loads(row[0])
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
                        _put_meta(con, "settings", {**stored, **changed})
                con.execute("COMMIT")
            except BaseException:
                con.execute("ROLLBACK")
                raise
        return cls(run_dir)

    def record(self, result: UnitResult) -> None:
        """Write one finished unit and its predictions in one transaction."""
        t = result.task
        con = self._con
        con.execute("BEGIN IMMEDIATE")
        try:
            cur = con.execute(
                "INSERT INTO units (candidate, fold, rung, epochs, seed, status, message, "
                "train_acc, train_loss, val_acc, val_loss, int8_acc, cpu_s, wall_s, history, "
                "finished) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                (t.candidate, t.fold, t.rung, t.epochs, t.seed, result.status, result.message,
                 result.train_acc, result.train_loss, result.val_acc, result.val_loss,
                 result.int8_acc, float(result.cpu_s), float(result.wall_s), result.history_json(),
                 time.time()))
            if result.status == "done":
                probs = np.ascontiguousarray(result.probs, dtype="<f4")
                con.execute("INSERT INTO predictions VALUES (?, ?, ?, ?, ?, ?, ?)",
                            (cur.lastrowid, probs.shape[0], probs.shape[1],
                             _blob(result.index), _blob(result.label), _blob(result.pred),
                             probs.tobytes()))
            con.execute("COMMIT")
        except BaseException:
            con.execute("ROLLBACK")
            raise

    def set_outcome(self, outcome: dict[str, Any]) -> None:
        """Record how the last search session ended (complete, out of budget, ...)."""
        self._con.execute("BEGIN IMMEDIATE")
        _put_meta(self._con, "outcome", outcome)
        self._con.execute("COMMIT")

    def set_rank_order(self, by: str) -> None:
        """Remember the order the user asked for (``per_param`` or ``accuracy``)."""
        self._con.execute("BEGIN IMMEDIATE")
        _put_meta(self._con, "rank_by", by)
        self._con.execute("COMMIT")

    # ------------------------------------------------------------ reading

    def rank_order(self) -> str | None:
        """The ranking order of the last search command (None if never set)."""
        return self._meta("rank_by")

    def _meta(self, key: str) -> Any:
        row = self._con.execute("SELECT value FROM meta WHERE key=?", (key,)).fetchone()
        return None if row is None else json.loads(row[0])

    def config(self) -> dict[str, Any]:
        """The run's settings (``SearchSettings.as_dict()``): data, fingerprint, classes,
        space text, folds, seed, budgets, eta, max_epochs, training settings."""
        return self._meta("settings")

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
        df = pd.read_sql_query(f"SELECT {', '.join(CANDIDATE_COLUMNS)} FROM candidates "
                               "ORDER BY ordinal", self._con)
        df["within_budget"] = df["within_budget"].astype(bool)
        df["scheduled"] = df["scheduled"].astype(bool)
        return df

    def units(self, status: str | None = None) -> pd.DataFrame:
        """Finished units, ordered by (rung, candidate, fold).

        Columns: candidate, fold, rung, epochs, status, message, train_acc,
        train_loss, val_acc, val_loss, cpu_s, wall_s, history (JSON text of
        per-epoch lists), seed, unit_id.
        """
        cols = ", ".join("id AS unit_id" if c == "unit_id" else c for c in UNIT_COLUMNS)
        sql = f"SELECT {cols} FROM units"
        params: tuple = ()
        if status is not None:
            sql += " WHERE status = ?"
            params = (status,)
        return pd.read_sql_query(sql + " ORDER BY rung, candidate, fold", self._con,
                                 params=params)

    def finished(self) -> dict[tuple[str, int, int], tuple[str, float | None]]:
        """(candidate, fold, rung) -> (status, val_acc) of every finished unit."""
        rows = self._con.execute("SELECT candidate, fold, rung, status, val_acc FROM units")
        return {(c, f, r): (s, a) for c, f, r, s, a in rows}

    def spent(self) -> tuple[float, int]:
        """(CPU seconds, planned epochs) of all finished units."""
        cpu, epochs = self._con.execute(
            "SELECT COALESCE(SUM(cpu_s), 0), COALESCE(SUM(epochs), 0) FROM units").fetchone()
        return float(cpu), int(epochs)

    def _prediction_rows(self, candidate: str, rung: int | None) -> list[tuple]:
        if rung is None:
            rung = self._default_rung(candidate)
            if rung is None:
                return []
        return self._con.execute(
            "SELECT u.fold, p.n, p.k, p.idx, p.label, p.pred, p.probs FROM predictions p "
            "JOIN units u ON u.id = p.unit WHERE u.candidate = ? AND u.rung = ? "
            "ORDER BY u.fold", (candidate, int(rung))).fetchall()

    def _default_rung(self, candidate: str) -> int | None:
        """Highest rung done on every fold; else the highest with any predictions."""
        k = int(self.config()["folds"])
        row = self._con.execute(
            "SELECT rung FROM units WHERE candidate = ? AND status = 'done' GROUP BY rung "
            "HAVING COUNT(DISTINCT fold) >= ? ORDER BY rung DESC LIMIT 1",
            (candidate, k)).fetchone()
        if row is None:
            row = self._con.execute("SELECT MAX(rung) FROM units WHERE candidate = ? AND "
                                    "status = 'done'", (candidate,)).fetchone()
        return None if row is None or row[0] is None else int(row[0])

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
            return np.zeros((0, len(self.config()["classes"])), np.float32)
        return np.concatenate([_array(p, "<f4").reshape(n, k)
                               for _f, n, k, _i, _l, _pr, p in rows])

    def close(self) -> None:
        self._con.close()

    def __enter__(self) -> "RunStore":
        return self

    def __exit__(self, *exc) -> None:
        self.close()


def _put_meta(con: sqlite3.Connection, key: str, value: Any) -> None:
    con.execute("INSERT OR REPLACE INTO meta VALUES (?, ?)", (key, json.dumps(value)))


def _blob(arr: Iterable) -> bytes:
    return np.ascontiguousarray(arr, dtype="<i8").tobytes()


def _array(blob: bytes, dtype: str) -> np.ndarray:
    return np.frombuffer(blob, dtype=dtype).astype(dtype[1:] if dtype[0] == "<" else dtype)
