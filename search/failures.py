"""Whose fault a failed unit is: the unit's own, or something outside it.

A unit's work (:func:`search.unit.run_unit`) never raises for a problem of
the unit itself: a non-finite loss comes back as ``diverged`` and an error in
training as ``failed``, results the unit would give again on any worker.
Those are final and stored. Anything that comes back *instead of* a result
(the worker process died, the unit was cancelled, the Dask scheduler went
away, the worker ran out of memory) is outside the unit: the search loop
runs the unit again, up to :data:`ATTEMPTS` times in a session, and never
stores it as failed, so a later session retries it too.

Stores written before this rule may hold such units as ``failed``;
:func:`outside_message` recognises their messages so that a resumed search
runs them again.
"""

from __future__ import annotations

from concurrent.futures import CancelledError
from concurrent.futures.process import BrokenProcessPool

#: Runs of a unit within one session before the session gives up on it (and
#: stops, resumable): the first run and two more.
ATTEMPTS = 3

#: How earlier versions worded failures that came from outside the unit: a dead
#: local worker, and exception names from the executor rather than the unit.
_OUTSIDE_STARTS = ("the worker process died while running this unit", "CancelledError",
                   "KilledWorker", "CommClosedError", "ClosedClientError",
                   "FutureCancelledError", "BrokenProcessPool", "MemoryError")


def describe(exc: BaseException) -> str:
    """A short account of an outside failure, for messages."""
    if isinstance(exc, BrokenProcessPool):
        return "its worker process died (killed, or out of memory)"
    if isinstance(exc, MemoryError):
        return "its worker ran out of memory"
    if isinstance(exc, CancelledError) or type(exc).__name__ == "FutureCancelledError":
        return "it was cancelled by the executor"
    if type(exc).__name__ == "KilledWorker":
        return "every Dask worker that ran it died"
    return f"the executor failed ({type(exc).__name__}: {exc})"


def outside_message(status: str, message: str) -> bool:
    """Whether a stored unit is a failure from outside the unit (to run again)."""
    return status == "failed" and message.startswith(_OUTSIDE_STARTS)
