"""The ``tinyconv`` command line.

Each command lives in its own module under :mod:`tinyconv.commands` with two
functions, ``configure(parser)`` and ``run(args) -> int``; the table below is
the only list of them, so ``tinyconv --help`` imports nothing heavy.

Exit codes (the one place they are decided):

* 0 — done;
* 1 — the command ran and its check failed (e.g. a gradient check);
* 2 — bad input: a wrong option, text, file or value; or a run folder the
  user must act on (a damaged or removed store, a full disk, a read-only
  folder, a folder another search holds, workers that went away); the
  message says
  ``error: <what>`` and how to fix it, and finished work is kept;
* 130 — interrupted (Ctrl-C); whatever was finished is kept;
* 141 — whoever read the output closed it early (``tinyconv cost ... --json |
  head``): the command stops quietly, as programs killed by SIGPIPE do
  (128 + 13, common practice).

While a command runs, Python warnings print as the tool's own one-line notes
(``note: ...`` / ``warning: ...``, :mod:`tinyconv.notices`), never
with a file path and a line of source.
"""

from __future__ import annotations

import argparse
import gc
import importlib
import os
import sys
import warnings
from typing import Sequence

from tinyconv import __version__
from tinyconv.notices import show_warning
from tinyconv.errors import InputError
from tinyconv.files import WRITE_FAULTS, fix_for, why_not_written

#: The exit code when the reader of the output closed it (see the module notes).
OUTPUT_CLOSED = 141

# name -> (module under tinyconv.commands, one-line help)
COMMANDS: dict[str, tuple[str, str]] = {
    "demo": ("demo", "the whole job on the built-in tile images: search, report, export"),
    "inspect": ("inspect", "what is in a data set: classes, counts, sizes, duplicates, folds"),
    "cost": ("cost", "per-layer parameters, MACs, activation memory and flash of a network"),
    "gradients": ("gradients", "finite-difference check of every gradient of a network"),
    "emulate": ("emulate", "run a network's int8 C on an emulated Cortex-M core: "
                           "instructions, time, flash, RAM, bit-exactness"),
    "space": ("space", "a commented starter search space sized for your data and budgets"),
    "search": ("search", "budgeted cross-validated search over a space of networks"),
    "report": ("report", "write the HTML report of a run folder"),
    "export": ("export", "retrain the pick on all data; write int8 weights and C code"),
}


class _Parser(argparse.ArgumentParser):
    """argparse with our error format and exit code 2."""

    def error(self, message: str) -> None:  # type: ignore[override]
        self.print_usage(sys.stderr)
        print(f"error: {message}", file=sys.stderr)
        raise SystemExit(2)


def build_parser(only: str | None = None) -> argparse.ArgumentParser:
    """The parser; with ``only``, just that command's module is imported."""
    parser = _Parser(prog="tinyconv", description="Choose a small image classifier that "
                     "fits a device budget, with cross-validated evidence.")
    parser.add_argument("--version", action="version", version=f"tinyconv {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for name, (module, help_text) in COMMANDS.items():
        cmd = sub.add_parser(name, help=help_text, description=help_text)
        if name == only:
            importlib.import_module(f"tinyconv.commands.{module}").configure(cmd)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run one command; returns the exit code (see the module docstring)."""
    argv = list(sys.argv[1:] if argv is None else argv)
    name = next((a for a in argv if not a.startswith("-")), None)
    parser = build_parser(only=name if name in COMMANDS else None)
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:
        return int(exc.code or 0)
    if args.command is None:
        parser.print_help()
        return 2
    module = importlib.import_module(f"tinyconv.commands.{COMMANDS[args.command][0]}")
    shown, warnings.showwarning = warnings.showwarning, show_warning
    try:
        code = int(module.run(args) or 0)
        sys.stdout.flush()   # a closed pipe shows here, not at the interpreter's exit
        return code
    except BrokenPipeError:
        _silence_stdout()
        return OUTPUT_CLOSED
    except InputError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    except FileNotFoundError as exc:
        print(f"error: no such file or folder: {exc.filename}; check the path", file=sys.stderr)
        return 2
    except OSError as exc:
        if exc.errno not in WRITE_FAULTS:
            raise
        # A write the commands do not route through tinyconv.files (a library's own file).
        print(f"error: cannot write {exc.filename or 'a file'}: {why_not_written(exc)}; "
              f"{fix_for(exc)} and run the same command again", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("interrupted; finished work is kept", file=sys.stderr)
        return 130
    finally:
        warnings.showwarning = shown


def run() -> None:
    """The program (``tinyconv`` and ``python -m tinyconv``): :func:`main` on the
    command line's arguments, then the process ends with its exit code.

    Before the end, every object left is moved out of the cyclic collector's
    reach (``gc.freeze``, standard library): the interpreter's last collection
    at exit would otherwise walk every object of NumPy, pandas, Numba and
    matplotlib once more, only to free memory that the ending process gives
    back whole (about 0.15 CPU-seconds after a search, of about 0.2 that the
    end took). Objects are still freed by reference counting, the standard
    streams are still flushed, and exit handlers still run; only garbage in
    reference cycles is left to the end of the process.
    """
    code = main()
    gc.freeze()
    raise SystemExit(code)


def _silence_stdout() -> None:
    """Point stdout at the null device, so that Python's last flush at exit does not
    fail again on the closed pipe (the Python documentation's advice for SIGPIPE)."""
    try:
        null = os.open(os.devnull, os.O_WRONLY)
        os.dup2(null, sys.stdout.fileno())
        os.close(null)
    except (OSError, ValueError):  # stdout is not a file descriptor (e.g. a test's buffer)
        pass
