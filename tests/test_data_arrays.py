"""``.npz`` intake: accepted forms and every refusal with its message."""

from __future__ import annotations

import numpy as np
import pytest

from tinyconv.data import LeakageWarning, load_data
from tinyconv.errors import DataError


def _save(tmp_path, **arrays):
    path = tmp_path / "set.npz"
    np.savez(path, **arrays)
    return path


def _images(n=6, h=5, w=4, c=None, seed=0):
    shape = (n, h, w) if c is None else (n, h, w, c)
    return np.random.default_rng(seed).integers(0, 256, shape, dtype=np.uint8)


def test_uint8_grey_without_channel_axis(tmp_path):
    """(n, h, w) uint8 gains a channel axis; classes default to the label numbers."""
    x = _images()
    ds = load_data(_save(tmp_path, x=x, y=np.array([0, 1, 2, 0, 1, 2])))
    assert ds.images.shape == (6, 5, 4, 1)
    np.testing.assert_array_equal(ds.images[..., 0], x)
    assert ds.classes == ("0", "1", "2") and ds.labels.dtype == np.int64 and ds.paths is None


def test_float_in_unit_range_scaled(tmp_path):
    """Float pixels in [0, 1] become round(255 x); class names are read."""
    x = np.linspace(0, 1, 2 * 2 * 2 * 3).reshape(2, 2, 2, 3)
    ds = load_data(_save(tmp_path, x=x, y=np.array([1, 0]), classes=np.array(["a", "b"])))
    np.testing.assert_array_equal(ds.images, np.rint(x * 255).astype(np.uint8))
    assert ds.classes == ("a", "b")


def test_integral_float_labels_accepted(tmp_path):
    """Labels stored as floats with whole values are accepted as integers."""
    ds = load_data(_save(tmp_path, x=_images(4), y=np.array([0.0, 1.0, 1.0, 0.0])))
    assert ds.labels.tolist() == [0, 1, 1, 0]


def test_non_integer_labels_refused(tmp_path):
    """Fractional labels are refused naming the first one."""
    path = _save(tmp_path, x=_images(3), y=np.array([0.0, 1.5, 1.0]))
    with pytest.raises(DataError, match=r"set\.npz: y: labels must be integers 0\.\.K-1, but "
                       r"1 label is not \(e\.g\. y\[1\] = 1\.5\)"):
        load_data(path)


def test_string_labels_refused_with_fix(tmp_path):
    """String labels are refused with the way to map them to numbers."""
    path = _save(tmp_path, x=_images(2), y=np.array(["cat", "dog"]))
    with pytest.raises(DataError, match=r"labels must be integers 0\.\.K-1, got dtype <U3; map "
                       r"class names to numbers"):
        load_data(path)


def test_non_contiguous_labels_refused(tmp_path):
    """Labels 0, 1, 3 (2 missing) are refused naming the missing value."""
    path = _save(tmp_path, x=_images(4), y=np.array([0, 1, 3, 3]))
    with pytest.raises(DataError, match=r"labels must be contiguous 0\.\.K-1 with every class "
                       r"present, but 2 is missing from 0\.\.3; renumber them"):
        load_data(path)


def test_negative_labels_refused(tmp_path):
    """A negative label is refused."""
    path = _save(tmp_path, x=_images(2), y=np.array([-1, 0]))
    with pytest.raises(DataError, match=r"the smallest is -1; renumber the classes from 0"):
        load_data(path)


def test_single_class_refused(tmp_path):
    """Labels of one value are refused: two classes are needed."""
    path = _save(tmp_path, x=_images(3), y=np.zeros(3, dtype=int))
    with pytest.raises(DataError, match=r"found only class '0'; a classifier needs at least two"):
        load_data(path)


def test_nan_and_inf_refused(tmp_path):
    """NaN or infinite pixels are refused naming the images that hold them."""
    x = np.full((4, 2, 2), 0.5)
    x[1, 0, 0] = np.nan
    x[3, 1, 1] = np.inf
    path = _save(tmp_path, x=x, y=np.array([0, 1, 0, 1]))
    with pytest.raises(DataError, match=r"x: 2 images hold NaN or infinite values \(index 1, 3\)"):
        load_data(path)


def test_float_out_of_range_refused_with_hint(tmp_path):
    """Floats in 0..255 are refused with the hint to store uint8."""
    path = _save(tmp_path, x=np.full((2, 2, 2), 200.0), y=np.array([0, 1]))
    with pytest.raises(DataError, match=r"float pixels must lie in \[0, 1\], but range from 200 "
                       r"to 200; they look like 0\.\.255: store them as uint8"):
        load_data(path)


def test_missing_arrays_and_mismatch_refused(tmp_path):
    """A missing y, a length mismatch and four channels are each refused."""
    with pytest.raises(DataError, match=r"missing array 'y' \(found 'x'\)"):
        load_data(_save(tmp_path, x=_images(2)))
    with pytest.raises(DataError, match=r"x has 3 images but y has shape \(2,\)"):
        load_data(_save(tmp_path, x=_images(3), y=np.array([0, 1])))
    with pytest.raises(DataError, match=r"c 1 \(grey\) or 3 \(RGB\), got \(2, 5, 4, 4\)"):
        load_data(_save(tmp_path, x=_images(2, c=4), y=np.array([0, 1])))


def test_wrong_class_names_refused(tmp_path):
    """classes must hold one name per label value."""
    path = _save(tmp_path, x=_images(2), y=np.array([0, 1]), classes=np.array(["a", "b", "c"]))
    with pytest.raises(DataError, match=r"classes must be 2 strings"):
        load_data(path)


def test_not_an_npz_refused(tmp_path):
    """A file named .npz that is not one is refused."""
    path = tmp_path / "bad.npz"
    path.write_text("not a zip")
    with pytest.raises(DataError, match=r"bad\.npz: not a readable \.npz file"):
        load_data(path)


def test_cross_class_duplicate_in_arrays_warns(tmp_path):
    """An image repeated under two labels raises the leakage warning with indices."""
    x = _images(4)
    x[3] = x[0]
    with pytest.warns(LeakageWarning, match=r"\(#0 = #3\) in 0/1"):
        ds = load_data(_save(tmp_path, x=x, y=np.array([0, 0, 1, 1])))
    assert ds.warnings[0].startswith("serious:")


@pytest.mark.parametrize("shape,hint", [
    ((4, 6, 6, 4), r"got \(4, 6, 6, 4\); drop the alpha channel with x\[\.\.\., :3\]$"),
    ((4, 3, 6, 6), r"got \(4, 3, 6, 6\); it looks channels-first \(n, c, h, w\): move the "
                   r"channels last with np\.moveaxis\(x, 1, -1\)$"),
    ((4, 36), r"got \(4, 36\); each image is a flat row: give them their height and "
              r"width, e.g\. x\.reshape\(n, h, w\)$"),
    ((4, 6, 6, 2), r"got \(4, 6, 6, 2\)$"),
])
def test_wrong_image_shapes_get_the_fix_that_applies(tmp_path, shape, hint):
    """The alpha hint only for channels-last RGBA; channels-first and flat arrays get theirs."""
    path = tmp_path / "x.npz"
    np.savez(path, x=np.zeros(shape, np.uint8), y=np.array([0, 1, 0, 1]))
    with pytest.raises(DataError, match=hint):
        load_data(path)
