"""Timing helpers shared by the benchmark scripts.

Thread counts are fixed per process: :func:`thread_env` builds the environment
of a child process so that OpenBLAS, OpenMP, MKL and Numba read the count
before NumPy is first imported there (a setting made after the import does
not reliably hold). Everything else here times callables with
``time.perf_counter`` and summarises repeats as median, min and max.

Nothing here imports NumPy at module level, so the parent process that only
starts children stays light.
"""

from __future__ import annotations

import os
import platform
import statistics
import sys
import time
from dataclasses import dataclass
from typing import Callable, Mapping, Sequence

#: variables that fix the size of a library's thread pool
THREAD_VARS = ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS",
               "NUMBA_NUM_THREADS")
#: OpenBLAS kernel hints that the machine may set; kept unless asked otherwise
BLAS_HINTS = ("OPENBLAS_CORETYPE", "OPENBLAS_L2_SIZE")


def thread_env(threads: int, unset_hints: bool = False,
               base: Mapping[str, str] | None = None) -> dict[str, str]:
    """The environment of a child process pinned to ``threads`` threads.

    Parameters
    ----------
    threads : int
        Thread count (>= 1) for every pool in :data:`THREAD_VARS`.
    unset_hints : bool
        Remove :data:`BLAS_HINTS` so OpenBLAS picks its kernel by itself.
    base : mapping, optional
        Starting environment (default ``os.environ``).
    """
    if not isinstance(threads, int) or threads < 1:
        raise ValueError(f"threads must be an integer >= 1, got {threads!r}")
    env = dict(os.environ if base is None else base)
    for name in THREAD_VARS:
        env[name] = str(threads)
    if unset_hints:
        for name in BLAS_HINTS:
            env.pop(name, None)
    return env


@dataclass(frozen=True)
class Spread:
    """Median, minimum and maximum of repeated measurements."""

    median: float
    low: float
    high: float
    values: tuple[float, ...]


def spread(values: Sequence[float]) -> Spread:
    """Summarise ``values`` (at least one) as median, min and max."""
    if not values:
        raise ValueError("no measurements to summarise")
    vals = tuple(float(v) for v in values)
    return Spread(statistics.median(vals), min(vals), max(vals), vals)


def rates(seconds: Sequence[float], items: float) -> Spread:
    """Items per second of each repeat that handled ``items`` in ``seconds[i]``."""
    return spread([items / s for s in seconds])


def time_block(step: Callable[[], object], steps: int) -> float:
    """Wall seconds of ``steps`` consecutive calls of ``step``."""
    t0 = time.perf_counter()
    for _ in range(steps):
        step()
    return time.perf_counter() - t0


def warm_up(step: Callable[[], object], min_steps: int = 3, min_seconds: float = 0.3) -> int:
    """Call ``step`` until both ``min_steps`` calls and ``min_seconds`` have passed.

    The first call compiles (or loads) Numba kernels and fills caches; the
    later ones let allocators and the CPU clock settle. Returns the calls made.
    """
    t0 = time.perf_counter()
    done = 0
    while done < min_steps or time.perf_counter() - t0 < min_seconds:
        step()
        done += 1
        if done >= 50 * max(min_steps, 1):
            break
    return done


def interleaved(runs: Mapping[str, Callable[[], object]], steps: int,
                repeats: int) -> dict[str, list[float]]:
    """Time each callable ``repeats`` times in turn (A B A B ...), ``steps`` calls a block.

    Interleaving makes slow drifts of a shared machine hit every contender
    alike, so their ratio within one run is meaningful.

    Returns
    -------
    dict
        name -> list of ``repeats`` block times in seconds.
    """
    out: dict[str, list[float]] = {name: [] for name in runs}
    for _ in range(repeats):
        for name, step in runs.items():
            out[name].append(time_block(step, steps))
    return out


def gemm_rate(n: int = 2048, repeats: int = 5) -> Spread:
    """float32 ``n x n`` matrix-multiply rate of NumPy's BLAS, GFLOP/s (2 n^3 flops a product)."""
    import numpy as np

    rng = np.random.default_rng(0)
    a = rng.standard_normal((n, n), dtype=np.float32)
    b = rng.standard_normal((n, n), dtype=np.float32)
    out = np.empty((n, n), dtype=np.float32)
    np.matmul(a, b, out=out)  # warm-up: thread pool start, page faults
    secs = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        np.matmul(a, b, out=out)
        secs.append(time.perf_counter() - t0)
    return rates(secs, 2.0 * n ** 3 / 1e9)


def cpu_model() -> str:
    """The CPU model name from /proc/cpuinfo (or the platform's guess)."""
    try:
        with open("/proc/cpuinfo", encoding="utf-8") as fh:
            for line in fh:
                if line.lower().startswith("model name"):
                    return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or platform.machine()


def load_average() -> float | None:
    """The 1-minute load average (runnable processes), or None where the OS has none.

    Above the CPU count means other work competed for the cores while we
    measured: absolute figures are then low, and 2-thread figures worst hit.
    """
    try:
        return float(os.getloadavg()[0])
    except (AttributeError, OSError):
        return None


def blas_pools() -> list[dict]:
    """threadpoolctl's view of the loaded BLAS/OpenMP pools (empty if it is missing)."""
    try:
        import threadpoolctl
    except ImportError:
        return []
    keep = ("user_api", "internal_api", "prefix", "version", "num_threads", "architecture",
            "threading_layer")
    return [{k: info.get(k) for k in keep} for info in threadpoolctl.threadpool_info()]


def versions() -> dict[str, str | None]:
    """Versions of Python and of the numeric libraries (torch None when absent)."""
    import numba
    import numpy

    try:
        import torch
        torch_version = torch.__version__
    except ImportError:
        torch_version = None
    return {"python": platform.python_version(), "numpy": numpy.__version__,
            "numba": numba.__version__, "torch": torch_version,
            "executable": sys.executable}
