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
