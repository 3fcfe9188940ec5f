"""A seeded subset of a space's candidates (``--max-candidates``)."""

from __future__ import annotations

from typing import Sequence

import numpy as np

from tinyconv.arch import Arch
from tinyconv.checks import whole_number


def subsample(candidates: Sequence[Arch], k: int, seed: int | np.random.Generator = 0
              ) -> list[Arch]:
    """``k`` of ``candidates`` drawn at random without repeats, in their original order.

    Parameters
    ----------
    candidates : sequence of Arch
    k : int
        How many to keep (>= 1); all are kept when there are no more than ``k``.
    seed : int or numpy.random.Generator
    """
    whole_number(k, "max candidates", low=1, rule="a positive integer")
    if len(candidates) <= k:
        return list(candidates)
    rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)
    keep = np.sort(rng.choice(len(candidates), size=k, replace=False))
    return [candidates[i] for i in keep]
