"""One search at a time per run folder.

A search holds an exclusive ``flock`` on ``run.lock`` in its run folder for
as long as it runs (Python's ``fcntl.flock``, the POSIX-family ``flock(2)``
call). The lock belongs to the open file, so the kernel drops it when the
process ends, however it ends (``kill -9`` included): a killed search never
leaves a stale lock behind, and there is nothing to clean up. The file stays
and holds the process id of the last search that took it, which a second
search reads to say who holds the folder. The file is never removed: a
removal between one search's open and its lock would let two searches lock
two different files.

The descriptor is opened close-on-exec (and Python makes descriptors
non-inheritable anyway, PEP 446), so worker processes do not hold the lock
and cannot keep a folder busy after their search died.

Readers (the report, the export) take no lock: they only read the store.
"""

from __future__ import annotations

import fcntl
import os
import time
from pathlib import Path

from tinyconv.errors import FolderBusyError, RunError, WriteError
from tinyconv.files import fix_for, why_not_written, writable_folder

LOCK_NAME = "run.lock"


class FolderLock:
    """The lock of one run folder, held by this process; see the module notes.

    Use :meth:`take`; :meth:`release` (or leaving a ``with`` block) lets go.
    """

    def __init__(self, run_dir: Path, fd: int):
        self.run_dir = run_dir
        self._fd: int | None = fd

    @classmethod
    def take(cls, run_dir: str | Path) -> "FolderLock":
        """Make the run folder if needed and lock it for this process.

        Raises
        ------
        FolderBusyError
            When another process holds the folder (its process id is named).
        WriteError
            When the folder cannot be made or written (a read-only file
            system, no permission): a search could store nothing there.
        RunError
            When the path exists and is not a folder.
        """
        run_dir = Path(run_dir)
        if run_dir.exists() and not run_dir.is_dir():
            raise RunError(f"--out {run_dir}: exists and is not a folder; give a folder path")
        try:
            run_dir.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise WriteError(f"--out {run_dir}: cannot make the run folder: "
                             f"{why_not_written(exc)}; {fix_for(exc)}") from None
        if not writable_folder(run_dir):
            raise WriteError(_not_writable(run_dir))
        try:
            fd = os.open(run_dir / LOCK_NAME, os.O_RDWR | os.O_CREAT | os.O_CLOEXEC, 0o644)
        except OSError as exc:
            raise WriteError(f"--out {run_dir}: cannot open {LOCK_NAME} there: "
                             f"{why_not_written(exc)}; {fix_for(exc)}") from None
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            holder = _holder(fd)
            os.close(fd)
            who = (f"process {holder}" if holder is not None else
                   "a process that has not written its id yet")
            stop = f"stop it (kill {holder}), " if holder is not None else ""
            raise FolderBusyError(
                f"--out {run_dir}: another search ({who}) is writing this run folder, and a "
                f"folder takes one search at a time. Wait for it to end, {stop}or give "
                "another --out folder", holder) from None
        except BaseException:
            os.close(fd)
            raise
        mine = f"{os.getpid()}\n".encode()
        os.pwrite(fd, mine, 0)   # first line first, then the rest cut: never empty
        os.ftruncate(fd, len(mine))
        return cls(run_dir, fd)

    def release(self) -> None:
        """Let go of the folder (closing the file drops the lock)."""
        if self._fd is not None:
            os.close(self._fd)
            self._fd = None

    def __enter__(self) -> "FolderLock":
        return self

    def __exit__(self, *exc) -> None:
        self.release()


def _holder(fd: int, patience: float = 1.0) -> int | None:
    """The process id of the holder, from the first line of the lock file.

    A holder writes its id just after it takes the lock, so right then the
    file may still name an earlier search that has ended: wait (up to
    ``patience`` seconds) for the id of a living process.
    """
    deadline = time.monotonic() + patience
    while True:
        try:
            first = os.pread(fd, 32, 0).decode("ascii", "replace").split("\n")[0].strip()
        except OSError:
            return None
        pid = int(first) if first.isdigit() else None
        if (pid is not None and _alive(pid)) or time.monotonic() > deadline:
            return pid
        time.sleep(0.02)


def _alive(pid: int) -> bool:
    """Whether a process exists (POSIX kill(2) with signal 0 checks without sending)."""
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True   # it exists, under another user
    return True


def _not_writable(run_dir: Path) -> str:
    """Why a search cannot use ``run_dir``, and how to read a finished run there."""
    try:
        read_only = bool(os.statvfs(run_dir).f_flag & os.ST_RDONLY)  # POSIX statvfs flag
    except OSError:
        read_only = False
    why = "it is on a read-only file system" if read_only else "no permission to write there"
    return (f"--out {run_dir}: the run folder cannot be written ({why}), and a search stores "
            "every unit there. To rank or report a finished run from it, write the report "
            f"elsewhere: tinyconv report {run_dir} --out ANOTHER_FOLDER [--rank-by accuracy]")
