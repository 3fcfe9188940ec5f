"""Whether the engine's Numba kernels are already compiled and cached on disk.

Every kernel is compiled with ``cache=True``: the first process that uses
one compiles it (seconds each; about 20 s for what a search uses) and leaves
an index and a compiled file in Numba's cache folder, which later processes
load in milliseconds. Commands say "the first run compiles the kernels" only
when that is about to happen: when fewer than :data:`WARM_SHARE` of the
kernels have a cache index that Numba would accept (one that matches the
source file's time stamp and size).

Nothing here compiles anything. The index is found through Numba's own cache
object of each kernel (``dispatcher._cache``), so the answer follows Numba's
rules for where caches live (beside the source, in a user cache folder, or
under ``NUMBA_CACHE_DIR``); if a Numba version lays this out differently the
answer is "unknown" (None), and commands then say nothing.
"""

from __future__ import annotations

import importlib

from tinyconv.kernel_stamp import MODULES

#: The modules holding the engine's Numba kernels.
KERNEL_MODULES = MODULES
#: Below this share of cached kernels, a run compiles a good part of the engine.
WARM_SHARE = 0.5


def kernels() -> list[object]:
    """Every Numba dispatcher defined in the kernel modules that caches to disk."""
    found = []
    for name in KERNEL_MODULES:
        module = importlib.import_module(f"tinyconv.layers.{name}")
        for obj in vars(module).values():
            func = getattr(obj, "py_func", None)
            if func is not None and func.__module__ == module.__name__ \
                    and getattr(obj, "_cache", None) is not None:
                found.append(obj)
    return found


def cached_share() -> float | None:
    """The share of kernels with a usable cache index, or None when it cannot be told."""
    try:
        found = kernels()
        cached = sum(bool(k._cache._cache_file._load_index()) for k in found)  # type: ignore[attr-defined]
    except Exception:  # a layout this module does not know: say nothing rather than guess
        return None
    return cached / len(found) if found else None


def index_files() -> list[str]:
    """The cache index files of the kernels whose index Numba would accept ([] when
    that cannot be told)."""
    try:
        return [str(k._cache._cache_file._index_path) for k in kernels()  # type: ignore[attr-defined]
                if k._cache._cache_file._load_index()]  # type: ignore[attr-defined]
    except Exception:  # a layout this module does not know
        return []


def cold() -> bool:
    """True when a run is about to compile most of the engine's kernels."""
    share = cached_share()
    return share is not None and share < WARM_SHARE
