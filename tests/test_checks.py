"""Tests of tinyconv/checks.py: the shared whole-number check and its one message style."""

from __future__ import annotations

import numpy as np
import pytest

from tinyconv.checks import whole_number
from tinyconv.errors import InputError


def test_whole_number_returns_a_plain_int():
    """A NumPy integer within the bounds comes back as a plain int of the same value."""
    got = whole_number(np.int64(5), "folds", low=2, high=9)
    assert got == 5 and type(got) is int


@pytest.mark.parametrize("value,match", [
    (1, r"^folds must be an integer >= 2, got 1; set --folds$"),
    (2.5, r"^folds must be an integer, got 2.5; set --folds$"),
    (True, r"^folds must be an integer, got True; set --folds$"),
])
def test_whole_number_names_value_rule_and_fix(value, match):
    """Too small, not whole, or a bool: the message names the value, the rule and the fix."""
    with pytest.raises(InputError, match=match):
        whole_number(value, "folds", low=2, fix="set --folds")


def test_whole_number_bounds_and_own_rule():
    """Both bounds read as a range; a rule given in words replaces the bounds' wording."""
    with pytest.raises(InputError, match=r"^copies must be an integer from 1 to 64, got 65$"):
        whole_number(65, "copies", low=1, high=64)
    with pytest.raises(InputError, match=r"^k must be a positive integer, got 0$"):
        whole_number(0, "k", low=1, rule="a positive integer")
    assert whole_number(-3, "seed") == -3
