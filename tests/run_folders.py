"""Shared helpers for the run-folder fault tests: the tiny search as a command line,
copies of a finished run, and what a clean failure looks like."""

from __future__ import annotations

import shutil
from pathlib import Path

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
            "--seed", "2", "--max-epochs", "3", "--workers", str(workers),
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
