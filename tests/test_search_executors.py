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
