"""Tests of layers.build and He initialisation."""

from __future__ import annotations

import numpy as np
import pytest

from helpers import conv_op, simple_op
from tinyconv.arch import expand, parse
from tinyconv.layers import build
from tinyconv.layers.init import he_normal


def test_build_every_op_of_an_architecture():
    """build makes one layer per Op with the Op's name, parameter shapes and output shape."""
    text = "12x10rgb/c4k3-bn-p2-dw3s2-c6k1v-x20-gap-d7"
    ops = expand(parse(text), n_classes=3)
    rng = np.random.default_rng(0)
    x = np.random.default_rng(1).standard_normal((2, 12, 10, 3)).astype(np.float32)
    kinds = set()
    for op in ops:
        layer = build(op, rng, np.float32)
        kinds.add(op.kind)
        assert layer.name == op.name
        assert all(p.dtype == np.float32 for p in layer.params.values())
        x = layer.forward(x, training=True)
        assert x.shape[1:] == op.out_shape, op
        assert x.dtype == np.float32
    assert kinds == {"conv", "bn", "relu", "maxpool", "dwconv", "dropout", "gap", "dense"}
    avg = expand(parse("8x8gray/a2"), 2)[0]
    assert build(avg, rng, np.float32).forward(np.ones((1, 8, 8, 1))).shape == (1, 4, 4, 1)


def test_parameter_shapes_follow_the_contract():
    """conv w (kh, kw, c_in, f), b (f,); depthwise w (kh, kw, c), b (c,); dense w (n_in, n_out)."""
    rng = np.random.default_rng(0)
    conv = build(conv_op(8, 8, 3, 5, 3), rng, np.float64)
    assert conv.params["w"].shape == (3, 3, 3, 5) and conv.params["b"].shape == (5,)
    dw = build(conv_op(8, 8, 4, 4, 5, kind="dwconv"), rng, np.float64)
    assert dw.params["w"].shape == (5, 5, 4) and dw.params["b"].shape == (4,)
    dense = build(simple_op("dense", (12,), (4,), units=4), rng, np.float64)
    assert dense.params["w"].shape == (12, 4) and dense.params["b"].shape == (4,)
    for layer in (conv, dw, dense):
        np.testing.assert_array_equal(layer.params["b"], 0.0)
        assert layer.params["w"].dtype == np.float64


def test_he_init_std():
    """He init has std sqrt(2 / fan_in): fan_in 144 gives 0.11785 (He et al., ICCV 2015; computed)."""
    w = he_normal(np.random.default_rng(0), (400, 1000), 144, np.float64)
    # 400,000 draws: the sample std's relative standard error is about 1 / sqrt(2 n) = 0.0011.
    assert abs(w.std() - 0.11785) < 0.002
    assert abs(w.mean()) < 0.002


@pytest.mark.parametrize("kind,fan_in", [("conv", 3 * 3 * 16), ("dwconv", 3 * 3), ("dense", 64)])
def test_fan_in_per_layer_kind(kind, fan_in):
    """fan_in is k*k*c_in for conv, k*k for depthwise and n_in for dense (He et al., ICCV 2015)."""
    rng = np.random.default_rng(1)
    if kind == "dense":
        layer = build(simple_op("dense", (64,), (2000,), units=2000), rng, np.float64)
    elif kind == "conv":
        layer = build(conv_op(5, 5, 16, 400, 3), rng, np.float64)
    else:
        layer = build(conv_op(5, 5, 9000, 9000, 3, kind="dwconv"), rng, np.float64)
    w = layer.params["w"]
    assert w.size >= 57600
    # Sample std within 2% (the relative standard error is below 0.3% for these sizes).
    assert abs(w.std() / np.sqrt(2.0 / fan_in) - 1.0) < 0.02


def test_same_seed_same_weights():
    """The same Generator seed gives identical weights; another seed different ones."""
    op = conv_op(6, 6, 2, 3, 3)
    a = build(op, np.random.default_rng(5), np.float32).params["w"]
    b = build(op, np.random.default_rng(5), np.float32).params["w"]
    c = build(op, np.random.default_rng(6), np.float32).params["w"]
    np.testing.assert_array_equal(a, b)
    assert not np.array_equal(a, c)


def test_unknown_kind_and_dtype_are_refused():
    """An unknown op kind or an integer dtype fails with the allowed values named."""
    rng = np.random.default_rng(0)
    with pytest.raises(ValueError, match=r"unknown kind 'softmax'; expected one of conv, dwconv"):
        build(simple_op("softmax", (4,)), rng, np.float32)
    with pytest.raises(ValueError, match="layer dtype must be float32 or float64, got int32"):
        build(simple_op("relu", (4,)), rng, np.int32)


@pytest.mark.parametrize("text", ["12x11rgb/c8k3s2-bn-dw5-p2-x20-c4k1-a2-d6", "9x9gray/dw3s2v-gap"])
def test_float32_gradients_close_to_float64(text):
    """Every layer's float32 output and gradients match float64 to float32 precision."""
    ops = expand(parse(text), n_classes=3)
    x64 = np.random.default_rng(1).standard_normal((16,) + ops[0].in_shape)
    x32 = x64.astype(np.float32)
    for i, op in enumerate(ops):
        l64 = build(op, np.random.default_rng(i), np.float64)
        l32 = build(op, np.random.default_rng(i), np.float32)
        y64, y32 = l64.forward(x64, training=True), l32.forward(x32, training=True)
        assert y32.dtype == np.float32
        scale = np.abs(y64).max() + 1e-30
        assert np.abs(y32 - y64).max() / scale < 1e-5, op.name
        g = np.random.default_rng(100 + i).standard_normal(y64.shape)
        gx64, gx32 = l64.backward(g), l32.backward(g.astype(np.float32))
        assert gx32.dtype == np.float32
        assert np.abs(gx32 - gx64).max() / (np.abs(gx64).max() + 1e-30) < 1e-5, op.name
        for key in l64.params:
            a, b = l64.grads[key], l32.grads[key]
            assert b.dtype == np.float32, (op.name, key)
            assert np.abs(b - a).max() / (np.abs(a).max() + 1e-30) < 1e-5, (op.name, key)
        x64, x32 = y64, y32
