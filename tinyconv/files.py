"""Writing a file whole or not at all, and saying plainly why a write failed.

:func:`write_whole` writes into a hidden partial file beside the target and
renames it over the target only once everything is on disk, so a reader (or
a later run) sees the old file or the new one, never half of one; when the
write fails (full disk, read-only folder, no permission) the partial file is
removed and a :class:`~tinyconv.errors.WriteError` names the file, the
reason and what to do.
"""

from __future__ import annotations

import contextlib
import errno
import os
from pathlib import Path
from typing import BinaryIO, Callable

from tinyconv.errors import WriteError

#: Error numbers of writes that fail for the disk or the folder, not the program
#: (POSIX ``errno.h``: no space, quota, read-only file system, permissions).
WRITE_FAULTS = frozenset({errno.ENOSPC, getattr(errno, "EDQUOT", errno.ENOSPC), errno.EROFS,
                          errno.EACCES, errno.EPERM})

#: Prefix of the partial files :func:`write_whole` writes (removed on failure).
PARTIAL_PREFIX = ".partial-"


def why_not_written(exc: OSError) -> str:
    """A short reason for a failed write, e.g. ``"the disk is full"``.

    The error numbers are POSIX's (``errno.h``): ENOSPC and EDQUOT for no
    space or quota, EROFS for a read-only file system, EACCES and EPERM for
    permissions.
    """
    code = exc.errno
    if code in (errno.ENOSPC, getattr(errno, "EDQUOT", errno.ENOSPC)):
        return "the disk is full"
    if code == errno.EROFS:
        return "the folder is on a read-only file system"
    if code in (errno.EACCES, errno.EPERM):
        return "permission denied"
    name = errno.errorcode.get(code or 0, "no error number")
    return f"{exc.strerror or exc} ({name})"


def fix_for(exc: OSError) -> str:
    """What a user can do about a failed write."""
    if exc.errno in (errno.ENOSPC, getattr(errno, "EDQUOT", errno.ENOSPC)):
        return "free some space"
    if exc.errno in (errno.EROFS, errno.EACCES, errno.EPERM):
        return "choose a folder you can write"
    return "check the disk"


def write_whole(path: str | Path, write: Callable[[BinaryIO], None], *,
                then: str = "run the same command again") -> Path:
    """Write ``path`` through ``write(handle)``, whole or not at all.

    Parameters
    ----------
    path : the file to (re)place
    write : writes the content into the binary handle it is given
    then : what to do once the cause is fixed, for the error message

    Returns
    -------
    Path of the written file.

    Raises
    ------
    WriteError
        When the file cannot be written; the partial file is removed and an
        earlier file at ``path`` is left as it was.
    """
    path = Path(path)
    partial = path.with_name(f"{PARTIAL_PREFIX}{os.getpid()}-{path.name}")
    try:
        with open(partial, "wb") as handle:
            write(handle)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(partial, path)  # atomic on POSIX: the old file or the new one
    except OSError as exc:
        with contextlib.suppress(OSError):
            partial.unlink()
        exc = _with_errno(exc, path.parent)
        raise WriteError(f"cannot write {path}: {why_not_written(exc)}; nothing partial "
                         f"was left there. {fix_for(exc).capitalize()} and {then}") from None
    except BaseException:
        with contextlib.suppress(OSError):
            partial.unlink()
        raise
    return path


def _with_errno(exc: OSError, folder: Path) -> OSError:
    """The error with its number; a short write reported without one (as NumPy's
    ``tofile`` does: "N requested and M written") on a full disk is ENOSPC."""
    if exc.errno is None and low_on_space(folder):
        return OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
    return exc


def low_on_space(folder: str | Path, below: int = 1 << 20) -> bool:
    """Whether the file system of ``folder`` has less than ``below`` bytes free
    for this user (POSIX ``statvfs``: ``f_bavail`` blocks of ``f_frsize``)."""
    try:
        st = os.statvfs(folder)
    except OSError:
        return False
    return st.f_bavail * st.f_frsize < below


def write_bytes_whole(path: str | Path, data: bytes, **kw) -> Path:
    """:func:`write_whole` for bytes already in memory."""
    return write_whole(path, lambda handle: handle.write(data), **kw)


def writable_folder(folder: str | Path) -> bool:
    """Whether this process may create files in ``folder`` (POSIX ``access(2)``,
    which also says no on a read-only file system, even to root)."""
    return os.access(folder, os.W_OK | os.X_OK)
