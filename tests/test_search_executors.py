"""Tests of search/executors.py: thread settings, argument checks, an unreachable cluster."""

from __future__ import annotations

import os

import pytest

from search.executors import (THREAD_VARIABLES, ClusterWorkers, InlineWorkers, LocalWorkers,
                              single_threaded_env)
from tinyconv.errors import InputError


def test_single_threaded_env_sets_and_restores(monkeypatch):
    """Workers start with every thread-count variable at 1; the caller's values come back."""
    monkeypatch.setenv("OMP_NUM_THREADS", "7")
    monkeypatch.delenv("OPENBLAS_NUM_THREADS", raising=False)
    with single_threaded_env():
        assert all(os.environ[k] == "1" for k in THREAD_VARIABLES)
    assert os.environ["OMP_NUM_THREADS"] == "7"
    assert "OPENBLAS_NUM_THREADS" not in os.environ


def test_local_workers_need_one(tmp_path):
    """Zero local worker processes is refused, naming the option."""
    with pytest.raises(InputError, match="--workers must be an integer >= 1, got 0"):
        LocalWorkers(tmp_path, 0)


def _boom(task, data):
    raise RuntimeError(f"no unit {task}")


def test_inline_workers_hand_back_errors():
    """An exception in an in-process unit comes back through its future, not raised."""
    future = InlineWorkers(data=None, work=_boom).submit("x")
    assert isinstance(future.exception(), RuntimeError)


@pytest.mark.cluster
@pytest.mark.slow
def test_unreachable_cluster_is_input_error():
    """A scheduler address with nobody listening is a clear error with what to start."""
    pytest.importorskip("distributed")
    with pytest.raises(InputError, match=r"cannot reach a Dask scheduler there(.|\n)*"
                                         r"dask worker ADDRESS --nthreads 1"):
        ClusterWorkers("tcp://127.0.0.1:9", None, timeout=1)


def _sleep_long(task, data):
    import time
    time.sleep(60)


def test_started_workers_spawn_at_once_and_cancel_stops_them(tmp_path):
    """start() starts every worker (or, forking, the fork server) before any unit; cancel
    terminates a running unit promptly, and the fork server with it."""
    import multiprocessing.forkserver as forkserver
    import time

    import numpy as np

    from search.unit import UnitData
    UnitData(np.zeros((3, 4, 4, 1), np.uint8), np.arange(3), np.arange(3)).save(tmp_path)
    workers = LocalWorkers(tmp_path, 2, work=_sleep_long)
    workers.start()
    pool = workers._pool
    server = forkserver._forkserver._forkserver_pid if workers._holds_server else None
    if server is None:  # spawned workers
        deadline = time.monotonic() + 30
        while len(pool._processes) < 2 and time.monotonic() < deadline:
            time.sleep(0.05)
        assert len(pool._processes) == 2
    else:
        assert not pool._processes and _alive(server)
    future = workers.submit("a unit that would sleep for a minute")
    time.sleep(0.5)
    assert future.running()
    processes = list(pool._processes.values())
    t0 = time.monotonic()
    workers.shutdown(cancel=True)
    assert time.monotonic() - t0 < 10
    assert all(_gone(p) for p in processes)
    assert server is None or not _alive(server)


def _alive(pid: int) -> bool:
    """Whether process ``pid`` exists (POSIX kill with signal 0)."""
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    return True


def _gone(process) -> bool:
    """Whether a worker process has ended (whichever thread of the pool reaped it)."""
    process.join(timeout=5)
    if process.exitcode is not None:
        return True
    try:
        os.kill(process.pid, 0)  # reaped elsewhere: the pid no longer exists
    except ProcessLookupError:
        return True
    return False


def test_warm_up_trains_the_warm_up_network():
    """The worker warm-up runs (its network parses, trains with both optimisers, evaluates)."""
    from search.unit import WARM_UP_ARCH, warm_up
    from tinyconv.arch import parse
    from tinyconv.layers import Conv
    from tinyconv.network import Network
    assert str(parse(WARM_UP_ARCH)) == WARM_UP_ARCH
    net = Network.from_arch(WARM_UP_ARCH, 2)
    chosen = {l.resolve_algorithm(*op.in_shape[:2], training=True)
              for l, op in zip(net.layers, net.ops) if isinstance(l, Conv)}
    assert chosen == {"im2col", "winograd", "winograd4"}  # it loads every conv algorithm
    warm_up()


def _probe(task, data):
    """What a worker holds before its first unit: the warm server's module, whether a
    kernel's machine code is loaded, its parent process."""
    import sys

    from tinyconv.layers.kernels_act import _relu_kernel
    return ("search.warm_server" in sys.modules, len(_relu_kernel.overloads) > 0,
            os.getppid())


@pytest.mark.skipif(not os.path.exists("/proc/self/stat"), reason="reads Linux's /proc")
def test_linux_workers_fork_from_a_warm_server_that_ends_with_the_pool(tmp_path):
    """On Linux the default workers are forked from a fork server that warmed the engine
    (its kernels are loaded before any unit); the last shutdown stops the server."""
    import multiprocessing.forkserver as forkserver

    import numpy as np

    from search import executors
    from search.unit import UnitData
    from search.worker_start import parent_of, start_method
    assert start_method() == "forkserver"
    UnitData(np.zeros((3, 4, 4, 1), np.uint8), np.arange(3), np.arange(3)).save(tmp_path)
    workers = LocalWorkers(tmp_path, 2)
    workers.work = _probe   # the default (warm) start, then a probe in place of a unit
    try:
        workers.start()
        answers = [workers.submit(i).result(timeout=120) for i in range(2)]
        server = forkserver._forkserver._forkserver_pid
    finally:
        workers.shutdown()
    assert all(warm and loaded for warm, loaded, _ in answers), answers
    assert {parent for _, _, parent in answers} == {server}
    assert forkserver._forkserver._forkserver_pid is None
    assert parent_of(server) is None  # stopped and waited for: no such process any more
    assert executors._WORKER == {}  # this process never ran a worker's set-up


def test_parent_of_reads_this_process():
    """parent_of gives this process's parent as os.getppid does (POSIX), None for no process."""
    from search.worker_start import parent_of
    if not os.path.exists("/proc/self/stat"):
        pytest.skip("reads Linux's /proc")
    assert parent_of(os.getpid()) == os.getppid()
    assert parent_of(2 ** 22 + 12345) is None
