"""Checks that need the data: labels, values, class sizes, folds, duplicates.

Each check names the file or array, shows the offending value, states the
rule and suggests the fix; it raises :class:`~tinyconv.errors.DataError` or
records a warning in a :class:`~tinyconv.data.dataset.WarningLog`.
"""

from __future__ import annotations

import hashlib
from typing import Sequence

import numpy as np

from tinyconv.errors import DataError

from .dataset import LeakageWarning, WarningLog

_SHOW = 8  # how many offending items a message lists before "and N more"


def listing(items: Sequence[str], show: int = _SHOW) -> str:
    """``a, b, c`` or ``a, b, c and 5 more``: a short list for a message."""
    items = list(items)
    head = ", ".join(items[:show])
    return head + (f" and {len(items) - show} more" if len(items) > show else "")


def _plural(n: int, word: str) -> str:
    return f"{n} {word}" + ("" if n == 1 else "s")


def check_labels(y: np.ndarray, where: str) -> np.ndarray:
    """Labels as int64 after checking they are integers ``0..K-1``, all used.

    Parameters
    ----------
    y : ndarray, shape (n,)
    where : str
        Name of the array for messages (e.g. ``"data.npz: y"``).

    Returns
    -------
    ndarray, shape (n,), int64

    Raises
    ------
    DataError
        Non-numeric, non-integer, non-finite, negative or non-contiguous labels.
    """
    y = np.asarray(y)
    if y.ndim != 1:
        raise DataError(f"{where}: labels must be one-dimensional (n,), got shape {y.shape}; "
                        "give one integer class label per image")
    if y.dtype.kind in "iu":
        labels = y.astype(np.int64)
    elif y.dtype.kind == "f":
        bad = ~np.isfinite(y)
        if bad.any():
            idx = np.flatnonzero(bad)
            raise DataError(f"{where}: {_plural(idx.size, 'label')} "
                            f"{'is' if idx.size == 1 else 'are'} NaN or infinite "
                            f"(at index {listing([str(i) for i in idx])}); every label must "
                            "be an integer class number")
        frac = y != np.round(y)
        if frac.any():
            idx = np.flatnonzero(frac)
            raise DataError(f"{where}: labels must be integers 0..K-1, but "
                            f"{_plural(idx.size, 'label')} {'is' if idx.size == 1 else 'are'} "
                            f"not (e.g. y[{idx[0]}] = "
                            f"{float(y[idx[0]]):g}); store class numbers, not scores or "
                            "probabilities")
        labels = y.astype(np.int64)
    else:
        raise DataError(f"{where}: labels must be integers 0..K-1, got dtype {y.dtype}; "
                        "map class names to numbers (e.g. np.unique(names, "
                        "return_inverse=True)) and store the names as 'classes'")
    if labels.size == 0:
        raise DataError(f"{where}: there are no labels (and so no images); give at least "
                        "two classes of images")
    if labels.min() < 0:
        raise DataError(f"{where}: labels must be 0..K-1, but the smallest is "
                        f"{labels.min()}; renumber the classes from 0")
    if labels.max() >= labels.size:  # before bincount allocates max + 1 counters
        raise DataError(f"{where}: the largest label is {int(labels.max()):,}, but there are "
                        f"only {labels.size:,} labels: with every class present, labels run "
                        "0..K-1 with K at most the number of images; renumber them (e.g. "
                        "np.unique(y, return_inverse=True))")
    present = np.bincount(labels)
    missing = np.flatnonzero(present == 0)
    if missing.size:
        raise DataError(f"{where}: labels must be contiguous 0..K-1 with every class "
                        f"present, but {listing([str(m) for m in missing])} "
                        f"{'is' if missing.size == 1 else 'are'} missing from 0..{labels.max()}; "
                        "renumber them (e.g. np.unique(y, return_inverse=True))")
    return labels


def check_classes(classes: Sequence[str], counts: np.ndarray, where: str) -> None:
    """Refuse a data set with fewer than two classes.

    Raises
    ------
    DataError
        Naming the one class found.
    """
    if len(classes) < 2:
        found = f"only class {classes[0]!r}" if classes else "no classes"
        raise DataError(f"{where}: found {found}; a classifier needs at least two classes "
                        "(one sub-folder, or one label value, per class)")


def max_folds(labels: np.ndarray) -> int:
    """The largest k for which every fold can hold every class: the smallest class size."""
    counts = np.bincount(np.asarray(labels, dtype=np.int64))
    counts = counts[counts > 0]
    return int(counts.min()) if counts.size else 0


def check_folds(labels: np.ndarray, k: int, classes: Sequence[str] | None = None) -> None:
    """Refuse ``k`` folds when a class has fewer than ``k`` images.

    Parameters
    ----------
    labels : ndarray, shape (n,), integers 0..K-1
    k : int
        Requested number of folds (at least 2).
    classes : sequence of str, optional
        Class names for the message (default: the label numbers).

    Raises
    ------
    DataError
        Naming every class that is too small, its count and the largest k that works.
    """
    if isinstance(k, bool) or not isinstance(k, (int, np.integer)):
        raise TypeError(f"number of folds must be an int, got {type(k).__name__}")
    if k < 2:
        raise DataError(f"number of folds must be at least 2, got {k}; use 5 or 10 "
                        "(common practice)")
    labels = np.asarray(labels, dtype=np.int64)
    counts = np.bincount(labels)
    names = list(classes) if classes is not None else [str(i) for i in range(counts.size)]
    small = [i for i in range(counts.size) if 0 < counts[i] < k]
    if not small:
        return
    what = listing([f"class {names[i]!r} has {_plural(int(counts[i]), 'image')}"
                    for i in small])
    best = max_folds(labels)
    if best >= 2:
        fix = (f"the largest number of folds that works is {best}; ask for at most "
               f"{best} folds or add images to the small "
               f"{'class' if len(small) == 1 else 'classes'}")
    else:
        fix = ("no number of folds works until every class has at least 2 images; "
               "add images to the small classes")
    raise DataError(f"{what}, fewer than the {k} folds asked for: stratified folds need "
                    f"every class in every fold; {fix}")


def check_finite(x: np.ndarray, where: str) -> None:
    """Refuse NaN or infinite pixel values, naming the images that hold them."""
    bad = ~np.isfinite(x.reshape(x.shape[0], -1)).all(axis=1)
    if bad.any():
        idx = np.flatnonzero(bad)
        raise DataError(f"{where}: {_plural(idx.size, 'image')} "
                        f"{'holds' if idx.size == 1 else 'hold'} NaN or infinite values "
                        f"(index {listing([str(i) for i in idx])}); fix or drop them before "
                        "loading")


def image_hashes(images: np.ndarray) -> list[bytes]:
    """A digest per image of its exact pixels (shape included)."""
    shape = repr(images.shape[1:]).encode()
    return [hashlib.blake2b(shape + np.ascontiguousarray(im).tobytes(),
                            digest_size=16).digest() for im in images]


def find_duplicates(images: np.ndarray, labels: np.ndarray
                    ) -> tuple[list[tuple[int, ...]], list[tuple[int, ...]]]:
    """Groups of exactly identical images, split into within-class and across-class.

    Returns
    -------
    within : list of tuple of int
        Index groups of two or more identical images that all share one class.
    across : list of tuple of int
        Index groups of identical images carrying more than one class.
    """
    groups: dict[bytes, list[int]] = {}
    for i, h in enumerate(image_hashes(images)):
        groups.setdefault(h, []).append(i)
    within, across = [], []
    for idx in groups.values():
        if len(idx) < 2:
            continue
        (across if len(set(labels[idx].tolist())) > 1 else within).append(tuple(idx))
    return within, across


def warn_duplicates(images: np.ndarray, labels: np.ndarray, classes: Sequence[str],
                    names: Sequence[str] | None, log: WarningLog
                    ) -> tuple[list[tuple[int, ...]], list[tuple[int, ...]]]:
    """Find duplicates and record one warning for each kind found.

    ``names`` labels each image in messages (file paths, or None for indices).
    """
    within, across = find_duplicates(images, labels)

    def show(group: tuple[int, ...]) -> str:
        items = [names[i] if names is not None else f"#{i}" for i in group]
        return "(" + " = ".join(items) + ")"

    if within:
        n_extra = sum(len(g) - 1 for g in within)
        log.warn(f"{_plural(len(within), 'group')} of identical images within a class "
                 f"({n_extra} extra copies): {listing([show(g) for g in within], 4)}; "
                 "copies weigh those images more and can sit on both sides of a fold; "
                 "remove the extra copies")
    if across:
        detail = listing([show(g) + " in " + "/".join(sorted({classes[labels[i]] for i in g}))
                          for g in across], 4)
        log.warn(f"serious: {_plural(len(across), 'group')} of identical images carry "
                 f"different classes: {detail}; an image in two classes is at best "
                 "mislabelled, and its copies across folds inflate cross-validated "
                 "accuracy; keep one copy in the right class", LeakageWarning)
    return within, across
