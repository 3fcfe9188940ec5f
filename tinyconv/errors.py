"""The exception types a user sees.

Every problem with what a user gave (a text, a file, a value) is an
:class:`InputError`, a ``ValueError``; the command line turns these into
``error: <what>: <where>`` and exit code 2 (see :mod:`tinyconv.cli`). So are
the faults of a run folder that the user must act on (a damaged or removed
store, a full disk, a read-only folder, a folder another search holds,
workers that went away):
their messages say which file or folder, what happened and what to do, and
what was finished is kept. Anything else that escapes is a bug and keeps its
traceback.
"""


class InputError(ValueError):
    """Something the user gave is wrong; the message says what and how to fix it."""


class DataError(InputError):
    """A data set, file or array that cannot be used as it is."""


class BudgetError(InputError):
    """No candidate survives the budgets, or a budget value is unusable."""


class RunError(InputError):
    """A run folder that cannot be used for the requested run (e.g. other data)."""


class StoreError(RunError):
    """The run store (``run.sqlite``) is damaged, was removed, or cannot be written."""


class WriteError(RunError):
    """A file could not be written (full disk, read-only folder, no permission);
    nothing partial was left in its place."""


class FolderBusyError(RunError):
    """Another process is writing the run folder; ``pid`` is its process id, if known."""

    def __init__(self, message: str, pid: int | None):
        super().__init__(message)
        self.pid = pid


class WorkersLostError(RunError):
    """Units could not run because their workers went away (a worker that died on
    every try, a Dask scheduler that disappeared); the finished units are kept."""


class DivergedError(ArithmeticError):
    """Training produced a non-finite loss; ``epoch`` says when (1-based)."""

    def __init__(self, message: str, epoch: int):
        super().__init__(message)
        self.epoch = epoch
