"""Stratified k-fold assignment, with repeats under different seeds.

How many images of each class go to each fold follows a round-robin over the
labels sorted by class (classes taken in order of first appearance): fold
``i`` receives sorted positions ``i, i + k, i + 2k, ...``. Class counts per
fold therefore differ by at most one from the ideal, fold sizes differ by at
most one, and the counts equal those of scikit-learn's ``StratifiedKFold``
(version 0.22 and later) on the same labels, which the tests check. Which
images of a class fill those places is shuffled by the seed.

Unlike scikit-learn, which only warns, a class with fewer than ``k`` images is
refused: a fold without a class cannot measure it.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np

from tinyconv.checks import whole_number
from tinyconv.data.validate import check_folds


def fold_allocation(labels: np.ndarray, k: int) -> np.ndarray:
    """Images of each class per fold.

    Parameters
    ----------
    labels : ndarray, shape (n,), integers 0..K-1
    k : int

    Returns
    -------
    ndarray, shape (k, K), int64
        ``alloc[f, c]`` images of class c in fold f.
    """
    labels = np.asarray(labels, dtype=np.int64)
    n_classes = int(labels.max()) + 1 if labels.size else 0
    # classes in order of first appearance, then the labels sorted by that order
    _, first = np.unique(labels, return_index=True)
    order_of_class = np.empty(n_classes, dtype=np.int64)
    present = np.unique(labels)
    order_of_class[present[np.argsort(first)]] = np.arange(present.size)
    ranks = np.sort(order_of_class[labels])
    rank_to_class = np.empty(present.size, dtype=np.int64)
    rank_to_class[order_of_class[present]] = present
    alloc = np.zeros((k, n_classes), dtype=np.int64)
    for f in range(k):
        alloc[f] = np.bincount(rank_to_class[ranks[f::k]], minlength=n_classes)
    return alloc


def assign_folds(labels: np.ndarray, k: int, seed: int | np.random.Generator = 0,
                 classes: Sequence[str] | None = None) -> np.ndarray:
    """Stratified fold index of every image.

    Parameters
    ----------
    labels : array_like, shape (n,), integers 0..K-1
    k : int
        Number of folds, at least 2 and at most the smallest class size.
    seed : int or numpy.random.Generator
        Decides which images of a class go to which fold.
    classes : sequence of str, optional
        Class names, used only in error messages.

    Returns
    -------
    ndarray, shape (n,), int64
        Fold 0..k-1 of each image. Per-fold class counts are
        :func:`fold_allocation`'s; the same seed gives the same folds.

    Raises
    ------
    DataError
        When a class has fewer than ``k`` images (naming it, its count and
        the largest k that works), or ``k`` < 2.
    """
    labels = np.asarray(labels)
    if labels.ndim != 1 or labels.dtype.kind not in "iu":
        raise TypeError(f"labels must be a 1-d integer array, got {labels.dtype} "
                        f"{labels.shape}")
    labels = labels.astype(np.int64)
    check_folds(labels, k, classes)
    rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)
    alloc = fold_allocation(labels, k)
    folds = np.empty(labels.size, dtype=np.int64)
    for c in range(alloc.shape[1]):
        members = np.flatnonzero(labels == c)
        if members.size == 0:
            continue
        places = np.repeat(np.arange(k, dtype=np.int64), alloc[:, c])
        folds[members] = places[rng.permutation(members.size)]
    return folds


def assign_repeated_folds(labels: np.ndarray, k: int, repeats: int, seed: int = 0,
                          classes: Sequence[str] | None = None) -> np.ndarray:
    """``repeats`` independent stratified k-fold assignments.

    Repeat r uses the seed ``(seed, r)``, so adding repeats never changes the
    earlier ones.

    Returns
    -------
    ndarray, shape (repeats, n), int64
    """
    whole_number(repeats, "repeats", low=1)
    return np.stack([assign_folds(labels, k, np.random.default_rng([seed, r]), classes)
                     for r in range(repeats)])


def fold_split(folds: np.ndarray, fold: int) -> tuple[np.ndarray, np.ndarray]:
    """Indices (train, held_out) of one fold of an assignment."""
    folds = np.asarray(folds)
    return np.flatnonzero(folds != fold), np.flatnonzero(folds == fold)
