"""What can go wrong with a run store's file, found early and said plainly.

The run store (:mod:`search.store`) calls these to turn every fault of
``run.sqlite`` into a :class:`~tinyconv.errors.StoreError` that names the
file, says what is wrong with it and what to do, instead of a SQLite
traceback:

* a damaged file (cut short, bytes overwritten, header destroyed, zero
  bytes) is found when the store is opened (:func:`check_opened`: the size,
  then SQLite's ``PRAGMA quick_check``), before anything is written to it;
* a file removed (or replaced) while a search has it open is found at the
  next write (:func:`moved`); the units already in it are then copied from
  the still-open connection into a rescue file (:func:`rescue`);
* a full disk, a read-only folder and other write failures
  (:func:`write_fault`).

Facts about the file format are SQLite's ("Database File Format",
sqlite.org/fileformat.html, section 1.3); error names are its result codes
(sqlite.org/rescode.html), which Python 3.11 exposes as
``sqlite3.Error.sqlite_errorname``.
"""

from __future__ import annotations

import os
import shutil
import sqlite3
from pathlib import Path

from tinyconv.errors import StoreError
from tinyconv.files import low_on_space

#: The first 16 bytes of every SQLite database file (fileformat.html, 1.3.1).
MAGIC = b"SQLite format 3\x00"
#: The store's header is 100 bytes (fileformat.html, 1.3).
HEADER_BYTES = 100
#: Where :func:`rescue` saves the units of a store removed while running.
RESCUE_NAME = "rescued-run.sqlite"

_START_AFRESH = ("Nothing was changed. Put back a copy of the file if you have one, or "
                 "start the search afresh in another --out folder")


def sqlite_name(exc: BaseException) -> str:
    """SQLite's result-code name of an error (``SQLITE_FULL``, ...), or ``""``."""
    cause = exc if isinstance(exc, sqlite3.Error) else exc.__cause__
    return str(getattr(cause, "sqlite_errorname", "") or "")


def damaged(path: Path, detail: str) -> StoreError:
    """The error for a store file that cannot be trusted."""
    return StoreError(f"{path}: the run store is damaged: {detail}. {_START_AFRESH}")


def check_size(path: Path) -> None:
    """Refuse a store file too short to hold even its header (zero bytes included).

    The search creates a store whole (:meth:`search.store.RunStore.start`),
    so a short file is always damage, never a store being made.
    """
    size = path.stat().st_size
    if size == 0:
        raise damaged(path, "the file is empty (0 bytes), so every unit it held is gone")
    if size < HEADER_BYTES:
        raise damaged(path, f"the file is {size} bytes, shorter than SQLite's 100-byte "
                            "header")


def describe_damage(path: Path) -> str:
    """What the raw bytes of a damaged store show (for the message)."""
    try:
        with open(path, "rb") as fh:
            head = fh.read(HEADER_BYTES)
        size = path.stat().st_size
    except OSError as exc:
        return f"it cannot be read ({exc.strerror})"
    if head[:16] != MAGIC:
        return (f"its first 16 bytes are {head[:16]!r}, not SQLite's {MAGIC!r}: the header "
                "was overwritten")
    # Page size: 2 bytes big-endian at offset 16, the value 1 meaning 65536;
    # database size in pages: 4 bytes at 28, valid when the change counter
    # (offset 24) equals the version-valid-for number (offset 92).
    page = int.from_bytes(head[16:18], "big")
    page = 65536 if page == 1 else page
    pages = int.from_bytes(head[28:32], "big")
    valid = head[24:28] == head[92:96] and pages > 0
    if valid and page and size < page * pages:
        return (f"the file is {size:,} bytes but its header declares {pages:,} pages of "
                f"{page:,} bytes ({page * pages:,} bytes): it was cut short")
    if page and size % page:
        return (f"the file is {size:,} bytes, not a whole number of its {page:,}-byte "
                "pages: it was cut short or appended to")
    return "SQLite finds its pages inconsistent (bytes inside it were overwritten)"


def check_opened(con: sqlite3.Connection, path: Path) -> None:
    """Run SQLite's ``PRAGMA quick_check`` (every page's structure, without the
    slower index cross-checks of ``integrity_check``) and refuse a damaged file.

    A file SQLite cannot even read raises ``sqlite3.Error``; :func:`read_fault`
    names it."""
    rows = con.execute("PRAGMA quick_check").fetchall()
    if rows != [("ok",)]:
        first = "; ".join(str(r[0]) for r in rows[:2])
        raise damaged(path, f"SQLite's quick check reports: {first}")


def not_a_store(path: Path) -> StoreError:
    """The error for a SQLite file without the run store's tables."""
    return StoreError(f"{path}: this SQLite file is not a tinyconv run store (it has no "
                      "'meta' table); give the folder a search wrote with --out, or move "
                      "this file away")


def moved(path: Path, opened: os.stat_result) -> bool:
    """Whether the file at ``path`` is gone or is no longer the one opened.

    SQLite makes the same check before a write (``SQLITE_READONLY_DBMOVED``:
    the database file has been moved since it was opened); doing it here
    first gives the same answer on any SQLite version.
    """
    try:
        now = os.stat(path)
    except FileNotFoundError:
        return True
    return (now.st_ino, now.st_dev) != (opened.st_ino, opened.st_dev)


def rescue(con: sqlite3.Connection, run_dir: Path) -> Path | None:
    """Copy the open store (whose file was removed) to a new file in ``run_dir``.

    The connection still reads the removed file's pages, so SQLite's online
    backup (``Connection.backup``) copies every stored unit. Returns the new
    file, or None when it cannot be written either.
    """
    target = _free_name(run_dir, RESCUE_NAME)
    partial = target.with_name(f".partial-{os.getpid()}-{target.name}")
    try:
        run_dir.mkdir(parents=True, exist_ok=True)
        dest = sqlite3.connect(partial)
        try:
            con.backup(dest)
        finally:
            dest.close()
        os.replace(partial, target)
    except (OSError, sqlite3.Error):
        for leftover in (partial, Path(f"{partial}-journal")):
            leftover.unlink(missing_ok=True)
        return None
    return target


def _free_name(folder: Path, name: str) -> Path:
    """``folder/name``, or ``folder/2-name``, ... when taken."""
    path, n = folder / name, 1
    while path.exists():
        n += 1
        path = folder / f"{n}-{name}"
    return path


def write_fault(exc: sqlite3.Error, path: Path, kept: str) -> StoreError:
    """The error for a failed write to a store that is still in place.

    ``kept`` says what is safe (e.g. ``"the 12 units stored before it are
    kept"``).
    """
    name = sqlite_name(exc)
    resume = "run the same command again to resume"
    if name == "SQLITE_FULL" or (name.startswith("SQLITE_IOERR") and
                                 low_on_space(path.parent)):
        return StoreError(f"cannot write {path}: the disk is full (SQLite: {exc}); {kept}. "
                          f"Free some space and {resume}")
    if name.startswith("SQLITE_READONLY") or not os.access(path.parent, os.W_OK):
        return StoreError(f"cannot write {path}: it is read-only (SQLite: {exc}); {kept}. "
                          f"Make the run folder writable and {resume}")
    if name in ("SQLITE_CORRUPT", "SQLITE_NOTADB"):
        return damaged(path, f"{describe_damage(path)} (found while writing; {kept})")
    return StoreError(f"cannot write {path}: SQLite says {exc} ({name or 'no code'}); {kept}. "
                      f"Check the disk and {resume}")


def read_fault(exc: BaseException, path: Path) -> StoreError:
    """The error for a failed read of a store (after it was opened)."""
    name = sqlite_name(exc)
    if name in ("SQLITE_CORRUPT", "SQLITE_NOTADB"):
        return damaged(path, describe_damage(path))
    cause = exc.__cause__ if not isinstance(exc, sqlite3.Error) and exc.__cause__ else exc
    if "no such table" in str(cause):
        return not_a_store(path)
    return StoreError(f"cannot read {path}: SQLite says {cause} ({name or 'no code'}); "
                      "check the disk, then try again")


def copy_with_journal(path: Path, folder: Path) -> Path:
    """Copy a store and its hot journal into ``folder``; returns the copy.

    A search killed in the middle of a commit leaves a journal that SQLite
    plays back at the next read-write open; a read-only reader cannot, so it
    reads a private copy where SQLite can (the run folder is not touched).
    """
    copy = folder / path.name
    shutil.copyfile(path, copy)
    shutil.copyfile(f"{path}-journal", f"{copy}-journal")
    return copy
