"""What the search loop needs of an executor: the :class:`Executor` protocol.

The loop (:mod:`search.runner`) drives any object with these members; the
local processes, the in-process runner and the Dask cluster
(:mod:`search.executors`) all are one. A new place to run units is a class
with the same members; nothing in the loop changes.
"""

from __future__ import annotations

from concurrent.futures import Future
from typing import Protocol, runtime_checkable


@runtime_checkable
class Executor(Protocol):
    """Runs work units and hands back futures of their results.

    Attributes
    ----------
    workers : int
        How many units may be in flight at once (the loop submits no more).
    description : str
        Where units run, for the summary (``"2 local worker processes"``).
    """

    workers: int
    description: str

    def submit(self, task) -> Future:
        """Start ``task`` (a ``search.unit.UnitTask``); the future gives its
        ``UnitResult``, or raises when something outside the unit failed (a dead
        worker: ``BrokenProcessPool`` for a local pool; a lost connection)."""

    def restart(self) -> None:
        """After a ``BrokenProcessPool``: drop the broken workers so that the next
        :meth:`submit` starts fresh ones (nothing to do where workers recover)."""

    def gone(self, exc: BaseException) -> str | None:
        """Why nothing more can run after ``exc`` (e.g. a lost scheduler), or None
        when only this unit failed and others may still run."""

    def how_to_resume(self) -> str:
        """What the user does to resume once the executor is gone."""

    def shutdown(self, cancel: bool = False) -> None:
        """Stop: after the units in flight, or with ``cancel`` at once."""
