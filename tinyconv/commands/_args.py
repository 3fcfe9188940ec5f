"""Option types shared by the commands: each checks one rule and says it."""

from __future__ import annotations

import argparse


def _number(text: str, kind: type, what: str):
    try:
        return kind(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not {what}") from None


def positive_int(text: str) -> int:
    """A whole number of at least 1."""
    value = _number(text, int, "a whole number")
    if value < 1:
        raise argparse.ArgumentTypeError(f"{value} must be at least 1")
    return value


def count(text: str) -> int:
    """A whole number of at least 0."""
    value = _number(text, int, "a whole number")
    if value < 0:
        raise argparse.ArgumentTypeError(f"{value} must be 0 or more")
    return value


def positive_float(text: str) -> float:
    """A number above 0."""
    value = _number(text, float, "a number")
    if not value > 0:
        raise argparse.ArgumentTypeError(f"{value} must be more than 0")
    return value


def add_device_options(target, core_use: str, clock_use: str, many: bool = False) -> None:
    """``--core`` and ``--clock-mhz`` on a parser or option group.

    ``core_use`` and ``clock_use`` say what the command does with them; the
    supported cores are listed from :data:`tinyconv.device.cores.CORES`.
    ``many``: ``--core`` may be repeated (and ``all`` means every core).
    """
    from tinyconv.device.cores import CORES
    names = ", ".join(CORES)
    target.add_argument("--core", action="append" if many else "store", default=None,
                        metavar="CORE",
                        help=f"{core_use} ({names}{' or all; may be repeated' if many else ''})")
    target.add_argument("--clock-mhz", type=positive_float, default=None, metavar="F",
                        help=f"{clock_use} (default: the core's assumed clock)")
