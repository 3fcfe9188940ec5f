"""Built-in data sets: the workshop tiles demo and scikit-learn's digits; spec parsing."""

from __future__ import annotations

import sys
import time

import numpy as np
import pytest

from tinyconv.data import TILE_CLASSES, fingerprint, load_data, make_tiles
from tinyconv.data.validate import find_duplicates
from tinyconv.errors import DataError


def test_digits_as_documented():
    """builtin:digits gives 1,797 grey 8x8 images in 10 classes, scaled 0..16 -> 0..255."""
    ds = load_data("builtin:digits")
    # scikit-learn documentation of load_digits: 1797 samples, 8x8, 10 classes, values 0-16
    assert ds.images.shape == (1797, 8, 8, 1) and ds.images.dtype == np.uint8
    assert ds.n_classes == 10 and ds.classes == tuple("0123456789")
    from sklearn.datasets import load_digits
    ref = load_digits()
    np.testing.assert_array_equal(ds.labels, ref.target)
    np.testing.assert_array_equal(ds.images[..., 0], np.rint(ref.images * 255 / 16))
    assert ds.images.max() == 255


def test_digits_without_sklearn_says_how_to_install(monkeypatch):
    """With scikit-learn missing, builtin:digits tells the user to pip install it."""
    monkeypatch.setitem(sys.modules, "sklearn.datasets", None)   # import now fails
    with pytest.raises(DataError, match=r"builtin:digits needs scikit-learn.*not installed; "
                       r"install it with: pip install scikit-learn"):
        load_data("builtin:digits")


def test_tiles_same_seed_same_images():
    """The same seed gives bit-identical tiles and labels."""
    a, b = make_tiles(6, size=24, seed=3), make_tiles(6, size=24, seed=3)
    np.testing.assert_array_equal(a.images, b.images)
    np.testing.assert_array_equal(a.labels, b.labels)
    assert fingerprint(a) == fingerprint(b)


def test_tiles_different_seeds_differ():
    """Different seeds give different images."""
    a, b = make_tiles(6, seed=0), make_tiles(6, seed=1)
    assert not np.array_equal(a.images, b.images)
    assert fingerprint(a) != fingerprint(b)


@pytest.mark.parametrize("n,size", [(1, 8), (7, 32), (40, 20)])
def test_tiles_every_class_in_requested_number(n, size):
    """Every mark appears exactly n_per_class times at the requested size, no duplicates."""
    ds = make_tiles(n, size=size, seed=2)
    assert ds.classes == TILE_CLASSES and len(TILE_CLASSES) == 8
    assert ds.images.shape == (8 * n, size, size, 3) and ds.images.dtype == np.uint8
    np.testing.assert_array_equal(ds.class_counts, [n] * 8)
    within, across = find_duplicates(ds.images, ds.labels)
    assert not within and not across


def test_tiles_marks_are_visible_and_varied():
    """Marks differ from the glaze (images are not flat) and glaze colours vary."""
    ds = make_tiles(20, seed=4)
    x = ds.images.astype(float)
    assert (x.reshape(ds.n, -1, 3).std(axis=1).max(axis=1) > 10).all()
    assert x.mean(axis=(1, 2)).std(axis=0).min() > 20


def test_tiles_class_mean_images_overlap():
    """Marks move around: the per-class mean images are much closer than single tiles."""
    # a dense model sees fixed pixels; if class means were far apart it would find it easy
    ds = make_tiles(150, seed=5)
    grey = ds.images.astype(float).mean(axis=3)
    grey -= grey.mean(axis=(1, 2), keepdims=True)
    means = np.stack([grey[ds.labels == c].mean(axis=0) for c in range(8)])
    spread_means = np.linalg.norm(means - means.mean(axis=0), axis=(1, 2)).mean()
    spread_tiles = np.linalg.norm(grey - grey.mean(axis=0), axis=(1, 2)).mean()
    assert spread_means < 0.25 * spread_tiles


def test_tiles_throughput_printed():
    """Generate 2,000 tiles and print the rate (a figure, not a timed assertion)."""
    t0 = time.perf_counter()
    ds = make_tiles(250, size=32, seed=0)
    rate = ds.n / (time.perf_counter() - t0)
    print(f"tiles: {rate:,.0f} images/s at 32x32")
    assert ds.n == 2000 and np.bincount(ds.labels).tolist() == [250] * 8


def test_tiles_spec_options():
    """builtin:tiles?n=..&size=..&seed=.. passes its options; the source records them."""
    ds = load_data("builtin:tiles?n=3&size=16&seed=9")
    assert ds.n == 24 and ds.image_shape == (16, 16, 3)
    assert ds.source == "builtin:tiles?n=3&size=16&seed=9"
    np.testing.assert_array_equal(ds.images, make_tiles(3, 16, 9).images)
    assert load_data("builtin:tiles").n == 800          # default 100 per class


@pytest.mark.parametrize("spec,message", [
    ("builtin:tiles?count=3", r"unknown option 'count'; builtin:tiles takes n, size, seed"),
    ("builtin:tiles?n=many", r"option n='many' must be a whole number"),
    ("builtin:tiles?size=4", r"tiles: size must be between 8 and 512, got 4"),
    ("builtin:tiles?n", r"options must look like n=100&size=32&seed=0"),
    ("builtin:digits?n=3", r"builtin:digits takes no options"),
    ("builtin:cifar", r"unknown built-in data set 'cifar'; the built-in sets are builtin:tiles "
                      "and builtin:digits"),
])
def test_bad_builtin_specs(spec, message):
    """Bad built-in specs are refused naming the option and what is allowed."""
    with pytest.raises(DataError, match=message):
        load_data(spec)
