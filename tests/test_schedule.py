"""Tests of search/schedule.py: Hyperband planning, bracket assignment, promotion."""

from __future__ import annotations

import math
import subprocess
import sys

import pytest

from search import schedule


def _table(brackets):
    return {b.s: [(r.size, r.epochs) for r in b.rungs] for b in brackets}


def test_hyperband_table_r81_eta3():
    """The brackets for R=81, eta=3 reproduce the table of Li et al. (JMLR 2018)."""
    # Li et al., "Hyperband", JMLR 18(185) 2018, Table 1 (R = 81, eta = 3);
    # the same (n_i, r_i) pairs are worked out in CHECKS.md.
    expected = {
        4: [(81, 1), (27, 3), (9, 9), (3, 27), (1, 81)],
        3: [(34, 3), (11, 9), (3, 27), (1, 81)],
        2: [(15, 9), (5, 27), (1, 81)],
        1: [(8, 27), (2, 81)],
        0: [(5, 81)],
    }
    brackets = schedule.hyperband(81, 3)
    assert [b.s for b in brackets] == [4, 3, 2, 1, 0]
    assert _table(brackets) == expected


def test_levels_are_ladder_indices():
    """Each rung's level indexes the shared epoch ladder, ending at the top level."""
    brackets = schedule.hyperband(81, 3)
    epochs = schedule.ladder(81, 3)
    assert epochs == (1, 3, 9, 27, 81)
    for b in brackets:
        assert [r.epochs for r in b.rungs] == [epochs[r.level] for r in b.rungs]
        assert b.rungs[-1].level == len(epochs) - 1


@pytest.mark.parametrize("r,eta", [(243, 3), (81, 3), (80, 3), (1, 3), (2, 2),
                                   (1024, 2), (125, 5), (124, 5), (10**6, 10)])
def test_max_bracket_integer_loop(r, eta):
    """s_max is the largest s with eta**s <= R, exactly, even where log() rounds down."""
    s = schedule.max_bracket(r, eta)
    assert eta ** s <= r < eta ** (s + 1)


def test_log_pitfall_is_real():
    """The floating-point log gives 4 for log_3(243), which the integer loop avoids."""
    # CHECKS.md: log(243)/log(3) is 4.999999999999999 in IEEE double.
    assert math.floor(math.log(243) / math.log(3)) == 4
    assert schedule.max_bracket(243, 3) == 5


def test_ladder_not_power_of_eta():
    """When R is not a power of eta the ladder uses floor division and ends at R."""
    assert schedule.ladder(20, 3) == (2, 6, 20)
    assert schedule.ladder(9, 3) == (1, 3, 9)


@pytest.mark.parametrize("bad,match", [(0, "top_epochs must be at least 1"),
                                       (2.5, "top_epochs must be an integer")])
def test_bad_top_epochs(bad, match):
    """A non-integer or non-positive R is refused with the rule in the message."""
    with pytest.raises((ValueError, TypeError), match=match):
        schedule.hyperband(bad, 3)


def test_bad_eta():
    """eta below 2 would never shrink a rung and is refused."""
    with pytest.raises(ValueError, match="eta must be at least 2"):
        schedule.hyperband(9, 1)


def test_fit_to_pool_scales_in_proportion():
    """A bracket resized to a pool keeps its shrink factors, never below 1 per rung."""
    b = schedule.hyperband(81, 3)[0]
    fitted = schedule.fit_to_pool(b, 20)
    assert [r.size for r in fitted.rungs] == [20, 6, 2, 1, 1]
    assert [r.epochs for r in fitted.rungs] == [1, 3, 9, 27, 81]
    assert [r.size for r in schedule.fit_to_pool(b, 162).rungs] == [162, 54, 18, 6, 2]
    assert schedule.fit_to_pool(b, 81) == b


def test_first_bracket_starts_every_candidate():
    """The most aggressive bracket starts all candidates; later ones their textbook sizes."""
    cands = [f"8x8gray/d{i}" for i in range(1, 47)]
    plan = schedule.assign(cands, schedule.hyperband(9, 3), seed=4)   # sizes 9, 5, 3
    (b0, first), (b1, second), (b2, third) = plan
    assert sorted(first) == sorted(cands)
    assert [r.size for r in b0.rungs] == [46, 15, 5]
    assert len(second) == 5 and len(third) == 3
    assert not set(second) & set(third)  # the permutation continues, no repeat yet
    assert [r.size for r in b1.rungs] == [5, 1] and [r.size for r in b2.rungs] == [3]


def test_small_pool_shrinks_later_brackets():
    """With fewer candidates than a bracket wants, it takes them all, each once."""
    cands = ["8x8gray/d1", "8x8gray/d2"]
    plan = schedule.assign(cands, schedule.hyperband(9, 3), seed=0)
    for bracket, chosen in plan:
        assert sorted(chosen) == sorted(cands)
        assert bracket.rungs[0].size == 2 and bracket.rungs[-1].size >= 1


def test_assign_independent_of_input_order():
    """The same set of candidates in another order gives the same assignment."""
    cands = [f"8x8gray/d{i}" for i in range(1, 8)]
    brackets = schedule.hyperband(9, 3)
    a = schedule.assign(cands, brackets, seed=1)
    b = schedule.assign(list(reversed(cands)), brackets, seed=1)
    assert a == b
    assert schedule.assign(cands, brackets, seed=2) != a


def test_promote_ties_by_params_then_text():
    """Promotion orders by accuracy, ties go to fewer parameters, then text; None is dropped."""
    scores = {"b": 0.8, "a": 0.8, "c": 0.8, "d": 0.9, "e": None, "f": float("nan")}
    params = {"a": 100, "b": 50, "c": 100, "d": 999, "e": 1, "f": 1}
    assert schedule.promote(scores, 4, params) == ("d", "b", "a", "c")
    assert schedule.promote(scores, 10, params) == ("d", "b", "a", "c")
    assert schedule.promote(scores, 0, params) == ()


def test_full_plan_uses_top_level():
    """--full is one rung of every candidate at R, on the ladder's top level."""
    (b,) = schedule.full_plan(27, 14, eta=3)
    assert b.rungs == (schedule.Rung(3, 27, 14),)


def test_unit_seed_stable_across_processes():
    """Unit seeds come from hashlib, so another interpreter (new hash salt) agrees."""
    here = schedule.unit_seed(7, "8x8gray/c4k3", 2, 1)
    code = ("from search.schedule import unit_seed;"
            "print(unit_seed(7, '8x8gray/c4k3', 2, 1))")
    there = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                           check=True, env={"PYTHONHASHSEED": "123", "PATH": ""}).stdout
    assert int(there) == here
    assert schedule.unit_seed(7, "8x8gray/c4k3", 2, 2) != here
    assert 0 <= here < 2 ** 32


def test_base_epochs_drops_short_rungs():
    """A shortest rung of 9 epochs leaves the ladder 9, 27 and two brackets for R = 27."""
    # Hyperband with r_min = 9 and R = 27: the resource ratio R / r_min = 3, s_max = 1
    # (Li et al. 2018, with resources counted in units of r_min).
    assert schedule.ladder(27, 3, base_epochs=9) == (9, 27)
    assert _table(schedule.hyperband(27, 3, base_epochs=9)) == {1: [(3, 9), (1, 27)],
                                                                0: [(2, 27)]}
    assert schedule.ladder(20, 3, base_epochs=5) == (6, 20)
    assert min(schedule.ladder(100, 3, base_epochs=7)) >= 7
    with pytest.raises(ValueError, match="base_epochs must be an integer from 1 to top_epochs"):
        schedule.ladder(9, 3, base_epochs=10)
