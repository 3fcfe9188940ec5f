"""Tests of the standard convolution layer and its kernels."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal

from helpers import conv_op, randn
from tinyconv.gradients import check_layer
from tinyconv.layers import build, reference
from tinyconv.layers.convalg import im2col as kc

# (h, w, c_in, filters, kernel, stride, valid): odd and even sizes, stride 1 and 2,
# same and valid padding, kernels 1, 3 and 5.
SHAPES = [
    (5, 5, 2, 3, 3, 1, False),
    (6, 7, 3, 2, 3, 2, False),
    (7, 5, 2, 3, 3, 2, True),
    (6, 6, 1, 2, 5, 1, False),
    (9, 7, 2, 2, 5, 2, False),
    (7, 8, 2, 3, 5, 1, True),
    (5, 6, 3, 4, 1, 1, False),
    (7, 5, 2, 3, 1, 2, True),
    (4, 4, 2, 2, 3, 1, True),
    (6, 5, 2, 3, 2, 1, True),
    (9, 8, 2, 2, 4, 2, True),
    (9, 8, 1, 3, 3, 2, False),
    (7, 6, 1, 2, 3, 1, False),
]


def _layer(shape, seed=0, dtype=np.float64):
    h, w, c, f, k, s, valid = shape
    op = conv_op(h, w, c, f, k, s, valid)
    layer = build(op, np.random.default_rng(seed), dtype)
    # Non-zero biases so that their part of the forward is exercised.
    layer.params["b"][...] = randn((f,), seed + 7)
    return op, layer


def _scipy_conv(x, w, b, pads, stride):
    """Cross-correlation by scipy.signal.correlate (mode 'valid' on the explicitly padded input)."""
    t, bt, lf, rt = pads
    xp = np.pad(x, ((0, 0), (t, bt), (lf, rt), (0, 0)))
    n, f = x.shape[0], w.shape[3]
    outs = []
    for i in range(n):
        maps = []
        for j in range(f):
            # Reference: SciPy correlate over (h, w, c) with a (k, k, c_in) kernel.
            full = signal.correlate(xp[i], w[:, :, :, j], mode="valid")[:, :, 0]
            maps.append(full[::stride, ::stride] + b[j])
        outs.append(np.stack(maps, axis=-1))
    return np.stack(outs)


@pytest.mark.parametrize("shape", SHAPES)
def test_forward_matches_scipy_correlate(shape):
    """Conv forward equals scipy.signal.correlate on the padded input, with the Op's output shape."""
    op, layer = _layer(shape)
    x = randn((2,) + op.in_shape, 1)
    y = layer.forward(x)
    assert y.shape == (2,) + op.out_shape
    expected = _scipy_conv(x, layer.params["w"], layer.params["b"], op.pads, op.stride)
    np.testing.assert_allclose(y, expected, rtol=1e-10, atol=1e-12)


@pytest.mark.parametrize("shape", SHAPES)
def test_gradients_match_central_differences(shape):
    """Input, weight and bias gradients agree with central finite differences (< 1e-6, float64)."""
    op, layer = _layer(shape)
    # Outside check: central differences (Nocedal & Wright, section 8.1 [from memory]).
    rows = check_layer(layer, randn((2,) + op.in_shape, 2), seed=3, max_coords=None)
    assert [r.tensor for r in rows] == ["x", "w", "b"]
    for row in rows:
        assert row.passed and row.max_rel_error < 1e-6, row


@pytest.mark.parametrize("shape", SHAPES[:6])
def test_backward_matches_loop_reference(shape):
    """Fast backward (im2col, GEMM, col2im) equals the loop reference on seeded shapes."""
    op, layer = _layer(shape, seed=4)
    x = randn((2,) + op.in_shape, 5)
    y = layer.forward(x, training=True)
    g = randn(y.shape, 6)
    gx = layer.backward(g)
    rgx, rgw, rgb = reference.conv_backward(g, x, layer.params["w"], op.stride, op.pads)
    np.testing.assert_allclose(gx, rgx, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(layer.grads["w"], rgw, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(layer.grads["b"], rgb, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(y, reference.conv_forward(x, layer.params["w"], layer.params["b"],
                                                         op.stride, op.pads), rtol=1e-10)


@pytest.mark.parametrize("seed", range(4))
def test_im2col_col2im_match_references(seed):
    """im2col and col2im kernels equal their loop references on seeded random shapes."""
    rng = np.random.default_rng(seed)
    n, h, w, c = rng.integers(1, 3), rng.integers(3, 8), rng.integers(3, 8), rng.integers(1, 4)
    k = int(rng.choice([1, 2, 3])) if min(h, w) >= 3 else 1
    s = int(rng.integers(1, 3))
    xp = rng.standard_normal((n, h, w, c))
    cols = kc.im2col(xp, k, k, s)
    np.testing.assert_array_equal(cols, reference.im2col(xp, k, k, s))
    g = rng.standard_normal(cols.shape)
    np.testing.assert_allclose(kc.col2im(g, xp.shape, k, k, s),
                               reference.col2im(g, xp.shape, k, k, s), rtol=1e-12, atol=1e-14)


def test_float32_forward_close_to_float64():
    """A float32 layer computes in float32 and agrees with float64 to float32 precision."""
    op, layer32 = _layer(SHAPES[1], dtype=np.float32)
    _, layer64 = _layer(SHAPES[1], dtype=np.float64)
    x = randn((3,) + op.in_shape, 8)
    y32 = layer32.forward(x.astype(np.float32), training=True)
    assert y32.dtype == np.float32
    layer32.backward(np.ones_like(y32))
    assert layer32.grads["w"].dtype == np.float32
    np.testing.assert_allclose(y32, layer64.forward(x), rtol=1e-4, atol=1e-5)


def test_training_buffers_do_not_change_earlier_results():
    """Reusing scratch buffers across training forwards leaves earlier outputs intact."""
    op, layer = _layer(SHAPES[0])
    x1, x2 = randn((2,) + op.in_shape, 1), randn((2,) + op.in_shape, 2)
    y1 = layer.forward(x1, training=True)
    y1_copy = y1.copy()
    layer.forward(x2, training=True)
    np.testing.assert_array_equal(y1, y1_copy)
    # And the backward uses the latest forward.
    g = randn(y1.shape, 3)
    gx = layer.backward(g)
    rgx, _, _ = reference.conv_backward(g, x2, layer.params["w"], op.stride, op.pads)
    np.testing.assert_allclose(gx, rgx, rtol=1e-10, atol=1e-12)


def test_inference_keeps_no_arrays():
    """A forward with training=False keeps no reference to inputs or column matrices."""
    op, layer = _layer(SHAPES[0])
    layer.forward(randn((2,) + op.in_shape, 1), training=False)
    assert layer._cols is None and not layer._buffers


def test_wrong_channel_count_is_named():
    """An input with the wrong number of channels fails naming the layer and the shape."""
    op, layer = _layer(SHAPES[0])
    with pytest.raises(ValueError, match=r"1:c3k3: expected input \(n, h, w, 2\), got shape"):
        layer.forward(np.zeros((1, 5, 5, 3)))


def test_input_grad_off_skips_only_the_input_gradient():
    """With input_grad=False backward returns None and the same weight and bias gradients."""
    op, layer = _layer(SHAPES[1])
    x = randn((2,) + op.in_shape, 1)
    g = randn((2,) + op.out_shape, 2)
    layer.forward(x, training=True)
    layer.backward(g)
    expected = {k: v.copy() for k, v in layer.grads.items()}
    layer.input_grad = False
    layer.forward(x, training=True)
    assert layer.backward(g) is None
    for key in expected:
        np.testing.assert_array_equal(layer.grads[key], expected[key])


@pytest.mark.parametrize("shape", [SHAPES[0], SHAPES[6], SHAPES[7], SHAPES[8]])
def test_returned_gradients_are_not_overwritten_later(shape):
    """A grad_x returned by backward stays intact through later forwards and backwards."""
    op, layer = _layer(shape)
    x = randn((2,) + op.in_shape, 1)
    layer.forward(x, training=True)
    gx1 = layer.backward(randn((2,) + op.out_shape, 2))
    gx1_copy = gx1.copy()
    layer.forward(randn((2,) + op.in_shape, 3), training=True)
    layer.backward(randn((2,) + op.out_shape, 4))
    np.testing.assert_array_equal(gx1, gx1_copy)


@pytest.mark.parametrize("shape", SHAPES)
@pytest.mark.parametrize("training", [True, False])
def test_chunked_columns_match_the_loop_reference(shape, training, monkeypatch):
    """With column matrices of a few images at a time, forward and gradients equal the loops."""
    op, layer = _layer(shape, seed=3)
    layer.input_grad = True
    x = randn((7,) + op.in_shape, 4)
    h, w, c, f, k, s, _ = shape
    # Room for about two images' columns: chunks of 2, 2, 2 and 1 images.
    rows = kc.conv_out_size(x.shape[1] + op.pads[0] + op.pads[1], k, s) * \
        kc.conv_out_size(x.shape[2] + op.pads[2] + op.pads[3], k, s)
    monkeypatch.setattr(kc, "COLS_CHUNK_BYTES", 2 * rows * k * k * c * x.itemsize)
    assert kc.chunk_rows(rows, k * k * c, x.itemsize, 7) == 2
    y = layer.forward(x, training=training)
    want = reference.conv_forward(x, layer.params["w"], layer.params["b"], s, op.pads)
    np.testing.assert_allclose(y, want, rtol=1e-10, atol=1e-12)
    if not training:
        return
    g = randn(y.shape, 5)
    gx = layer.backward(g)
    gx_want, gw_want, gb_want = reference.conv_backward(g, x, layer.params["w"], s, op.pads)
    np.testing.assert_allclose(gx, gx_want, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(layer.grads["w"], gw_want, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(layer.grads["b"], gb_want, rtol=1e-10, atol=1e-12)
    again = layer.forward(x, training=True)            # the kept buffers are reused
    np.testing.assert_array_equal(again, y)
    np.testing.assert_array_equal(layer.backward(g), gx)
