"""The Dataset type, fingerprints, duplicate finding and the folds check."""

from __future__ import annotations

import numpy as np
import pytest

from tinyconv.data import Dataset, check_folds, fingerprint, max_folds
from tinyconv.data.validate import check_labels, find_duplicates, listing
from tinyconv.errors import DataError


def _ds(seed=0, n=6, classes=("a", "b"), **kw):
    rng = np.random.default_rng(seed)
    images = rng.integers(0, 256, (n, 4, 4, 3), dtype=np.uint8)
    labels = np.arange(n, dtype=np.int64) % len(classes)
    return Dataset(images, labels, classes, **kw)


def test_dataset_is_frozen_and_read_only():
    """Fields cannot be reassigned and the arrays cannot be written."""
    ds = _ds()
    with pytest.raises(AttributeError):
        ds.labels = ds.labels  # type: ignore[misc]
    with pytest.raises(ValueError, match="read-only"):
        ds.images[0, 0, 0, 0] = 1
    assert ds.n == 6 and ds.n_classes == 2 and ds.class_counts.tolist() == [3, 3]


def test_dataset_rejects_wrong_types():
    """Float images, int32 labels and labels beyond the classes are refused."""
    good = _ds()
    with pytest.raises(TypeError, match=r"images must be a uint8 array"):
        Dataset(good.images.astype(np.float32), good.labels, good.classes)
    with pytest.raises(TypeError, match=r"labels must be int64"):
        Dataset(good.images, good.labels.astype(np.int32), good.classes)
    with pytest.raises(ValueError, match=r"labels must lie in 0\.\.0"):
        Dataset(good.images, good.labels, ("a",))


def test_fingerprint_tracks_pixels_labels_and_names():
    """The fingerprint changes with one pixel, one label or a class name, not with paths."""
    base = _ds()
    fp = fingerprint(base)
    assert len(fp) == 64 and int(fp, 16) >= 0                    # SHA-256 hex (hashlib)
    assert fingerprint(_ds(paths=tuple("123456"), source="elsewhere")) == fp
    pix = base.images.copy()
    pix[2, 1, 1, 0] ^= 1
    assert fingerprint(Dataset(pix, base.labels.copy(), base.classes)) != fp
    lab = base.labels.copy()
    lab[0] = 1
    assert fingerprint(Dataset(base.images.copy(), lab, base.classes)) != fp
    assert fingerprint(_ds(classes=("a", "c"))) != fp
    assert fingerprint(_ds(seed=1)) != fp


def test_find_duplicates_groups():
    """Identical images group by class: within one class or across classes."""
    ds = _ds(n=8)
    images = ds.images.copy()
    images[2] = images[0]          # labels 0 and 0: within
    images[5] = images[1]          # labels 1 and 1: within
    images[6] = images[1]          # label 0: across (with 1 and 5)
    within, across = find_duplicates(images, ds.labels)
    assert within == [(0, 2)]
    assert across == [(1, 5, 6)]


def test_max_folds_and_check():
    """max_folds is the smallest class size; check_folds accepts up to it and refuses beyond."""
    y = np.array([0] * 9 + [1] * 4 + [2] * 6)
    assert max_folds(y) == 4
    check_folds(y, 4)
    with pytest.raises(DataError, match=r"class '1' has 4 images, fewer than the 5 folds"):
        check_folds(y, 5)
    with pytest.raises(DataError, match=r"class 'b' has 4 images, class 'c' has 6 images, "
                       r"fewer than the 7 folds"):
        check_folds(y, 7, classes=("a", "b", "c"))
    with pytest.raises(TypeError, match="number of folds must be an int"):
        check_folds(y, 2.0)


def test_check_labels_and_listing():
    """Labels come back as int64; long lists are cut with a count of the rest."""
    assert check_labels(np.array([1, 0, 1], np.uint8), "y").dtype == np.int64
    with pytest.raises(DataError, match=r"y: labels must be one-dimensional"):
        check_labels(np.zeros((2, 2), int), "y")
    assert listing([str(i) for i in range(10)], 3) == "0, 1, 2 and 7 more"
