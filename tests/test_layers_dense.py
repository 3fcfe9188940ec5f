"""Tests of the dense, ReLU and flatten layers and the element-wise kernels."""

from __future__ import annotations

import numpy as np
import pytest

from helpers import distinct, randn, simple_op
from tinyconv.gradients import check_layer
from tinyconv.layers import Conv, Dense, build, reference
from tinyconv.layers import kernels_act as ka


@pytest.mark.parametrize("n_in,n_out", [(1, 1), (7, 3), (20, 9)])
def test_dense_forward_and_gradients(n_in, n_out):
    """Dense computes x @ w + b, and its gradients agree with central differences (< 1e-6)."""
    layer = build(simple_op("dense", (n_in,), (n_out,), units=n_out),
                  np.random.default_rng(0), np.float64)
    layer.params["b"][...] = randn((n_out,), 4)
    x = randn((5, n_in), 1)
    np.testing.assert_allclose(layer.forward(x), x @ layer.params["w"] + layer.params["b"])
    # Outside check: central differences (Nocedal & Wright, section 8.1 [from memory]).
    rows = check_layer(layer, x, max_coords=None)
    assert [r.tensor for r in rows] == ["x", "w", "b"]
    assert all(r.passed and r.max_rel_error < 1e-6 for r in rows), rows


def test_relu_gradient_away_from_kinks():
    """ReLU's input gradient agrees with central differences when no input is near 0."""
    layer = build(simple_op("relu", (3, 4, 2)), np.random.default_rng(0), np.float64)
    # Outside check: central differences (Nocedal & Wright, section 8.1 [from memory]).
    (row,) = check_layer(layer, distinct((2, 3, 4, 2), 1), max_coords=None)
    assert row.passed and row.max_rel_error < 1e-6 and "skipped" not in row.note, row


def test_relu_kink_is_skipped_and_said():
    """An input at ReLU's kink is skipped by the checker and the note says so."""
    layer = build(simple_op("relu", (3,)), np.random.default_rng(0), np.float64)
    x = np.array([[0.0, 1.0, -2.0]])
    # Outside check: central differences (Nocedal & Wright, section 8.1 [from memory]).
    (row,) = check_layer(layer, x, max_coords=None)
    assert row.passed
    assert "1 of 3 coordinates skipped" in row.note


def test_flatten_is_c_order_and_reversible():
    """Flatten orders (h, w, c) in C order and its backward restores the shape."""
    layer = build(simple_op("flatten", (2, 3, 4), (24,)), np.random.default_rng(0), np.float64)
    x = randn((2, 2, 3, 4), 1)
    y = layer.forward(x, training=True)
    np.testing.assert_array_equal(y[1], x[1].ravel(order="C"))
    np.testing.assert_array_equal(layer.backward(y), x)
    # Outside check: central differences (Nocedal & Wright, section 8.1 [from memory]).
    (row,) = check_layer(layer, x, max_coords=None)
    assert row.passed


@pytest.mark.parametrize("seed", range(3))
def test_elementwise_kernels_match_references(seed):
    """ReLU forward/backward and fused bias+ReLU kernels equal their loop references."""
    rng = np.random.default_rng(seed)
    shape = tuple(int(v) for v in rng.integers(1, 6, size=int(rng.integers(2, 5))))
    x, g, b = rng.standard_normal(shape), rng.standard_normal(shape), rng.standard_normal(shape[-1])
    np.testing.assert_array_equal(ka.relu_forward(x), reference.relu(x))
    np.testing.assert_array_equal(ka.relu_backward(g, ka.relu_forward(x)),
                                  reference.relu_backward(g, x))
    np.testing.assert_allclose(ka.bias_relu_(x.copy(), b), reference.bias_relu(x, b))


def test_fused_relu_option_matches_separate_layers():
    """Conv and dense with relu=True equal the layer followed by a ReLU, forward and backward."""
    x = randn((2, 5, 5, 2), 1)
    fused = Conv(2, 3, 3, 1, (1, 1, 1, 1), rng=np.random.default_rng(0), dtype=np.float64,
                 relu=True)
    plain = Conv(2, 3, 3, 1, (1, 1, 1, 1), rng=np.random.default_rng(0), dtype=np.float64)
    y = fused.forward(x, training=True)
    np.testing.assert_allclose(y, np.maximum(plain.forward(x, training=True), 0))
    g = randn(y.shape, 2)
    np.testing.assert_allclose(fused.backward(g), plain.backward(g * (y > 0)))
    dense = Dense(4, 3, rng=np.random.default_rng(0), dtype=np.float64, relu=True)
    # Outside check: central differences (Nocedal & Wright, section 8.1 [from memory]).
    rows = check_layer(dense, randn((6, 4), 5), max_coords=None)
    assert all(r.passed for r in rows), rows


def test_nan_propagates_through_relu_and_max_pool():
    """NaN passes through ReLU and wins a max-pool window, as numpy.maximum / numpy.max do."""
    x = np.array([[[[np.nan], [1.0]], [[2.0], [-1.0]]]])
    relu = build(simple_op("relu", (2, 2, 1)), np.random.default_rng(0), np.float64)
    assert np.isnan(relu.forward(x)[0, 0, 0, 0])
    np.testing.assert_array_equal(relu.forward(x)[0, :, :, 0].ravel()[1:], [1.0, 2.0, 0.0])
    np.testing.assert_array_equal(np.isnan(relu.forward(x)), np.isnan(np.maximum(x, 0)))
    pool = build(simple_op("maxpool", (2, 2, 1), (1, 1, 1), size=2), np.random.default_rng(0),
                 np.float64)
    assert np.isnan(pool.forward(x[:, ::-1]).item())
    assert np.isnan(pool.forward(x).item())


def test_dense_input_grad_off():
    """A dense layer with input_grad=False returns None and still sets w and b gradients."""
    layer = Dense(4, 3, rng=np.random.default_rng(0), dtype=np.float64)
    layer.input_grad = False
    x, g = randn((5, 4), 1), randn((5, 3), 2)
    layer.forward(x, training=True)
    assert layer.backward(g) is None
    np.testing.assert_allclose(layer.grads["w"], x.T @ g)
    np.testing.assert_allclose(layer.grads["b"], g.sum(axis=0))
