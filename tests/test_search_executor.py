"""Tests of search/executor.py: the executors the search ships satisfy the protocol."""

from __future__ import annotations

import inspect

import pytest

from search.executor import Executor
from search.executors import ClusterWorkers, InlineWorkers, LocalWorkers

METHODS = ("submit", "restart", "gone", "how_to_resume", "shutdown")


def test_local_and_inline_workers_are_executors(tmp_path):
    """A local pool (not started) and the in-process runner pass the protocol's check."""
    assert isinstance(LocalWorkers(tmp_path, 2), Executor)
    assert isinstance(InlineWorkers(data=None), Executor)


@pytest.mark.parametrize("cls", [LocalWorkers, InlineWorkers, ClusterWorkers])
def test_executor_methods_take_the_protocols_parameters(cls):
    """Each executor class defines every method of the protocol with its parameters."""
    for name in METHODS:
        ours = list(inspect.signature(getattr(cls, name)).parameters)
        wanted = list(inspect.signature(getattr(Executor, name)).parameters)
        assert ours == wanted, f"{cls.__name__}.{name}{ours} is not {wanted}"


def test_an_object_without_gone_is_not_an_executor():
    """The check fails for an object that lacks a member the loop calls."""

    class Partial:
        workers, description = 1, "partial"

        def submit(self, task):
            return None

        def restart(self):
            return None

        def how_to_resume(self):
            return ""

        def shutdown(self, cancel=False):
            return None

    assert not isinstance(Partial(), Executor)
