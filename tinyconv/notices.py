"""Warnings as the tool's own one-line notices, in the CLI and in worker processes.

Python prints a warning with the file and line that raised it (often a path
inside site-packages) and its class name; a user of the command line needs
the message alone. :func:`show_warning` replaces :func:`warnings.showwarning`
while a command runs (:func:`tinyconv.cli.main` installs it) and in every
local worker of a search (:mod:`search.executors`): a data note
(:class:`~tinyconv.data.dataset.DataNote`) prints as ``note: ...``, any other
warning as ``warning: ...``, its first line only.
"""

from __future__ import annotations

import sys
from typing import TextIO


def warning_line(message: Warning | str, category: type[Warning]) -> str:
    """The one line a warning becomes: ``note: ...`` for data notes, else ``warning: ...``."""
    text = str(message).strip().splitlines()[0] if str(message).strip() else category.__name__
    names = {c.__name__ for c in category.__mro__}
    if "DataNote" in names:
        return text if text.startswith("note: ") else "note: " + text
    return "warning: " + text


def show_warning(message, category, filename, lineno, file: TextIO | None = None,
                 line: str | None = None) -> None:
    """A drop-in for :func:`warnings.showwarning` that prints :func:`warning_line`."""
    try:
        print(warning_line(message, category), file=file or sys.stderr, flush=True)
    except OSError:  # stderr closed: nothing to tell it to
        pass
