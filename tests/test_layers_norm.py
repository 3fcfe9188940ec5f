"""Tests of batch normalisation."""

from __future__ import annotations

import numpy as np
import pytest

from helpers import randn, simple_op
from tinyconv.gradients import check_layer
from tinyconv.layers import build, reference


def _bn(shape, dtype=np.float64):
    layer = build(simple_op("bn", shape), np.random.default_rng(0), dtype)
    c = shape[-1]
    layer.params["gamma"][...] = 1.0 + 0.5 * randn((c,), 5)
    layer.params["beta"][...] = randn((c,), 6)
    return layer


@pytest.mark.parametrize("shape", [(3, 4, 2), (5, 3, 3), (6,)])
def test_training_forward_matches_reference_and_gradients(shape):
    """Training forward equals the loop reference; all gradients pass central differences (< 1e-6)."""
    layer = _bn(shape)
    x = 2.0 * randn((4,) + shape, 1) + 0.5
    y = layer.forward(x, training=True)
    np.testing.assert_allclose(y, reference.batchnorm_train(x, layer.params["gamma"],
                                                            layer.params["beta"], layer.eps),
                               rtol=1e-10, atol=1e-12)
    # Outside check: central differences (Nocedal & Wright, section 8.1 [from memory]).
    rows = check_layer(layer, x, max_coords=None)
    assert [r.tensor for r in rows] == ["x", "gamma", "beta"]
    assert all(r.passed and r.max_rel_error < 1e-6 for r in rows), rows


def test_training_normalises_each_channel():
    """In training each channel of the output has mean beta and std gamma (to eps)."""
    # Definition of batch normalisation (Ioffe & Szegedy, ICML 2015 [from memory]).
    layer = _bn((4, 4, 3))
    y = layer.forward(3.0 * randn((8, 4, 4, 3), 2) - 1.0, training=True)
    np.testing.assert_allclose(y.mean(axis=(0, 1, 2)), layer.params["beta"], atol=1e-10)
    np.testing.assert_allclose(y.std(axis=(0, 1, 2)), np.abs(layer.params["gamma"]), rtol=1e-5)


def test_running_statistics_and_evaluation():
    """Training updates running mean/var with momentum 0.9; evaluation uses them, not the batch."""
    layer = _bn((5,))
    x = 2.0 * randn((50, 5), 3) + 4.0
    layer.forward(x, training=True)
    # r = 0.9 r + 0.1 batch from mean 0 and var 1, the running variance unbiased (ddof=1):
    # common practice.
    np.testing.assert_allclose(layer.state["mean"], 0.1 * x.mean(axis=0), rtol=1e-12)
    np.testing.assert_allclose(layer.state["var"], 0.9 + 0.1 * x.var(axis=0, ddof=1), rtol=1e-12)
    for _ in range(200):
        layer.forward(x, training=True)
    np.testing.assert_allclose(layer.state["mean"], x.mean(axis=0), rtol=1e-6)
    one = x[:1]
    y_eval = layer.forward(one, training=False)
    expected = (one - layer.state["mean"]) / np.sqrt(layer.state["var"] + layer.eps)
    np.testing.assert_allclose(y_eval, expected * layer.params["gamma"] + layer.params["beta"])
    # A single-row batch in training would normalise to beta; evaluation does not.
    assert not np.allclose(y_eval, layer.params["beta"])
    state_before = {k: v.copy() for k, v in layer.state.items()}
    layer.forward(x, training=False)
    for key in state_before:
        np.testing.assert_array_equal(layer.state[key], state_before[key])


def test_initial_values_and_float32():
    """gamma starts at 1, beta at 0, running mean 0 and var 1; float32 stays float32."""
    layer = build(simple_op("bn", (2, 2, 3)), np.random.default_rng(0), np.float32)
    for key, value in [("gamma", 1.0), ("beta", 0.0)]:
        np.testing.assert_array_equal(layer.params[key], np.full(3, value, np.float32))
    np.testing.assert_array_equal(layer.state["mean"], np.zeros(3, np.float32))
    np.testing.assert_array_equal(layer.state["var"], np.ones(3, np.float32))
    x = randn((4, 2, 2, 3), 1, np.float32)
    y = layer.forward(x, training=True)
    gx = layer.backward(np.ones_like(y))
    assert y.dtype == gx.dtype == layer.state["var"].dtype == np.float32
    assert layer.forward(x).dtype == np.float32
