"""Stratified folds: counts as scikit-learn's StratifiedKFold, properties, refusals."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.model_selection import StratifiedKFold

from search.folds import assign_folds, assign_repeated_folds, fold_allocation, fold_split
from tinyconv.errors import DataError


def _per_fold_counts(labels: np.ndarray, folds: np.ndarray, k: int) -> list[list[int]]:
    n_classes = int(labels.max()) + 1
    return [np.bincount(labels[folds == f], minlength=n_classes).tolist() for f in range(k)]


def _sklearn_counts(labels: np.ndarray, k: int) -> list[list[int]]:
    # reference: scikit-learn's StratifiedKFold test folds, in its fold order
    n_classes = int(labels.max()) + 1
    skf = StratifiedKFold(n_splits=k, shuffle=True, random_state=0)
    return [np.bincount(labels[test], minlength=n_classes).tolist()
            for _, test in skf.split(np.zeros(labels.size), labels)]


def test_worked_example_from_checks():
    """7x class 0, 5x class 1, 3x class 2 with k=3 gives [3,1,1], [2,2,1], [2,2,1]."""
    # worked example (computed) of scikit-learn's StratifiedKFold round-robin, CHECKS.md
    y = np.array([0] * 7 + [1] * 5 + [2] * 3)
    folds = assign_folds(y, 3, seed=0)
    assert _per_fold_counts(y, folds, 3) == [[3, 1, 1], [2, 2, 1], [2, 2, 1]]
    assert fold_allocation(y, 3).tolist() == [[3, 1, 1], [2, 2, 1], [2, 2, 1]]


@pytest.mark.parametrize("sizes,k", [
    ((7, 5, 3), 3),
    ((10, 10, 10, 10), 5),
    ((50, 3, 3), 3),            # heavily imbalanced
    ((100, 20, 7, 5), 5),       # imbalanced, classes not multiples of k
    ((2, 2), 2),
    ((13, 11, 9, 31, 6), 6),
    ((180, 179, 178, 177, 176, 175, 174, 173, 172, 171), 10),
])
@pytest.mark.parametrize("shuffle_order", [False, True])
def test_counts_equal_sklearn(sizes, k, shuffle_order):
    """Per-fold class counts equal scikit-learn's StratifiedKFold for the same labels."""
    y = np.repeat(np.arange(len(sizes)), sizes)
    if shuffle_order:  # class order of first appearance then differs from label order
        y = np.random.default_rng(7).permutation(y)
    folds = assign_folds(y, k, seed=3)
    # reference: scikit-learn StratifiedKFold (>= 0.22), same labels, same k
    assert _per_fold_counts(y, folds, k) == _sklearn_counts(y, k)


def test_counts_equal_sklearn_random_patterns():
    """On 60 seeded random label vectors the per-fold counts match scikit-learn's."""
    rng = np.random.default_rng(11)
    checked = 0
    while checked < 60:
        n_classes, k = int(rng.integers(2, 7)), int(rng.integers(2, 7))
        y = rng.choice(n_classes, size=int(rng.integers(20, 120)),
                       p=rng.dirichlet(np.ones(n_classes)))
        y = np.unique(y, return_inverse=True)[1]
        if y.max() < 1 or np.bincount(y).min() < k:
            continue
        # reference: scikit-learn StratifiedKFold
        assert _per_fold_counts(y, assign_folds(y, k, seed=checked), k) == _sklearn_counts(y, k)
        checked += 1


@settings(max_examples=60, deadline=None)
@given(st.lists(st.integers(3, 25), min_size=2, max_size=6), st.integers(2, 3),
       st.integers(0, 2**32 - 1))
def test_folds_disjoint_cover_and_balanced(sizes, k, seed):
    """Every image is in exactly one fold; class counts per fold differ by at most one."""
    y = np.random.default_rng(seed).permutation(np.repeat(np.arange(len(sizes)), sizes))
    folds = assign_folds(y, k, seed)
    assert folds.shape == y.shape and set(np.unique(folds)) == set(range(k))
    held = np.concatenate([fold_split(folds, f)[1] for f in range(k)])
    assert np.array_equal(np.sort(held), np.arange(y.size))      # cover, no overlap
    for f in range(k):
        train, test = fold_split(folds, f)
        assert np.intersect1d(train, test).size == 0
        assert train.size + test.size == y.size
    counts = np.array(_per_fold_counts(y, folds, k))
    assert (counts.max(axis=0) - counts.min(axis=0) <= 1).all()
    sizes_per_fold = counts.sum(axis=1)
    assert sizes_per_fold.max() - sizes_per_fold.min() <= 1


def test_deterministic_and_seed_dependent():
    """The same seed gives the same folds; another seed moves images but keeps counts."""
    y = np.repeat(np.arange(4), [30, 20, 12, 9])
    a, b, c = assign_folds(y, 3, 5), assign_folds(y, 3, 5), assign_folds(y, 3, 6)
    assert np.array_equal(a, b)
    assert not np.array_equal(a, c)
    assert _per_fold_counts(y, a, 3) == _per_fold_counts(y, c, 3)


def test_repeats_differ_and_are_stable():
    """Repeats are distinct assignments; adding repeats keeps the earlier ones."""
    y = np.repeat(np.arange(3), [15, 12, 9])
    r3 = assign_repeated_folds(y, 3, 3, seed=1)
    r5 = assign_repeated_folds(y, 3, 5, seed=1)
    assert r3.shape == (3, y.size)
    assert np.array_equal(r3, r5[:3])
    assert not np.array_equal(r3[0], r3[1]) and not np.array_equal(r3[1], r3[2])


def test_small_class_refused_with_largest_k():
    """A class smaller than k is refused, naming it, its count and the largest k that works."""
    y = np.array([0] * 10 + [1] * 3 + [2] * 8)
    with pytest.raises(DataError, match=r"class 'dog' has 3 images, fewer than the 5 folds asked "
                       r"for: .*the largest number of folds that works is 3"):
        assign_folds(y, 5, 0, classes=("cat", "dog", "eel"))


def test_no_k_works_with_a_single_image_class():
    """A class of one image makes every k impossible, and the message says so."""
    y = np.array([0] * 5 + [1])
    with pytest.raises(DataError, match=r"class '1' has 1 image, .*no number of folds works "
                       "until every class has at least 2 images"):
        assign_folds(y, 2, 0)


def test_k_below_two_refused():
    """k = 1 is refused with the usual choices suggested."""
    with pytest.raises(DataError, match=r"number of folds must be at least 2, got 1"):
        assign_folds(np.array([0, 0, 1, 1]), 1, 0)
