"""Shared helpers for the run-folder fault tests: the tiny search as a command line,
copies of a finished run, and what a clean failure looks like."""

from __future__ import annotations

import contextlib
import os
import shutil
import subprocess
from pathlib import Path
from typing import Iterator

import pytest

from helpers import TINY_DATA, TINY_SPACE
from search.folder_lock import LOCK_NAME


def space_file(folder: Path) -> Path:
    """TINY_SPACE written to ``folder/space.toml``."""
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "space.toml"
    path.write_text(TINY_SPACE)
    return path


def search_argv(space: Path, out: Path, *extra: str, workers: int = 0) -> list[str]:
    """``tinyconv search`` arguments of the tiny search (the settings of
    ``helpers.tiny_request``), so its ranking equals an in-process run's."""
    return ["search", TINY_DATA, "--space", str(space), "--out", str(out), "--folds", "3",
            "--seed", "2", "--top-epochs", "3", "--workers", str(workers),
            "--batch-size", "16", "--lr", "0.01", *extra]


def copy_run(src: Path, dst: Path) -> Path:
    """A copy of a run folder (the store and the files beside it)."""
    shutil.copytree(src, dst)
    return dst


def snapshot(folder: Path) -> dict[str, tuple[int, bytes]]:
    """Every file in ``folder`` with its modification time and bytes, but the lock
    file (a search writes its process id there before it looks at the store)."""
    return {p.name: (p.stat().st_mtime_ns, p.read_bytes())
            for p in sorted(folder.iterdir()) if p.is_file() and p.name != LOCK_NAME}


def clean_failure(err: str) -> bool:
    """A failure as a user should see it on stderr: after any progress lines, one
    ``error:`` line, and no Python traceback anywhere."""
    errors = [line for line in err.splitlines() if line.startswith("error: ")]
    return len(errors) == 1 and "Traceback" not in err


def leftovers(folder: Path) -> list[str]:
    """Temporary files a failed write might leave: partial files, store being
    built, SQLite journals."""
    return sorted(p.name for p in folder.rglob("*")
                  if p.name.startswith((".partial-", ".new-")) or p.name.endswith("-journal"))


@contextlib.contextmanager
def small_disk(where: Path, size: str) -> Iterator[Path]:
    """A RAM-backed file system (tmpfs) of ``size`` (e.g. ``"1m"``) mounted at ``where``
    for the block; the test is skipped, with the reason, where mounting is not permitted
    (mount(8) needs root or CAP_SYS_ADMIN)."""
    where.mkdir(parents=True, exist_ok=True)
    done = subprocess.run(["mount", "-t", "tmpfs", "-o", f"size={size}", "tmpfs", str(where)],
                          capture_output=True, text=True)
    if done.returncode != 0:
        pytest.skip(f"cannot mount a small tmpfs here ({done.stderr.strip() or 'no mount'})")
    try:
        yield where
    finally:
        subprocess.run(["umount", "-l", str(where)], capture_output=True)


def remount(where: Path, options: str) -> None:
    """Change the options of the file system mounted at ``where`` (e.g. ``ro``)."""
    subprocess.run(["mount", "-o", f"remount,{options}", str(where)], check=True,
                   capture_output=True)


def fill(folder: Path) -> Path:
    """Fill the file system of ``folder`` to the last byte with one file; returns it."""
    path = folder / "filler"
    fd = os.open(path, os.O_WRONLY | os.O_CREAT, 0o644)
    try:
        block = b"\0" * 65536
        while True:
            try:
                os.write(fd, block)
            except OSError:  # ENOSPC: now smaller pieces, to the last byte
                if len(block) == 1:
                    break
                block = block[: len(block) // 2]
    finally:
        os.close(fd)
    return path
