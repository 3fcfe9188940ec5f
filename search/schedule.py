"""Planning successive halving over epochs, in several brackets.

Successive halving gives many candidates a few epochs, keeps the best
``1/eta`` of them, gives those ``eta`` times more epochs, and so on. How
aggressive to be is a trade-off (a slow starter may be dropped too early), so
Hyperband runs several *brackets*, from the most aggressive (many candidates,
one epoch to start) to plain full training of a few (Li et al., "Hyperband",
JMLR 18(185), 2018). With ``R`` the most epochs any unit trains for:

* ``s_max = floor(log_eta R)``, the largest ``s`` with ``eta**s <= R``;
* bracket ``s`` (``s = s_max, ..., 0``) starts
  ``n = ceil((s_max + 1) * eta**s / (s + 1))`` candidates at ``r = R / eta**s``
  epochs; its rung ``i`` keeps ``n_i = floor(n / eta**i)`` candidates at
  ``r_i = r * eta**i`` epochs.

A rung shorter than ``base_epochs`` can be asked to be left out: the ladder
then starts at ``base_epochs`` or above (fewer levels, fewer brackets), for
data on which a few epochs say nothing yet about the final ranking.

Here the epochs of every bracket come from one *ladder* of levels,
``epochs[j] = R // eta**(s_max - j)`` for ``j = 0..s_max`` (exactly
``R / eta**(s_max - j)`` when ``R`` is a power of ``eta``), so bracket ``s``
uses the levels ``s_max - s .. s_max``. A work unit is (candidate, fold,
level): the same candidate met at the same level by two brackets is trained
once, and a unit's seed depends on the level, never on the bracket.

The space is a finite list, not a distribution to sample from. The most
aggressive bracket therefore starts *every* candidate (its rung sizes scale
with the pool, never below one): that is plain successive halving over the
whole space, where the savings come from. The other brackets hedge against
dropping a slow starter too early: each takes its textbook number of
candidates from one seeded permutation, wrapping round, and gives them more
epochs from the start (shrunk in proportion when the pool is smaller).

Everything here is pure planning on integers: ``log()`` is never used because
``log(243) / log(3)`` is 4.999999999999999 in floating point.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from typing import Mapping, Sequence

import numpy as np

from tinyconv.checks import whole_number


@dataclass(frozen=True)
class Rung:
    """One rung of a bracket: ``size`` candidates trained ``epochs`` epochs.

    ``level`` is the index of ``epochs`` in the ladder (0 = fewest epochs);
    it is the ``rung`` the store and the unit seeds use.
    """

    level: int
    epochs: int
    size: int


@dataclass(frozen=True)
class Bracket:
    """A successive-halving run: rungs with shrinking size and growing epochs."""

    s: int
    rungs: tuple[Rung, ...]

    @property
    def size(self) -> int:
        """Candidates the bracket starts with."""
        return self.rungs[0].size

    def epoch_cost(self) -> int:
        """Epochs per fold if every rung runs in full: ``sum n_i * r_i``."""
        return sum(r.size * r.epochs for r in self.rungs)


def _check(top_epochs: int, eta: int) -> None:
    for name, value, low in (("top_epochs", top_epochs, 1), ("eta", eta, 2)):
        if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
            raise TypeError(f"{name} must be an integer, got {type(value).__name__}")
        if value < low:
            raise ValueError(f"{name} must be at least {low}, got {value}")


def max_bracket(top_epochs: int, eta: int, base_epochs: int = 1) -> int:
    """``s_max``: the largest ``s`` with ``base_epochs * eta**s <= top_epochs``.

    With ``base_epochs = 1`` this is ``floor(log_eta(top_epochs))``, by an
    integer loop.

    >>> max_bracket(81, 3), max_bracket(80, 3), max_bracket(243, 3), max_bracket(27, 3, 9)
    (4, 3, 5, 1)
    """
    _check(top_epochs, eta)
    whole_number(base_epochs, "base_epochs", low=1, high=top_epochs,
                 rule=f"an integer from 1 to top_epochs ({top_epochs})")
    s, power = 0, eta
    while power * base_epochs <= top_epochs:
        s += 1
        power *= eta
    return s


def ladder(top_epochs: int, eta: int, base_epochs: int = 1) -> tuple[int, ...]:
    """Epochs per level: ``top_epochs // eta**(s_max - j)``, ``j = 0..s_max``.

    The entries strictly increase, none is below ``base_epochs``, and the last
    is ``top_epochs``.

    >>> ladder(81, 3), ladder(20, 3), ladder(27, 3, base_epochs=9)
    ((1, 3, 9, 27, 81), (2, 6, 20), (9, 27))
    """
    s_max = max_bracket(top_epochs, eta, base_epochs)
    return tuple(top_epochs // eta ** (s_max - j) for j in range(s_max + 1))


def hyperband(top_epochs: int, eta: int = 3, base_epochs: int = 1) -> tuple[Bracket, ...]:
    """The textbook brackets, most aggressive first (``s = s_max, ..., 0``).

    Parameters
    ----------
    top_epochs : int
        ``R``, the most epochs one unit trains for (>= 1).
    eta : int
        The halving rate (>= 2): each rung keeps ``1/eta`` of the previous one.
    base_epochs : int
        The fewest epochs of any rung: where held-out accuracy starts to say
        something about the final ranking (1 gives the textbook brackets).

    Returns
    -------
    tuple of Bracket
        Rung sizes ``n_i = floor(n / eta**i)`` with
        ``n = ceil((s_max + 1) eta**s / (s + 1))`` (Li et al. 2018, Algorithm 1).
    """
    epochs = ladder(top_epochs, eta, base_epochs)
    s_max = len(epochs) - 1
    brackets = []
    for s in range(s_max, -1, -1):
        n = -(-(s_max + 1) * eta ** s // (s + 1))  # integer ceil
        rungs = tuple(Rung(s_max - s + i, epochs[s_max - s + i], n // eta ** i)
                      for i in range(s + 1))
        brackets.append(Bracket(s, rungs))
    return tuple(brackets)


def full_plan(top_epochs: int, n_candidates: int, eta: int = 3,
              base_epochs: int = 1) -> tuple[Bracket, ...]:
    """One bracket of one rung: every candidate at ``top_epochs`` (``--full``).

    The rung sits at the top level of the ladder, so its units are the same
    (same seeds) as the final rung of a successive-halving run with the same
    ``top_epochs``, ``eta`` and ``base_epochs``.
    """
    s_max = max_bracket(top_epochs, eta, base_epochs)
    if n_candidates < 1:
        raise ValueError(f"n_candidates must be at least 1, got {n_candidates}")
    return (Bracket(0, (Rung(s_max, top_epochs, n_candidates),)),)


def fit_to_pool(bracket: Bracket, n_candidates: int) -> Bracket:
    """The bracket resized to start ``n_candidates`` (a no-op at its own size).

    Rung ``i`` keeps ``max(1, floor(m * n_i / n))`` candidates for ``m``
    starters instead of ``n``: the bracket's own shrink factors, in integers.
    """
    n = bracket.size
    m = max(int(n_candidates), 1)
    if m == n:
        return bracket
    rungs = tuple(Rung(r.level, r.epochs, max(1, m * r.size // n)) for r in bracket.rungs)
    return Bracket(bracket.s, rungs)


def permutation(candidates: Sequence[str], seed: int) -> list[str]:
    """A seeded shuffle of ``candidates``, independent of their given order.

    The texts are first sorted, so the same set gives the same permutation
    whatever order the space file listed them in.
    """
    ordered = sorted(candidates)
    if len(set(ordered)) != len(ordered):
        raise ValueError("candidate texts must be distinct")
    rng = np.random.default_rng(derive_seed(seed, "bracket-assignment"))
    return [ordered[i] for i in rng.permutation(len(ordered))]


def assign(candidates: Sequence[str], brackets: Sequence[Bracket],
           seed: int) -> list[tuple[Bracket, tuple[str, ...]]]:
    """Which candidates start each bracket, with the bracket fitted to the pool.

    The first (most aggressive) bracket starts **every** candidate, so each one
    within budget is trained at least briefly on every fold; its rungs scale
    with the pool. Each later bracket ``b`` takes the next ``min(n_b, N)``
    candidates of one seeded permutation of the ``N`` candidates, wrapping
    round, so no candidate starts a later bracket twice before every candidate
    has started one.
    """
    order = permutation(candidates, seed)
    total = len(order)
    if total == 0:
        raise ValueError("there are no candidates to schedule")
    out = []
    start = 0
    for b, bracket in enumerate(brackets):
        take = total if b == 0 else min(bracket.size, total)
        chosen = tuple(order[(start + i) % total] for i in range(take))
        if b > 0:
            start = (start + take) % total
        out.append((fit_to_pool(bracket, take), chosen))
    return out


def promote(scores: Mapping[str, float | None], keep: int,
            params: Mapping[str, int]) -> tuple[str, ...]:
    """The ``keep`` best candidates of a rung, best first.

    Parameters
    ----------
    scores : mapping of candidate text to mean held-out accuracy over the folds
        ``None`` (or NaN) when some fold did not finish (diverged or failed):
        such a candidate is never promoted.
    keep : int
        How many to promote (at most the number with a score).
    params : mapping of candidate text to parameter count
        Ties in accuracy go to fewer parameters, then to the text (sorted),
        so the outcome never depends on the order results arrived in.
    """
    scored = [(c, float(v)) for c, v in scores.items()
              if v is not None and np.isfinite(v)]
    scored.sort(key=lambda cv: (-cv[1], params[cv[0]], cv[0]))
    return tuple(c for c, _ in scored[:max(keep, 0)])


def derive_seed(*parts: object) -> int:
    """A 32-bit seed from any parts, stable across processes and machines.

    SHA-256 of the parts' ``repr`` joined by ``|``; Python's own ``hash`` of a
    string changes from process to process, so it is never used.
    """
    text = "|".join(repr(p) for p in parts)
    return int.from_bytes(hashlib.sha256(text.encode("utf-8")).digest()[:4], "little")


def unit_seed(run_seed: int, candidate: str, fold: int, level: int) -> int:
    """The seed of one work unit (candidate, fold, level) of a run."""
    return derive_seed(int(run_seed), str(candidate), int(fold), int(level))
