"""Preparation: colour modes against standards, resizing against SciPy, normalisation."""

from __future__ import annotations

import colorsys
import statistics

import numpy as np
import pytest
from PIL import Image
from scipy import ndimage

from tinyconv.arch import InputSpec
from tinyconv.data import fit_normalisation, normalise, normalise_fold, prepare
from tinyconv.data.colour import convert, rgb_to_gray, rgb_to_hsv, rgb_to_ycc
from tinyconv.data.resize import resize, resize_uint8

PRIMARIES = np.array([[255, 0, 0], [0, 255, 0], [0, 0, 255], [255, 255, 255]], float) / 255


def test_gray_matches_bt601_worked_values():
    """Luma of red, green, blue, white equals the BT.601 worked values."""
    # ITU-R BT.601 luma Y' = 0.299 R + 0.587 G + 0.114 B; worked values in CHECKS.md (computed)
    y = rgb_to_gray(PRIMARIES)[:, 0] * 255
    np.testing.assert_allclose(y, [76.245, 149.685, 29.07, 255.0], atol=1e-9)


def test_ycc_matches_t871_worked_values():
    """Full-range YCbCr of the primaries equals the ITU-T T.871 (JFIF) worked values."""
    # ITU-T T.871 / JFIF full-range YCbCr; worked values in CHECKS.md (computed), 255.5 -> 255
    ycc = rgb_to_ycc(PRIMARIES) * 255
    expected = [[76.245, 84.972, 255.0], [149.685, 43.528, 21.235],
                [29.07, 255.0, 107.265], [255.0, 128.0, 128.0]]
    np.testing.assert_allclose(ycc, expected, atol=1e-3)


def test_hsv_matches_colorsys():
    """Vectorised HSV equals the standard library's colorsys.rgb_to_hsv, greys included."""
    rng = np.random.default_rng(0)
    x = rng.random((2000, 3))
    x[:300] = np.round(x[:300] * 3) / 3          # ties between channels, and greys
    ours = rgb_to_hsv(x)
    # reference: Python standard library colorsys.rgb_to_hsv
    ref = np.array([colorsys.rgb_to_hsv(*p) for p in x])
    np.testing.assert_allclose(ours, ref, atol=1e-12)


def test_convert_shapes_and_grey_input():
    """gray gives one channel; rgb/ycc/hsv from grey input repeat it first."""
    grey = np.random.default_rng(1).random((2, 3, 3, 1))
    assert convert(grey, "gray") is grey
    np.testing.assert_array_equal(convert(grey, "rgb"), np.repeat(grey, 3, axis=-1))
    np.testing.assert_allclose(convert(grey, "ycc")[..., 1:], 128 / 255)  # no chroma
    assert convert(grey, "hsv").shape == (2, 3, 3, 3)
    with pytest.raises(ValueError, match=r"colour mode 'lab' is not one of rgb, gray, ycc, hsv"):
        convert(grey, "lab")


def _area_reference(a: np.ndarray, n_out: int, axis: int) -> np.ndarray:
    """Exact area average: repeat every pixel n_out times, then mean over blocks of n_in."""
    n_in = a.shape[axis]
    fine = np.repeat(a, n_out, axis=axis)
    shape = list(a.shape)
    shape[axis: axis + 1] = [n_out, n_in]
    return fine.reshape(shape).mean(axis=axis + 1)


@pytest.mark.parametrize("h0,w0,h,w", [(12, 12, 4, 6), (7, 10, 3, 4), (32, 32, 20, 13)])
def test_shrink_is_area_average(h0, w0, h, w):
    """Shrinking equals the exact area average (pixel repetition then block mean)."""
    x = np.random.default_rng(2).random((3, h0, w0, 2))
    ref = _area_reference(_area_reference(x, h, 1), w, 2)   # area averaging: common practice
    np.testing.assert_allclose(resize(x, h, w), ref, atol=1e-12)
    np.testing.assert_allclose(resize(x, h, w).mean(axis=(1, 2)), x.mean(axis=(1, 2)))


def test_integer_shrink_matches_pillow_box():
    """An integer-factor shrink equals Pillow's BOX resize of a float image."""
    x = np.random.default_rng(3).random((12, 16)).astype(np.float32)
    # reference: Pillow Image.resize with the BOX filter (area averaging for whole factors)
    ref = np.asarray(Image.fromarray(x, mode="F").resize((4, 3), Image.Resampling.BOX))
    np.testing.assert_allclose(resize(x[None, ..., None], 3, 4)[0, ..., 0], ref, atol=1e-5)


@pytest.mark.parametrize("h0,w0,h,w", [(4, 5, 9, 13), (8, 8, 32, 32), (3, 7, 10, 8)])
def test_grow_is_bilinear_like_scipy(h0, w0, h, w):
    """Growing equals SciPy's order-1 zoom on the pixel grid with edges repeated."""
    x = np.random.default_rng(4).random((2, h0, w0, 3))
    # reference: scipy.ndimage.zoom, linear, grid_mode=True (pixel-edge alignment)
    ref = np.stack([ndimage.zoom(im, (h / h0, w / w0, 1), order=1, grid_mode=True,
                                 mode="nearest") for im in x])
    np.testing.assert_allclose(resize(x, h, w), ref, atol=1e-12)


def test_mixed_axes_and_uint8():
    """One axis shrinking and the other growing are resized independently; uint8 rounds."""
    x = np.random.default_rng(5).random((2, 12, 4, 1))
    out = resize(x, 4, 10)
    grow = np.stack([ndimage.zoom(im, (1, 10 / 4, 1), order=1, grid_mode=True, mode="nearest")
                     for im in _area_reference(x, 4, 1)])
    np.testing.assert_allclose(out, grow, atol=1e-12)
    u = (x * 255).astype(np.uint8)
    r = resize_uint8(u, 4, 10)
    assert r.dtype == np.uint8
    assert np.abs(r.astype(float) - resize(u.astype(float), 4, 10)).max() <= 0.5 + 1e-4  # float32


def test_prepare_shape_dtype_range():
    """prepare gives float32 in [0, 1] of the spec's shape for every mode."""
    imgs = np.random.default_rng(6).integers(0, 256, (5, 20, 24, 3), dtype=np.uint8)
    for mode, c in (("rgb", 3), ("gray", 1), ("ycc", 3), ("hsv", 3)):
        out = prepare(imgs, InputSpec(16, 12, mode))
        assert out.shape == (5, 16, 12, c) and out.dtype == np.float32
        assert 0.0 <= out.min() and out.max() <= 1.0
    same = prepare(imgs, InputSpec(20, 24, "rgb"))
    np.testing.assert_allclose(same, imgs / 255.0, atol=1e-7)


def test_fit_normalisation_matches_statistics_module():
    """Per-channel mean and population std equal the standard library's statistics."""
    x = np.random.default_rng(7).random((6, 4, 5, 3)).astype(np.float32)
    mean, std = fit_normalisation(x)
    for ch in range(3):
        vals = x[..., ch].ravel().tolist()
        # reference: Python standard library statistics.fmean / pstdev
        assert mean[ch] == pytest.approx(statistics.fmean(vals), rel=1e-6)
        assert std[ch] == pytest.approx(statistics.pstdev(vals), rel=1e-5)
    z = normalise(x, mean, std)
    np.testing.assert_allclose(z.reshape(-1, 3).mean(axis=0), 0, atol=1e-5)
    np.testing.assert_allclose(z.reshape(-1, 3).std(axis=0), 1, atol=1e-4)


def test_constant_channel_std_floored():
    """A constant channel gets the floored std, so normalising stays finite."""
    x = np.zeros((3, 2, 2, 2), np.float32)
    x[..., 1] = np.arange(12).reshape(3, 2, 2)
    mean, std = fit_normalisation(x)
    assert std[0] > 0 and np.isfinite(normalise(x, mean, std)).all()
    with pytest.raises(ValueError, match=r"mean and std must have shape \(2,\)"):
        normalise(x, mean[:1], std[:1])


def test_fold_statistics_ignore_held_out_images():
    """A fold's statistics do not change when its held-out images change (no leakage)."""
    rng = np.random.default_rng(8)
    x = rng.random((40, 4, 4, 3)).astype(np.float32)
    train, held = np.arange(30), np.arange(30, 40)
    _, held_a, mean_a, std_a = normalise_fold(x, train, held)
    x2 = x.copy()
    x2[held] = rng.random((10, 4, 4, 3)) * 0.1 + 0.9      # very different held-out images
    _, held_b, mean_b, std_b = normalise_fold(x2, train, held)
    np.testing.assert_array_equal(mean_a, mean_b)
    np.testing.assert_array_equal(std_a, std_b)
    np.testing.assert_allclose(mean_a, x[train].reshape(-1, 3).mean(axis=0), rtol=1e-6)
    assert not np.allclose(held_a, held_b)   # the held-out part itself did change


@pytest.mark.parametrize("seed", range(12))
def test_chunked_statistics_equal_whole_float64_ones_bit_for_bit(seed):
    """Chunked float64 sums, mean and std equal those of a whole float64 copy exactly."""
    from tinyconv.data.normalise import exact_sum
    rng = np.random.default_rng(seed)
    n, h, c = int(rng.integers(1, 90)), int(rng.integers(1, 30)), int(rng.choice([1, 2, 3, 4]))
    x = (rng.random((n, h, h, c)) * rng.choice([1.0, 255.0])).astype(np.float32)
    flat = x.reshape(-1, c).astype(np.float64)                 # the copy the chunks avoid
    for chunk in (int(rng.integers(1, 700)), 4096, 1 << 16):
        got = exact_sum(x.reshape(-1, c), lambda v: v.astype(np.float64), chunk)
        np.testing.assert_array_equal(got, flat.sum(axis=0))
    mean, std = fit_normalisation(x)
    np.testing.assert_array_equal(mean, flat.mean(axis=0).astype(np.float32))
    np.testing.assert_array_equal(std, np.maximum(flat.std(axis=0), 1e-3).astype(np.float32))


def test_normalise_into_given_array_equals_new_array():
    """normalise(..., out=x) writes into x exactly what normalise returns as a new array."""
    x = np.random.default_rng(9).random((5, 3, 3, 3)).astype(np.float32)
    mean, std = fit_normalisation(x)
    fresh = normalise(x, mean, std)
    kept = x.copy()
    got = normalise(kept, mean, std, out=kept)
    assert got is kept
    np.testing.assert_array_equal(got, fresh)
