"""How a figure is written, wherever it is shown: terminal, report, export summary.

One form per kind of figure, so that the same accuracy reads the same on
screen, in the report and in the README: accuracies as percentages with one
decimal (``64.2%``), a mean with its standard error as ``64.2% ± 1.3%``,
counts with thousands separators (``19,080``), and a missing value as an
en dash.
"""

from __future__ import annotations

import math

#: The sign between a mean and its standard error, everywhere.
PLUS_MINUS = "\u00b1"
#: A value that is missing or not a number.
MISSING = "\u2013"


def _finite(value: object) -> float | None:
    try:
        f = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        return None
    return f if math.isfinite(f) else None


def percent(value: object, digits: int = 1) -> str:
    """A fraction as a percentage: ``0.9234 -> '92.3%'``; missing -> an en dash."""
    f = _finite(value)
    return MISSING if f is None else f"{100 * f:.{digits}f}%"


def accuracy(mean: object, se: object, digits: int = 1) -> str:
    """A mean accuracy with its standard error: ``'92.3% ± 1.2%'``."""
    return f"{percent(mean, digits)} {PLUS_MINUS} {percent(se, digits)}"


def count(value: object) -> str:
    """A whole number with thousands separators: ``19080 -> '19,080'``."""
    f = _finite(value)
    return MISSING if f is None else f"{round(f):,}"


def points(difference: object, digits: int = 1) -> str:
    """A difference of two accuracies in percentage points: ``0.014 -> '1.4 points'``."""
    f = _finite(difference)
    return MISSING if f is None else f"{100 * f:.{digits}f} points"
