"""Where units run: local worker processes, or a Dask cluster.

Both give ``concurrent.futures.Future`` objects from ``submit(task)``, so one
search loop (:mod:`search.runner`) drives either.

* :class:`LocalWorkers`: a ``ProcessPoolExecutor`` whose workers are forked
  from a fork server that warmed the engine once (Linux), or spawned (elsewhere;
  :mod:`search.worker_start`). Each worker runs one single-threaded engine: the
  BLAS and Numba thread counts are set to 1 in the environment the workers (and
  the server) start with (read by OpenBLAS, MKL and Numba when they load), and
  once more at run time with ``threadpoolctl`` when it is installed. The data
  reach each worker once: the first unit memory-maps the ``.npy`` files the
  search wrote in the run folder. :meth:`LocalWorkers.start` starts the fork
  server (or spawns the workers) at once, and with the default work the engine
  is warmed (one training step of a small network: Numba's first kernel loads;
  once in the server, or about 0.6 CPU-s in each spawned worker) while the
  search process is still loading the data and the space; the data files need
  only exist by the first unit. A crashed worker breaks the whole pool
  (``BrokenProcessPool``); the search loop then calls
  :meth:`LocalWorkers.restart` and finds the culprit.
* :class:`InlineWorkers`: units run one at a time in the calling process
  (``--workers 0``), with BLAS limited to one thread while they run; no
  start-up cost, for debugging and small tests.
* :class:`ClusterWorkers`: ``dask.distributed`` (the optional ``cluster``
  extra) through ``Client.get_executor()``; the data are scattered to every
  worker once (``broadcast=True``). A scheduler that goes away cancels every
  unit in flight; :meth:`ClusterWorkers.gone` tells that from a single lost
  unit, and the search stops with a named error (resumable). Workers should run one thread each
  (``--nthreads 1``), or their CPU-time figures include each other's work.

Local workers end with the search process, however it ends (even
``kill -9``): each watches its parent
(:func:`search.worker_start.end_with_parent`), so no worker is left running,
or blocked on a pipe, after its search died.

This module imports nothing heavy at the top, so that a spawned worker sets
its thread limits before NumPy is loaded.
"""

from __future__ import annotations

import contextlib
import os
from concurrent.futures import Future, ProcessPoolExecutor
from pathlib import Path
from typing import Callable, Iterator

THREAD_VARIABLES = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS",
                    "NUMBA_NUM_THREADS", "VECLIB_MAXIMUM_THREADS")

# The worker process's data and work function, set once by the initializer.
_WORKER: dict = {}


@contextlib.contextmanager
def single_threaded_env() -> Iterator[None]:
    """Set the thread-count variables to 1 while workers start; restore after."""
    saved = {k: os.environ.get(k) for k in THREAD_VARIABLES}
    os.environ.update({k: "1" for k in THREAD_VARIABLES})
    try:
        yield
    finally:
        for key, value in saved.items():
            if value is None:
                os.environ.pop(key, None)
            else:
                os.environ[key] = value


def limit_threads() -> None:
    """Limit BLAS/OpenMP pools of the current process to one thread, if possible."""
    os.environ.update({k: "1" for k in THREAD_VARIABLES})
    try:
        import threadpoolctl
    except ImportError:  # the environment variables already did it at load time
        return
    threadpoolctl.threadpool_limits(1)


def _init_worker(data_dir: str, work: Callable, warm: bool, search: int) -> None:
    from search.worker_start import end_with_parent
    end_with_parent(search)  # first: a warm-up below may take a second or more
    import warnings

    from tinyconv.notices import show_warning
    warnings.showwarning = show_warning  # the worker shares the search's stderr
    limit_threads()
    _WORKER.update(data_dir=data_dir, work=work, data=None)
    if warm:  # a few milliseconds in a worker forked from the warm server
        from search.unit import warm_up
        warm_up()


def _work_local(task):
    if _WORKER["data"] is None:
        from search.unit import UnitData
        _WORKER["data"] = UnitData.load(_WORKER["data_dir"])
    return _WORKER["work"](task, _WORKER["data"])


def _nothing() -> None:
    """A task that makes the pool spawn one more worker."""


def default_work() -> Callable:
    from search.unit import run_unit
    return run_unit


class LocalWorkers:
    """``workers`` local processes, each with the run's data loaded once.

    Parameters
    ----------
    data_dir : str or Path
        Folder holding the ``.npy`` files of :meth:`search.unit.UnitData.save`.
    workers : int
        Number of processes (>= 1).
    work : callable, optional
        ``work(task, data) -> UnitResult``, a module-level function (it is
        sent to the workers by reference); :func:`search.unit.run_unit` by default.
    """

    def __init__(self, data_dir: str | Path, workers: int, work: Callable | None = None):
        from tinyconv.checks import whole_number
        whole_number(workers, "--workers", low=1)
        self.data_dir = str(data_dir)
        self.workers = workers
        self.warm = work is None  # warm the engine only for the real unit work
        self.work = work or default_work()
        self._pool: ProcessPoolExecutor | None = None
        self._holds_server = False
        self.description = f"{workers} local worker process{'es' if workers > 1 else ''}"

    def _ensure(self) -> ProcessPoolExecutor:
        if self._pool is None:
            from search.worker_start import hold_server, worker_context
            context = worker_context(self.warm)
            if context.get_start_method() == "forkserver" and not self._holds_server:
                hold_server()
                self._holds_server = True
            self._pool = ProcessPoolExecutor(
                self.workers, mp_context=context, initializer=_init_worker,
                initargs=(self.data_dir, self.work, self.warm, os.getpid()))
        return self._pool

    def start(self) -> None:
        """Start the workers now (they warm up meanwhile); returns at once.

        With a fork server, this starts the server, which warms the engine while
        this process reads the data; the workers are forked from it at the first
        units, in milliseconds each (asking for a worker earlier would wait for
        the warm-up). Otherwise every worker is spawned now, since the pool would
        spawn one per submitted unit. Nothing here reads the data folder, which
        need only hold the data by the first unit.
        """
        with single_threaded_env():
            pool = self._ensure()
            if self._holds_server:
                from multiprocessing import forkserver
                forkserver.ensure_running()
                return
            for _ in range(self.workers):
                pool.submit(_nothing)

    def submit(self, task) -> Future:
        with single_threaded_env():
            return self._ensure().submit(_work_local, task)

    def restart(self) -> None:
        """Drop a broken pool; the next submit starts fresh processes (from the same
        fork server, which a crashed worker leaves running)."""
        if self._pool is not None:
            self._pool.shutdown(wait=False, cancel_futures=True)
        self._pool = None

    def gone(self, exc: BaseException) -> str | None:
        """Local workers are restarted as needed: never gone for good."""
        return None

    def how_to_resume(self) -> str:
        return "run the same command again to resume"

    def shutdown(self, cancel: bool = False) -> None:
        """Stop the workers: after their units, or with ``cancel`` at once.

        ``cancel`` drops queued units and terminates the processes (a unit
        writes nothing; the search process stores results), so that an error
        or an interrupt is not held up by a unit or a warm-up in progress.
        """
        if self._pool is not None:
            # The process table is the pool's own (no public way to stop workers
            # before Python 3.14); without it, exit waits for the running units.
            processes = list(getattr(self._pool, "_processes", {}).values()) if cancel else []
            self._pool.shutdown(wait=not cancel, cancel_futures=cancel)
            for process in processes:
                process.terminate()
            for process in processes:
                process.join(timeout=5)
        self._pool = None
        if self._holds_server:
            from search.worker_start import release_server
            self._holds_server = False
            release_server(kill=cancel)


class InlineWorkers:
    """Run each unit at once in this process; futures come back finished.

    Parameters
    ----------
    data : search.unit.UnitData
    work : callable, optional
        As for :class:`LocalWorkers`.
    """

    workers = 1
    description = "in this process (no workers)"

    def __init__(self, data, work: Callable | None = None):
        self.data = data
        self.work = work or default_work()

    def submit(self, task) -> Future:
        future: Future = Future()
        try:
            import threadpoolctl
            limits = threadpoolctl.threadpool_limits(1)
        except ImportError:
            limits = contextlib.nullcontext()
        with limits:
            try:
                future.set_result(self.work(task, self.data))
            except Exception as exc:  # reported by the loop as a failed unit
                future.set_exception(exc)
        return future

    def restart(self) -> None:
        """Nothing to restart."""

    def gone(self, exc: BaseException) -> str | None:
        """This process runs the units: never gone."""
        return None

    def how_to_resume(self) -> str:
        return "run the same command again to resume"

    def shutdown(self, cancel: bool = False) -> None:
        """Nothing to stop."""


def _work_cluster(task, data, work):
    limit_threads()
    return work(task, data)


class ClusterWorkers:
    """Units on a Dask cluster at ``address`` (``tcp://HOST:PORT``).

    Parameters
    ----------
    address : str or a ``distributed`` cluster object
    data : search.unit.UnitData
        Scattered to every worker once.
    work : callable, optional
        As for :class:`LocalWorkers`.

    Raises
    ------
    InputError
        When dask.distributed is not installed, or the scheduler cannot be reached.
    """

    def __init__(self, address, data, work: Callable | None = None, timeout: float = 20.0):
        from tinyconv.errors import InputError
        self._lost = False
        try:
            from distributed import Client
        except ImportError:
            raise InputError("--cluster needs dask.distributed; install the cluster extra: "
                             "pip install 'tinyconv[cluster]'") from None
        try:
            self.client = Client(address, timeout=timeout)
        except (OSError, TimeoutError) as exc:
            raise InputError(f"--cluster {address}: cannot reach a Dask scheduler there "
                             f"({exc}); start one with 'dask scheduler' and workers with "
                             "'dask worker ADDRESS --nthreads 1'") from None
        self.address = str(getattr(address, "scheduler_address", address))
        # From the start, not only once a loss is seen: a connection that breaks logs
        # a traceback from dask's own loggers before the search can notice the loss.
        _quiet_dask()
        self.work = work or default_work()
        try:
            self._data = self.client.scatter(data, broadcast=True)
            self.workers = max(1, sum(self.client.nthreads().values()))
        except Exception as exc:  # the scheduler went away while the data were sent
            from tinyconv.errors import WorkersLostError
            self.shutdown(cancel=True)
            raise WorkersLostError(f"--cluster {self.address}: the Dask scheduler went away "
                                   f"while the data were sent ({type(exc).__name__}); "
                                   f"{self.how_to_resume()}") from None
        self._pool = self.client.get_executor(pure=False)
        self.description = f"Dask cluster {self.client.scheduler.address} " \
                           f"({self.workers} worker threads)"

    def submit(self, task) -> Future:
        return self._pool.submit(_work_cluster, task, self._data, self.work)

    def restart(self) -> None:
        """Nothing to do: Dask replaces lost workers and retries their tasks."""

    def gone(self, exc: BaseException) -> str | None:
        """Whether the client lost its scheduler (then nothing more can run).

        A lost scheduler cancels every unit in flight and leaves the client
        trying to reconnect (its status is no longer ``running``); a unit that
        failed while the client is connected is only that unit's bad luck.
        """
        status = str(getattr(self.client, "status", "running"))
        if status.endswith("running"):
            return None
        self._lost = True
        _quiet_dask()  # its own reconnect attempts would log tracebacks
        from search.failures import describe
        return (f"--cluster {self.address}: the connection to the Dask scheduler was lost "
                f"({describe(exc)}; the client is {status.rsplit('.', 1)[-1]})")

    def how_to_resume(self) -> str:
        return ("start a Dask scheduler and workers again ('dask scheduler', 'dask worker "
                "ADDRESS --nthreads 1') and run the same command to resume")

    def shutdown(self, cancel: bool = False) -> None:
        if self._lost:
            cancel = True  # nothing can finish without a scheduler
        with contextlib.suppress(Exception):
            self._pool.shutdown(wait=not cancel)
        with contextlib.suppress(Exception):
            if self._lost:
                self.client.close(timeout=5)  # it would wait for a reconnect otherwise
            else:
                self.client.close()


def _quiet_dask() -> None:
    """Keep dask.distributed's log (on stderr) to critical messages: a broken
    connection and the reconnect attempts after a lost scheduler log tracebacks,
    and the search says what happened in one error line instead."""
    import logging
    # dask.distributed's logging configuration sets levels on its sub-loggers
    # (distributed.client, ...), so each of them is turned down; so are those of
    # the event loop under it (tornado, asyncio), which log the broken connections.
    roots = ("distributed", "tornado", "asyncio")
    names = [n for n in logging.root.manager.loggerDict if n.split(".")[0] in roots]
    for name in [*roots, *names]:
        logging.getLogger(name).setLevel(logging.CRITICAL)
