"""Tests of a Dask scheduler lost in the middle of a search, with a real local cluster:
``dask scheduler`` and ``dask worker`` processes on 127.0.0.1, killed for real."""

from __future__ import annotations

import os
import signal
import socket
import subprocess
from pathlib import Path

import pytest

import search
from helpers import tiny_request, units_stored
from processes import descendants, kill_all, tinyconv, wait_for, wait_gone
from run_folders import clean_failure, search_argv, space_file
from search.session import run_search
from search.store import FILE, RunStore

pytestmark = [pytest.mark.slow, pytest.mark.cluster]

#: The folder holding this checkout's packages: Dask workers import the unit
#: code from it, as the search process does.
CODE = str(Path(search.__file__).resolve().parents[1])


class LocalCluster:
    """A scheduler and two single-threaded workers, as separate real processes."""

    def __init__(self):
        distributed = pytest.importorskip("distributed")
        del distributed
        self.port = _free_port()
        self.address = f"tcp://127.0.0.1:{self.port}"
        env = {**os.environ, "PYTHONPATH": CODE, "OMP_NUM_THREADS": "1",
               "OPENBLAS_NUM_THREADS": "1", "MKL_NUM_THREADS": "1", "NUMBA_NUM_THREADS": "1"}
        quiet = dict(stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env,
                     start_new_session=True)
        self.scheduler = subprocess.Popen(
            ["dask", "scheduler", "--host", "127.0.0.1", "--port", str(self.port),
             "--no-dashboard"], **quiet)
        self.workers = subprocess.Popen(
            ["dask", "worker", self.address, "--nworkers", "2", "--nthreads", "1",
             "--no-dashboard"], **quiet)
        self.pids: list[int] = [self.scheduler.pid, self.workers.pid]

    def wait_ready(self) -> None:
        from distributed import Client
        with Client(self.address, timeout=60) as client:
            client.wait_for_workers(2, timeout=60)
        self.pids += descendants(self.workers.pid)

    def kill_scheduler(self) -> None:
        os.killpg(self.scheduler.pid, signal.SIGKILL)
        self.scheduler.wait()

    def stop(self) -> None:
        for proc in (self.scheduler, self.workers):
            if proc.poll() is None:
                os.killpg(proc.pid, signal.SIGKILL)
            proc.wait()
        kill_all(self.pids)


def _free_port() -> int:
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]



@pytest.fixture()
def clusters():
    """Start local clusters on demand; every process of them is gone at the end."""
    made: list[LocalCluster] = []

    def start() -> LocalCluster:
        cluster = LocalCluster()
        made.append(cluster)
        cluster.wait_ready()
        return cluster

    yield start
    for cluster in made:
        cluster.stop()
    assert wait_gone([pid for c in made for pid in c.pids]) == []


def test_lost_scheduler_is_a_named_error_and_the_run_resumes(clusters, tmp_path):
    """Killing the scheduler mid-search ends the search with exit 2 and one error line;
    a new cluster resumes it to the ranking of an uninterrupted run; nothing is left."""
    reference = tmp_path / "reference"
    run_search(tiny_request(reference))
    first = clusters()
    run = tmp_path / "run"
    argv = search_argv(space_file(tmp_path), run) + ["--cluster", first.address]
    argv.remove("--workers"), argv.remove("0")
    proc = tinyconv(*argv, env={**os.environ, "PYTHONPATH": CODE})
    try:
        wait_for(lambda: units_stored(run / FILE) >= 2, "two units were stored", proc=proc)
        first.kill_scheduler()
        _out, err = proc.communicate(timeout=120)
    finally:
        kill_all([proc.pid, *descendants(proc.pid)])
    assert proc.returncode == 2, err
    assert clean_failure(err), err
    assert f"--cluster {first.address}: the connection to the Dask scheduler was lost" in err
    assert "finished units are kept in" in err and "run the same command to resume" in err
    with RunStore(run) as store:
        stored = len(store.units())
        assert store.outcome()["state"] == "stopped"
    assert 2 <= stored < len(RunStore(reference).units())
    first.stop()
    second = clusters()
    again = run_search(tiny_request(run, cluster=second.address))
    assert again.outcome.state == "complete"
    assert again.outcome.units_run == len(RunStore(reference).units()) - stored
    assert (run / "ranking.csv").read_bytes() == (reference / "ranking.csv").read_bytes()
