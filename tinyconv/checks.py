"""Small checks of a value given to tinyconv, each returning the checked value.

One error style for all of them: an :class:`~tinyconv.errors.InputError` (a
``ValueError``; exit code 2 on the command line) whose message names the
value, states the rule and, when there is one, says what to do:
``folds must be an integer >= 2, got 1; set --folds``. The type is checked
before the value (``seed must be an integer, got 2.5``).
"""

from __future__ import annotations

import numbers
from typing import Any

from tinyconv.errors import InputError


def whole_number(value: Any, name: str, low: int | None = None, high: int | None = None,
                 fix: str = "", rule: str = "") -> int:
    """``value`` as an ``int`` when it is a whole number (not a bool) in ``[low, high]``.

    Parameters
    ----------
    value : any
        What was given; NumPy integers are accepted.
    name : str
        How the message names it (``"folds"``, ``"--workers"``).
    low, high : int, optional
        The bounds, inclusive (none when None).
    fix : str
        What to do instead, appended after ``; `` (nothing when empty).
    rule : str
        The rule in words, in place of the one made from the bounds (e.g. ``"a
        positive integer"``).

    Raises
    ------
    InputError
        ``"{name} must be {rule}, got {value!r}; {fix}"``.
    """
    if not isinstance(value, numbers.Integral) or isinstance(value, bool):
        raise InputError(_message(name, rule or "an integer", value, fix))
    if (low is not None and value < low) or (high is not None and value > high):
        raise InputError(_message(name, rule or _bounds(low, high), value, fix))
    return int(value)


def _bounds(low: int | None, high: int | None) -> str:
    if low is not None and high is not None:
        return f"an integer from {low} to {high}"
    if low is not None:
        return f"an integer >= {low}"
    return f"an integer <= {high}"


def _message(name: str, rule: str, value: Any, fix: str) -> str:
    return f"{name} must be {rule}, got {value!r}" + (f"; {fix}" if fix else "")
