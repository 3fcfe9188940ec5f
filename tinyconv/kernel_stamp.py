"""Whether the kernel cache is cold, told without importing Numba when it is warm.

:func:`tinyconv.layers.kernel_cache.cold` asks Numba's own cache objects, which
means importing Numba and every kernel module: about 0.35 CPU-seconds, paid by
every search and demo process although, once a machine has compiled the
kernels, the answer is almost always "warm". So when that check finds the
cache warm, :func:`cold` here writes a stamp of what it saw: the path, size
and modification time of every kernel's cache index file, of every kernel
module's source, the Numba version and the Python version. A later process
whose files all still match the stamp is warm without asking Numba; any
difference (a kernel recompiled or removed, the cache folder cleared or moved
by ``NUMBA_CACHE_DIR``, an upgrade) sends it to Numba's check again.

The stamp lives in the user's cache folder (``$XDG_CACHE_HOME/tinyconv`` or
``~/.cache/tinyconv``), one entry per installed copy of the package and Numba
cache folder; a folder that cannot be written only means the slow check every
time.
"""

from __future__ import annotations

import contextlib
import json
import os
import sys
from pathlib import Path

#: The stamp file's name in the cache folder.
STAMP_FILE = "kernel-cache.json"


def stamp_path() -> Path:
    """Where the stamps are kept."""
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(Path.home(), ".cache")
    return Path(base) / "tinyconv" / STAMP_FILE


def _key() -> str:
    """One installed copy of the package with one Numba cache folder."""
    return f"{Path(__file__).resolve().parent}|{os.environ.get('NUMBA_CACHE_DIR', '')}"


def _versions() -> list[str]:
    from importlib.metadata import PackageNotFoundError, version
    try:
        numba = version("numba")
    except PackageNotFoundError:
        numba = ""
    return [numba, sys.version]


def _stat(path: str) -> list[int] | None:
    try:
        st = os.stat(path)
    except OSError:
        return None
    return [st.st_size, st.st_mtime_ns]


def _module_sources() -> list[str]:
    """The kernel modules' source files, found without importing them."""
    root = Path(__file__).resolve().parent / "layers"
    return [str(root.joinpath(*name.split(".")).with_suffix(".py")) for name in MODULES]


#: The modules under ``tinyconv.layers`` holding the engine's Numba kernels (the one
#: list: :data:`tinyconv.layers.kernel_cache.KERNEL_MODULES` is this, kept here so that
#: the stamp finds their sources without importing them, or Numba).
MODULES = ("kernels_act", "convalg.im2col", "kernels_pool", "kernels_dw",
           "convalg.winograd_f2", "convalg.winograd_f4", "convalg.winograd_f4_unrolled")


def stamp_matches() -> bool:
    """Whether the stamp of a warm cache still matches every file it names."""
    try:
        entry = json.loads(stamp_path().read_text()).get(_key())
    except (OSError, ValueError, AttributeError):
        return False
    if not isinstance(entry, dict) or entry.get("versions") != _versions():
        return False
    files = entry.get("files")
    if not isinstance(files, dict) or not files:
        return False
    return all(_stat(path) == seen for path, seen in files.items())


def write_stamp(index_files: list[str]) -> None:
    """Record a warm cache: its index files and the kernel sources, as they are now."""
    files = {path: _stat(path) for path in [*index_files, *_module_sources()]}
    if any(seen is None for seen in files.values()):
        return
    path = stamp_path()
    try:
        try:
            table = json.loads(path.read_text())
            table = table if isinstance(table, dict) else {}
        except (OSError, ValueError):
            table = {}
        table[_key()] = {"versions": _versions(), "files": files}
        path.parent.mkdir(parents=True, exist_ok=True)
        tmp = path.with_suffix(f".{os.getpid()}.tmp")
    except OSError:
        return
    try:
        tmp.write_text(json.dumps(table))
        os.replace(tmp, path)
    except OSError:  # not written: no temporary file left behind either
        with contextlib.suppress(OSError):
            tmp.unlink()


def cold() -> bool:
    """True when a run is about to compile most of the engine's kernels (as
    :func:`tinyconv.layers.kernel_cache.cold`), without Numba when the stamp says warm."""
    if stamp_matches():
        return False
    from tinyconv.layers import kernel_cache
    if kernel_cache.cold():
        return True
    index_files = kernel_cache.index_files()
    if index_files:
        write_stamp(index_files)
    return False
