"""Tests of tinyconv/files.py: whole-file writes and the reasons given for failed ones."""

from __future__ import annotations

import errno

import pytest

from tinyconv.errors import WriteError
from tinyconv.files import PARTIAL_PREFIX, why_not_written, write_bytes_whole, write_whole


def test_write_whole_replaces_and_leaves_nothing_else(tmp_path):
    """A written file holds the new bytes; no partial file stays beside it."""
    path = tmp_path / "table.csv"
    path.write_bytes(b"old")
    assert write_bytes_whole(path, b"new") == path
    assert path.read_bytes() == b"new"
    assert [p.name for p in tmp_path.iterdir()] == ["table.csv"]


def test_failure_midway_keeps_the_old_file(tmp_path):
    """A writer that fails after some bytes leaves the earlier file whole and no partial file."""
    path = tmp_path / "table.csv"
    path.write_bytes(b"old")

    def half(handle):
        handle.write(b"half of the new")
        raise RuntimeError("the writer broke")

    with pytest.raises(RuntimeError, match="the writer broke"):
        write_whole(path, half)
    assert path.read_bytes() == b"old"
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(PARTIAL_PREFIX)]


def test_os_failure_is_a_named_write_error(tmp_path):
    """A folder that does not exist gives a WriteError naming the file, the reason, the fix."""
    path = tmp_path / "gone" / "page.html"
    with pytest.raises(WriteError, match=r"cannot write .*gone/page.html: No such file or "
                                         r"directory \(ENOENT\); nothing partial was left "
                                         r"there. Check the disk and run the same command"):
        write_bytes_whole(path, b"x")


@pytest.mark.parametrize("code,reason", [(errno.ENOSPC, "the disk is full"),
                                         (errno.EROFS, "read-only file system"),
                                         (errno.EACCES, "permission denied")])
def test_reasons_follow_posix_error_numbers(code, reason):
    """ENOSPC, EROFS and EACCES (POSIX errno.h) read as plain reasons."""
    assert reason in why_not_written(OSError(code, "x"))
