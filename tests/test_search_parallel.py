"""Tests of searches on worker processes and a Dask cluster: same results, kills.

Workers that die (and units run again) are tested in test_search_retry.py."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from helpers import TINY_DATA, TINY_SPACE, tiny_request, units_stored
from search.session import SearchRequest, run_search
from search.store import RunStore

pytestmark = pytest.mark.slow

DATA, SPACE = TINY_DATA, TINY_SPACE


def request(out: Path, **change) -> SearchRequest:
    return tiny_request(out, **{"workers": 2, **change})


def _same_units(a: Path, b: Path) -> None:
    cols = ["candidate", "fold", "rung", "epochs", "status", "held_acc", "train_acc",
            "held_loss", "history", "seed"]
    ua, ub = RunStore(a).units()[cols], RunStore(b).units()[cols]
    assert ua.equals(ub)
    for cand in ua["candidate"].unique():
        np.testing.assert_array_equal(RunStore(a).prediction_probs(cand),
                                      RunStore(b).prediction_probs(cand))


@pytest.fixture(scope="module")
def reference(tmp_path_factory):
    """An uninterrupted search on two local worker processes."""
    out = tmp_path_factory.mktemp("two_workers")
    return out, run_search(request(out))


def test_one_worker_equals_two(reference, tmp_path):
    """One worker process, two, or none (in this process) give identical units and ranking."""
    ref, _ = reference
    for workers in (1, 0):
        out = tmp_path / f"w{workers}"
        run_search(request(out, workers=workers))
        assert (out / "ranking.csv").read_bytes() == (ref / "ranking.csv").read_bytes()
        _same_units(out, ref)



def test_sigkill_then_rerun_gives_same_ranking(reference, tmp_path):
    """SIGKILL at a random moment, then the same command: the same ranking, bit for bit."""
    ref, ref_summary = reference
    space = tmp_path / "space.toml"
    space.write_text(SPACE)
    out = tmp_path / "run"
    cmd = [sys.executable, "-m", "tinyconv", "search", DATA, "--space", str(space), "--out",
           str(out), "--folds", "3", "--seed", "2", "--top-epochs", "3", "--workers", "2",
           "--batch-size", "16", "--lr", "0.01"]
    rng = np.random.default_rng(int(time.time()))  # a different moment each run
    target = int(rng.integers(1, 12))
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                            start_new_session=True)
    deadline = time.monotonic() + 120
    while units_stored(out / "run.sqlite") < target and proc.poll() is None \
            and time.monotonic() < deadline:
        time.sleep(0.02)
    time.sleep(float(rng.uniform(0, 0.05)))
    alive = proc.poll() is None
    os.killpg(proc.pid, signal.SIGKILL)  # the search and its workers, no clean-up
    proc.wait()
    assert alive, f"the search finished before it could be killed (target {target} units)"
    # A kill inside a commit leaves a hot journal: RunStore then reads a private
    # copy with the journal played back (the store as last committed).
    stored = len(RunStore(out).units())
    assert stored <= len(RunStore(ref).units())
    # The same search again (in this process, which skips the report step).
    again = run_search(request(out, space=str(space)))
    assert again.outcome.units_run == len(RunStore(ref).units()) - stored
    assert (out / "ranking.csv").read_bytes() == (ref / "ranking.csv").read_bytes()
    units = RunStore(out).units()
    assert not units.duplicated(["candidate", "fold", "rung"]).any()
    assert len(units) == len(RunStore(ref).units())
    _same_units(out, ref)


@pytest.mark.cluster
def test_dask_local_cluster_matches_local_processes(reference, tmp_path):
    """A Dask LocalCluster (2 processes, 1 thread each) gives the local processes' results."""
    distributed = pytest.importorskip("distributed")
    from search.executors import single_threaded_env

    ref, _ = reference
    with single_threaded_env():
        cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                           dashboard_address=None)
    try:
        summary = run_search(request(tmp_path, cluster=cluster.scheduler_address))
    finally:
        cluster.close()
    assert summary.workers.startswith("Dask cluster")
    assert (tmp_path / "ranking.csv").read_bytes() == (ref / "ranking.csv").read_bytes()
    _same_units(tmp_path, ref)
