"""Tests of the depthwise convolution layer and its kernels."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal

from helpers import conv_op, randn
from tinyconv.gradients import check_layer
from tinyconv.layers import build, reference

# (h, w, c, kernel, stride, valid)
SHAPES = [
    (5, 5, 3, 3, 1, False),
    (6, 7, 2, 3, 2, False),
    (7, 6, 2, 3, 2, True),
    (7, 7, 2, 5, 1, False),
    (8, 9, 2, 5, 2, True),
    (5, 4, 3, 1, 2, False),
    (7, 6, 2, 2, 2, True),
]


def _layer(shape, seed=0):
    h, w, c, k, s, valid = shape
    op = conv_op(h, w, c, c, k, s, valid, kind="dwconv")
    layer = build(op, np.random.default_rng(seed), np.float64)
    layer.params["b"][...] = randn((c,), seed + 11)
    return op, layer


@pytest.mark.parametrize("shape", SHAPES)
def test_forward_matches_scipy_per_channel(shape):
    """Depthwise forward equals scipy.signal.correlate2d ('valid', padded input) channel by channel."""
    op, layer = _layer(shape)
    x = randn((2,) + op.in_shape, 1)
    y = layer.forward(x)
    assert y.shape == (2,) + op.out_shape
    t, b, left, r = op.pads
    xp = np.pad(x, ((0, 0), (t, b), (left, r), (0, 0)))
    w, bias = layer.params["w"], layer.params["b"]
    for i in range(x.shape[0]):
        for ch in range(x.shape[3]):
            # Reference: SciPy 2-D cross-correlation of one channel with its own filter.
            ref = signal.correlate2d(xp[i, :, :, ch], w[:, :, ch], mode="valid")
            ref = ref[::op.stride, ::op.stride] + bias[ch]
            np.testing.assert_allclose(y[i, :, :, ch], ref, rtol=1e-10, atol=1e-12)


@pytest.mark.parametrize("shape", SHAPES)
def test_gradients_match_central_differences(shape):
    """Depthwise input, weight and bias gradients agree with central differences (< 1e-6)."""
    op, layer = _layer(shape)
    # Outside check: central differences (Nocedal & Wright, section 8.1 [from memory]).
    rows = check_layer(layer, randn((2,) + op.in_shape, 2), seed=1, max_coords=None)
    assert [r.tensor for r in rows] == ["x", "w", "b"]
    for row in rows:
        assert row.passed and row.max_rel_error < 1e-6, row


@pytest.mark.parametrize("shape", SHAPES)
def test_kernels_match_loop_reference(shape):
    """Fast depthwise forward and backward equal the loop references."""
    op, layer = _layer(shape, seed=3)
    x = randn((2,) + op.in_shape, 4)
    y = layer.forward(x, training=True)
    w, b = layer.params["w"], layer.params["b"]
    np.testing.assert_allclose(y, reference.depthwise_forward(x, w, b, op.stride, op.pads),
                               rtol=1e-10, atol=1e-12)
    g = randn(y.shape, 5)
    gx = layer.backward(g)
    rgx, rgw, rgb = reference.depthwise_backward(g, x, w, op.stride, op.pads)
    np.testing.assert_allclose(gx, rgx, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(layer.grads["w"], rgw, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(layer.grads["b"], rgb, rtol=1e-10, atol=1e-12)


def test_float32_stays_float32():
    """A float32 depthwise layer returns float32 outputs and gradients."""
    op = conv_op(6, 6, 3, 3, 3, 1, False, kind="dwconv")
    layer = build(op, np.random.default_rng(0), np.float32)
    x = randn((2,) + op.in_shape, 1, np.float32)
    y = layer.forward(x, training=True)
    gx = layer.backward(np.ones_like(y))
    assert y.dtype == gx.dtype == layer.grads["w"].dtype == layer.grads["b"].dtype == np.float32


@pytest.mark.parametrize("seed", range(4))
def test_kernels_on_seeded_random_shapes(seed):
    """Depthwise kernels equal the loop references on seeded random shapes, strides and pads."""
    from tinyconv.layers import kernels_dw as kd

    rng = np.random.default_rng(seed)
    k, s = int(rng.choice([1, 3, 5])), int(rng.integers(1, 3))
    n, h, w, c = 2, int(rng.integers(k, 10)), int(rng.integers(k, 10)), int(rng.integers(1, 6))
    pads = tuple(int(v) for v in rng.integers(0, 3, size=4))
    x = rng.standard_normal((n, h, w, c))
    wt, b = rng.standard_normal((k, k, c)), rng.standard_normal(c)
    top, bottom, left, right = pads
    xp = np.pad(x, ((0, 0), (top, bottom), (left, right), (0, 0)))
    y = kd.dw_forward(xp, wt, b, s)
    np.testing.assert_allclose(y, reference.depthwise_forward(x, wt, b, s, pads), rtol=1e-12,
                               atol=1e-12)
    g = rng.standard_normal(y.shape)
    gxp, gw, gb = kd.dw_backward(g, xp, wt, s)
    rgx, rgw, rgb = reference.depthwise_backward(g, x, wt, s, pads)
    np.testing.assert_allclose(gxp[:, top:top + h, left:left + w], rgx, rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(gw, rgw, rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(gb, rgb, rtol=1e-12, atol=1e-12)


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
@pytest.mark.parametrize("seed", range(6))
def test_stride1_row_kernels_match_the_references(dtype, seed):
    """The stride-1 row kernels on the unpadded input equal the loop references.

    Odd sizes, pads wider than the kernel's reach (taps wholly in the padding),
    and the fused ReLU with its mask in the backward sweep. The forward adds in
    the pixel kernel's order, so it equals dw_forward of the padded input
    exactly; the gradients sum in another order (float rounding).
    """
    from tinyconv.layers import kernels_dw as kd

    rng = np.random.default_rng(seed)
    k = int(rng.choice([1, 2, 3, 5]))
    pads = tuple(int(v) for v in rng.integers(0, 4, size=4))
    n, c = 2, int(rng.integers(1, 7))
    h = int(rng.integers(max(1, k - pads[0] - pads[1]), 9))
    w = int(rng.integers(max(1, k - pads[2] - pads[3]), 9))
    x = rng.standard_normal((n, h, w, c)).astype(dtype)
    wt, b = rng.standard_normal((k, k, c)).astype(dtype), rng.standard_normal(c).astype(dtype)
    top, bottom, left, right = pads
    xp = np.pad(x, ((0, 0), (top, bottom), (left, right), (0, 0)))
    tol = dict(rtol=1e-5, atol=1e-5) if dtype == np.float32 else dict(rtol=1e-12, atol=1e-12)
    for relu in (False, True):
        y = kd.dw1_forward(x, wt, b, pads, relu)
        assert y.dtype == dtype
        np.testing.assert_array_equal(y, kd.dw_forward(xp, wt, b, 1, relu))
        ry = reference.depthwise_forward(x, wt, b, 1, pads)
        np.testing.assert_allclose(y, reference.relu(ry) if relu else ry, **tol)
        g = rng.standard_normal(y.shape).astype(dtype)
        gx, gw, gb = kd.dw1_backward(g, x, wt, pads, y if relu else None)
        assert gx.dtype == gw.dtype == gb.dtype == dtype and gx.shape == x.shape
        gr = reference.relu_backward(g, y) if relu else g
        rgx, rgw, rgb = reference.depthwise_backward(gr, x, wt, 1, pads)
        np.testing.assert_allclose(gx, rgx, **tol)
        np.testing.assert_allclose(gw, rgw, **tol)
        np.testing.assert_allclose(gb, rgb, **tol)


def test_stride1_layer_keeps_nan():
    """A NaN input reaches the output and, through the fused ReLU, stays NaN (as numpy.maximum)."""
    op = conv_op(5, 5, 2, 2, 3, 1, False, kind="dwconv")
    layer = build(op, np.random.default_rng(0), np.float32)
    x = np.ones((1,) + op.in_shape, dtype=np.float32)
    x[0, 2, 2, 1] = np.nan
    y = layer.forward(x, training=True, relu=True)
    assert np.isnan(y[0, 1:4, 1:4, 1]).all() and not np.isnan(y[..., 0]).any()
