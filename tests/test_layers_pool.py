"""Tests of max, average and global average pooling."""

from __future__ import annotations

import numpy as np
import pytest

from helpers import distinct, pool_op, randn, simple_op
from tinyconv.gradients import check_layer
from tinyconv.layers import build, reference

# (h, w, c, size): even and odd maps (floor drops the remainder)
SHAPES = [(4, 4, 2, 2), (5, 7, 3, 2), (6, 6, 1, 3), (7, 8, 2, 3), (5, 5, 2, 5)]


@pytest.mark.parametrize("shape", SHAPES)
@pytest.mark.parametrize("kind", ["maxpool", "avgpool"])
def test_pool_matches_loop_reference(shape, kind):
    """Pooling forward and backward equal the loop references (floor on odd sizes)."""
    h, w, c, s = shape
    layer = build(pool_op(h, w, c, s, kind), np.random.default_rng(0), np.float64)
    x = randn((3, h, w, c), 1)
    y = layer.forward(x, training=True)
    assert y.shape == (3, h // s, w // s, c)
    g = randn(y.shape, 2)
    gx = layer.backward(g)
    if kind == "maxpool":
        ry, _ = reference.maxpool_forward(x, s)
        rgx = reference.maxpool_backward(g, x, s)
    else:
        ry = reference.avgpool_forward(x, s)
        rgx = reference.avgpool_backward(g, x.shape, s)
    np.testing.assert_allclose(y, ry, rtol=1e-12)
    np.testing.assert_allclose(gx, rgx, rtol=1e-12, atol=1e-15)


@pytest.mark.parametrize("shape", SHAPES)
@pytest.mark.parametrize("kind", ["maxpool", "avgpool"])
def test_pool_gradient_matches_central_differences(shape, kind):
    """Pooling input gradient agrees with central differences, inputs free of ties (< 1e-6)."""
    h, w, c, s = shape
    layer = build(pool_op(h, w, c, s, kind), np.random.default_rng(0), np.float64)
    # Outside check: central differences (Nocedal & Wright, section 8.1 [from memory]).
    (row,) = check_layer(layer, distinct((2, h, w, c), 3), seed=0, max_coords=None)
    assert row.passed and row.max_rel_error < 1e-6, row
    assert "skipped" not in row.note


def test_maxpool_ties_go_to_first_maximum():
    """On a tie the whole gradient goes to the first maximum in row-major window order."""
    layer = build(pool_op(2, 2, 1, 2), np.random.default_rng(0), np.float64)
    x = np.array([[[[1.0], [3.0]], [[3.0], [0.0]]]])
    layer.forward(x, training=True)
    gx = layer.backward(np.array([[[[5.0]]]]))
    np.testing.assert_array_equal(gx[0, :, :, 0], [[0.0, 5.0], [0.0, 0.0]])


@pytest.mark.parametrize("shape", [(4, 4, 3), (5, 3, 2), (1, 1, 4)])
def test_global_average_pool(shape):
    """GAP maps (n, h, w, c) to the per-channel mean and passes central differences."""
    h, w, c = shape
    layer = build(simple_op("gap", shape, (c,)), np.random.default_rng(0), np.float64)
    x = randn((3, h, w, c), 1)
    np.testing.assert_allclose(layer.forward(x), x.mean(axis=(1, 2)), rtol=1e-12)
    # Outside check: central differences (Nocedal & Wright, section 8.1 [from memory]).
    (row,) = check_layer(layer, x, max_coords=None)
    assert row.passed, row


@pytest.mark.parametrize("seed", range(4))
def test_pool_kernels_on_seeded_random_shapes(seed):
    """Max and average pooling kernels equal the loop references on seeded random shapes, float32."""
    from tinyconv.layers import kernels_pool as kp

    rng = np.random.default_rng(seed)
    s = int(rng.integers(2, 4))
    shape = (int(rng.integers(1, 4)), int(rng.integers(s, 9)), int(rng.integers(s, 9)),
             int(rng.integers(1, 5)))
    x = rng.standard_normal(shape).astype(np.float32)
    y, arg = kp.maxpool_forward(x, s)
    ry, rarg = reference.maxpool_forward(x, s)
    np.testing.assert_array_equal(y, ry)
    np.testing.assert_array_equal(arg, rarg)
    g = rng.standard_normal(y.shape).astype(np.float32)
    np.testing.assert_array_equal(kp.maxpool_backward(g, arg, s, x.shape),
                                  reference.maxpool_backward(g, x, s))
    np.testing.assert_allclose(kp.avgpool_forward(x, s), reference.avgpool_forward(x, s),
                               rtol=1e-6, atol=1e-6)
    np.testing.assert_allclose(kp.avgpool_backward(g, s, x.shape),
                               reference.avgpool_backward(g, x.shape, s), rtol=1e-6, atol=1e-7)


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
@pytest.mark.parametrize("shape, s", [((3, 7, 9, 5), 2), ((2, 8, 6, 3), 2), ((2, 7, 8, 2), 3),
                                      ((1, 6, 6, 17), 2)])
@pytest.mark.parametrize("masked", [False, True])
def test_maxpool_backward_both_kernels_match_the_reference(dtype, shape, s, masked):
    """The 2 x 2 and the generic backward kernels equal the loop reference (ties, odd sizes).

    Reference: reference.maxpool_backward, then reference.relu_backward for the mask.
    """
    from tinyconv.layers import kernels_pool as kp

    rng = np.random.default_rng(sum(shape) + s)
    x = np.maximum(rng.standard_normal(shape), 0.0).astype(dtype)  # many exact-zero ties
    y, arg = kp.maxpool_forward(x, s)
    g = rng.standard_normal(y.shape).astype(dtype)
    want = reference.maxpool_backward(g, x, s)
    if masked:
        want = reference.relu_backward(want, x)
    got = kp.maxpool_backward(g, arg, s, x.shape, y if masked else None)
    assert got.dtype == dtype
    np.testing.assert_array_equal(got, want)
    # The generic kernel also on the even 2 x 2 shapes the unrolled one takes.
    gx = np.full(x.shape, 7.0, dtype=dtype)  # every entry must be overwritten
    kp._maxpool_backward_kernel(g, arg, s, y, masked, gx)
    np.testing.assert_array_equal(gx, want)


@pytest.mark.parametrize("shape", [(1, 4, 4, 3), (1, 5, 5, 3)])
def test_maxpool_backward_routes_to_a_nan(shape):
    """A NaN wins its window (as numpy.max); unmasked it takes the gradient, masked nothing passes."""
    from tinyconv.layers import kernels_pool as kp

    x = np.arange(np.prod(shape), dtype=np.float32).reshape(shape)
    x[0, 0, 1, 2] = np.nan
    y, arg = kp.maxpool_forward(x, 2)
    assert np.isnan(y[0, 0, 0, 2]) and not np.isnan(y).sum() > 1
    g = np.ones(y.shape, dtype=np.float32)
    gx = kp.maxpool_backward(g, arg, 2, x.shape)
    assert gx[0, 0, 1, 2] == 1.0 and gx[0, 1, 1, 2] == 0.0  # the NaN, not the window's max
    gm = kp.maxpool_backward(g, arg, 2, x.shape, y)
    assert not gm[0, :2, :2, 2].any()  # y is NaN, not > 0: the ReLU mask drops the window
    np.testing.assert_array_equal(gm[0, :2, :2, :2], gx[0, :2, :2, :2])
