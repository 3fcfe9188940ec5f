"""Tests of the finite-difference gradient checker itself."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from scipy import optimize

from helpers import conv_op, randn, simple_op
from tinyconv.gradients import (GradRow, THRESHOLD, all_passed, check_layer, check_network,
                                relative_error)
from tinyconv.layers import Dense, build
from tinyconv.network import Network


class _WrongWeightGrad(Dense):
    """A dense layer whose weight gradient is 1% too large (a deliberate bug)."""

    def backward(self, grad_out):
        gx = super().backward(grad_out)
        self.grads["w"] = self.grads["w"] * 1.01
        return gx


class _WrongInputGrad(Dense):
    """A dense layer that forgets to transpose nothing but drops one input column."""

    def backward(self, grad_out):
        gx = super().backward(grad_out).copy()
        gx[:, 0] = 0.0
        return gx


class _NoBiasGrad(Dense):
    """A dense layer whose backward forgets the bias gradient."""

    def backward(self, grad_out):
        gx = super().backward(grad_out)
        del self.grads["b"]
        return gx


def _mean_softmax_loss(logits, labels):
    """A stand-in loss written from the definition: mean -log softmax(logits)[label]."""
    shifted = logits - logits.max(axis=1, keepdims=True)
    p = np.exp(shifted) / np.exp(shifted).sum(axis=1, keepdims=True)
    n = logits.shape[0]
    loss = -np.mean(np.log(p[np.arange(n), labels]))
    grad = p.copy()
    grad[np.arange(n), labels] -= 1.0
    return float(loss), grad / n


def test_relative_error_worked_values():
    """|a - n| / max(|a|, |n|, floor): worked values (computed by hand)."""
    err = relative_error(np.array([1.0, 2.0, 0.0]), np.array([1.1, 2.0, 0.0]), floor=1e-12)
    np.testing.assert_allclose(err, [0.1 / 1.1, 0.0, 0.0])
    # The default floor is 1e-3 of the largest magnitude: 1e-9 vs 0 against 1e-3 * 10.
    np.testing.assert_allclose(relative_error(np.array([10.0, 0.0]), np.array([10.0, 1e-9])),
                               [0.0, 1e-9 / 1e-2])


def test_wrong_weight_gradient_fails():
    """A weight gradient 1% off fails the check while the correct tensors still pass."""
    layer = _WrongWeightGrad(6, 4, rng=np.random.default_rng(0), dtype=np.float64)
    rows = {r.tensor: r for r in check_layer(layer, randn((5, 6), 1))}
    assert not rows["w"].passed and rows["w"].max_rel_error > 1e-3
    assert rows["x"].passed and rows["b"].passed
    assert not all_passed(rows.values())


def test_wrong_input_gradient_fails():
    """An input gradient with a zeroed column fails the input row."""
    layer = _WrongInputGrad(6, 4, rng=np.random.default_rng(0), dtype=np.float64)
    rows = {r.tensor: r for r in check_layer(layer, randn((5, 6), 1))}
    assert not rows["x"].passed and rows["x"].max_rel_error > 0.5
    assert rows["w"].passed


def test_missing_gradient_fails_with_note():
    """A parameter whose gradient backward never set fails and the note says why."""
    layer = _NoBiasGrad(3, 2, rng=np.random.default_rng(0), dtype=np.float64)
    row = [r for r in check_layer(layer, randn((4, 3), 1)) if r.tensor == "b"][0]
    assert not row.passed
    assert row.note == "backward gave nothing for a tensor of shape (2,)"


def test_rows_are_frozen_and_deterministic():
    """Rows are frozen dataclasses; one seed gives identical rows; the caller's layer is unchanged."""
    op = conv_op(6, 5, 2, 3, 3, 2)
    layer = build(op, np.random.default_rng(0), np.float32)
    w_before = layer.params["w"].copy()
    x = randn((2, 6, 5, 2), 1)
    a = check_layer(layer, x, seed=4, max_coords=20)
    assert a == check_layer(layer, x, seed=4, max_coords=20)
    assert a[0].note == "sampled 20 of 120 coordinates"
    assert isinstance(a[0], GradRow) and a[0].shape == (2, 6, 5, 2)
    with pytest.raises(dataclasses.FrozenInstanceError):
        a[0].passed = False
    assert layer.params["w"].dtype == np.float32
    np.testing.assert_array_equal(layer.params["w"], w_before)
    # float32 parameters are checked in float64 and pass the float64 threshold.
    assert all_passed(a) and max(r.max_rel_error for r in a) < THRESHOLD


def test_upstream_gradient_is_random_not_ones():
    """A bug invisible to an all-ones upstream (gradient rows permuted) is caught."""

    class _SwappedRows(Dense):
        def backward(self, grad_out):
            gx = super().backward(grad_out)
            return gx[::-1].copy()  # wrong image order; a sum over images cannot tell

    layer = _SwappedRows(3, 2, rng=np.random.default_rng(0), dtype=np.float64)
    layer.params["w"][...] = 1.0  # with ones upstream every row would be equal
    rows = check_layer(layer, randn((2, 3), 1))
    assert not rows[0].passed


def test_scipy_check_grad_agrees_on_conv_weights():
    """scipy.optimize.check_grad (forward differences), a second oracle, agrees on conv weights."""
    op = conv_op(6, 6, 2, 3, 3, 2)
    layer = build(op, np.random.default_rng(0), np.float64)
    x = randn((2, 6, 6, 2), 1)
    upstream = randn((2,) + op.out_shape, 2)
    w = layer.params["w"]

    def f(flat):
        w[...] = flat.reshape(w.shape)
        return float(np.sum(layer.forward(x) * upstream))

    def grad(flat):
        w[...] = flat.reshape(w.shape)
        layer.forward(x, training=True)
        layer.backward(upstream)
        return layer.grads["w"].ravel()

    w0 = w.ravel().copy()
    # SciPy: check_grad returns the 2-norm of (analytic - forward difference).
    diff = optimize.check_grad(f, grad, w0)
    assert diff / np.linalg.norm(grad(w0)) < 1e-6


def test_network_gradients_through_the_loss():
    """A whole network (conv, max pool, stride 2, bn, gap, dense) passes through the loss."""
    net = Network.from_arch("16x16gray/c4k3-p2-c8k3s2-bn-gap-d8", 4, seed=0)
    rng = np.random.default_rng(1)
    x, y = rng.standard_normal((4, 16, 16, 1)), rng.integers(0, 4, 4)
    rows = check_network(net, x, y, seed=0, max_coords=150)
    assert rows[0].layer == "input" and rows[0].tensor == "x"
    names = [f"{r.layer}/{r.tensor}" for r in rows[1:]]
    assert names == [name for name, _ in net.param_list()]
    assert all_passed(rows), [r for r in rows if not r.passed]
    assert net.dtype == np.float32  # the caller's network is untouched


def test_network_with_dropout_and_stand_in_loss():
    """check_network holds dropout masks, accepts any loss, and still passes."""
    net = Network.from_arch("8x8rgb/c3k3-x30-a2-d6-x20", 3, seed=2, dtype=np.float64)
    rng = np.random.default_rng(3)
    x, y = rng.standard_normal((5, 8, 8, 3)), rng.integers(0, 3, 5)
    rows = check_network(net, x, y, loss=_mean_softmax_loss, max_coords=100)
    assert all_passed(rows), [r for r in rows if not r.passed]
    assert all("fixed dropout mask" in r.note for r in rows)


def test_network_with_a_wrong_layer_fails():
    """A network whose hidden dense layer has a wrong weight gradient fails that row only."""
    net = Network.from_arch("6x6gray/d5", 2, seed=0, dtype=np.float64)
    index = next(i for i, op in enumerate(net.ops) if op.kind == "dense")
    bad = _WrongWeightGrad(36, 5, rng=np.random.default_rng(0), dtype=np.float64)
    bad.name = net.layers[index].name
    net.layers[index] = bad
    rng = np.random.default_rng(1)
    rows = check_network(net, rng.standard_normal((3, 6, 6, 1)), rng.integers(0, 2, 3),
                         loss=_mean_softmax_loss)
    failed = [f"{r.layer}/{r.tensor}" for r in rows if not r.passed]
    assert failed == [f"{index}:1:d5/w"]


def test_all_kinks_means_nothing_checked():
    """When every coordinate straddles a kink the row fails and says nothing was checked."""
    layer = build(simple_op("relu", (3,)), np.random.default_rng(0), np.float64)
    (row,) = check_layer(layer, np.zeros((1, 3)))
    assert not row.passed
    assert "nothing checked" in row.note and "3 of 3 coordinates skipped" in row.note


@pytest.mark.parametrize("text", ["9x9rgb/c4k2v-bn-dw3s2-a2-x25-d6-bn",
                                  "15x13gray/c3k5s2-p2-c5k1-dw3v-gap-d4-x10"])
def test_network_of_every_layer_kind_passes(text):
    """Networks using every layer kind (even kernel, stride 2, valid, BN on vectors) pass."""
    net = Network.from_arch(text, 3, seed=1, dtype=np.float64)
    # Biases off zero, so no pre-activation sits exactly on a ReLU kink.
    bias_rng = np.random.default_rng(9)
    for name, array in net.param_list():
        if name.endswith("/b") or name.endswith("/beta"):
            array[...] = bias_rng.normal(0.0, 0.1, array.shape)
    rng = np.random.default_rng(2)
    x = rng.standard_normal((4,) + net.arch.input.shape)
    y = rng.integers(0, 3, 4)
    # Outside check: central differences (Nocedal & Wright, section 8.1 [from memory]).
    rows = check_network(net, x, y, max_coords=120)
    assert all_passed(rows), [r for r in rows if not r.passed]


def test_non_finite_gradient_fails_with_note():
    """A NaN in an analytic gradient fails the row, says so, and reports nan."""

    class _NanGrad(Dense):
        def backward(self, grad_out):
            gx = super().backward(grad_out)
            self.grads["w"] = self.grads["w"].copy()
            self.grads["w"][0, 0] = np.nan
            return gx

    layer = _NanGrad(3, 2, rng=np.random.default_rng(0), dtype=np.float64)
    row = [r for r in check_layer(layer, randn((4, 3), 1)) if r.tensor == "w"][0]
    assert not row.passed and np.isnan(row.max_rel_error)
    assert "non-finite gradient: analytic has 1, numeric 0 non-finite values" in row.note
