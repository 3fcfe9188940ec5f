"""The tool's own notes on stderr: data warnings, library warnings, a cold kernel cache.

Python prints a warning with the file and line that raised it (often a path
inside site-packages) and its class name; a user of the command line needs
the message alone. :func:`show_warning` replaces :func:`warnings.showwarning`
while a command runs (:func:`tinyconv.cli.main` installs it): a data note
(:class:`~tinyconv.data.dataset.DataNote`) prints as ``note: ...``, any other
warning as ``warning: ...``, its first line only.
"""

from __future__ import annotations

import sys
from typing import TextIO

#: What the commands print before a run that compiles the engine's kernels.
COLD_KERNELS = ("note: the engine's kernels are not compiled on this machine yet: this run "
                "compiles and caches them first (about 20 s, once)")


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


def kernels_note() -> str | None:
    """:data:`COLD_KERNELS` when the kernel cache is cold, else None."""
    from tinyconv.layers.kernel_cache import cold
    return COLD_KERNELS if cold() else None
