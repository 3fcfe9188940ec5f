"""Conv layer across its algorithms: SciPy agreement, returned arrays, switching algorithm.

Outside references: scipy.signal.correlate (the forward) and the loop
references of tinyconv.layers.reference (the gradients).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal

from helpers import randn
from tinyconv.layers import reference
from tinyconv.layers.conv import Conv

ALGORITHMS = ["im2col", "winograd", "winograd4"]


def _conv(c, f, pads, algorithm, dtype=np.float64, relu=False, seed=0):
    layer = Conv(c, f, 3, 1, pads, rng=np.random.default_rng(seed), dtype=dtype, relu=relu)
    layer.params["b"][...] = randn((f,), seed + 11)
    layer.algorithm = algorithm
    return layer


def _scipy_forward(x, w, b, pads):
    """Stride-1 cross-correlation by scipy.signal.correlate ('valid' on the zero-padded input)."""
    t, bt, lf, rt = pads
    xp = np.pad(np.asarray(x, np.float64), ((0, 0), (t, bt), (lf, rt), (0, 0)))
    out = np.empty((x.shape[0], xp.shape[1] - 2, xp.shape[2] - 2, w.shape[3]))
    for i in range(x.shape[0]):
        for j in range(w.shape[3]):
            # Reference: SciPy correlate over (h, w, c) with a (3, 3, c_in) kernel.
            out[i, :, :, j] = signal.correlate(xp[i], w[:, :, :, j].astype(np.float64),
                                               mode="valid")[:, :, 0] + b[j]
    return out


# (n, h, w, c_in, f, pads): batch of 1, 1 x 1 and odd outputs, asymmetric pads,
# sizes that are not multiples of either tile step (2 and 4).
FORWARD_CASES = [
    (1, 7, 6, 8, 8, (0, 0, 0, 0)),
    (2, 9, 11, 5, 3, (1, 1, 1, 1)),
    (2, 1, 1, 4, 2, (1, 1, 1, 1)),
    (3, 10, 5, 2, 4, (2, 0, 1, 2)),
]


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
@pytest.mark.parametrize("case", FORWARD_CASES)
@pytest.mark.parametrize("algorithm", ALGORITHMS)
def test_forward_matches_scipy_correlate_on_strided_inputs(algorithm, case, dtype):
    """Every algorithm, training or not, equals scipy.signal.correlate on a non-contiguous input."""
    n, h, w, c, f, pads = case
    layer = _conv(c, f, pads, algorithm, dtype)
    x = randn((n, h, 2 * w, c + 1), 3, dtype)[:, :, ::2, :c]  # strided in two axes
    assert not x.flags.c_contiguous
    want = _scipy_forward(x, layer.params["w"], layer.params["b"], pads)
    # float32: Winograd's transforms round more than a direct sum (F(4x4) most).
    atol = 1e-11 if dtype == np.float64 else 3e-5 * np.abs(want).max()
    for training in (True, False):
        y = layer.forward(x, training=training)
        assert y.dtype == dtype and y.shape == want.shape
        np.testing.assert_allclose(y, want, rtol=0, atol=atol)


# (h, w, pads, n): the shapes for which Winograd crops its padded gradient
# buffer only at the bottom. With one image that crop is a contiguous slice,
# which np.ascontiguousarray returns without copying.
BOTTOM_CROP = [(7, 6, (0, 0, 0, 0), 1)]
RETURN_CASES = [
    (7, 6, (0, 0, 0, 0), 2),   # the same crop with two images: a copy
    (6, 6, (0, 0, 0, 0), 1),   # no padding at all for F(2x2): a fresh array
    (5, 7, (1, 1, 1, 1), 1),   # same padding: columns cropped, a copy
    (6, 7, (0, 0, 0, 0), 1),   # extra column only: a copy
]


def _returned_gradient_case(algorithm, h, w, pads, n):
    layer = _conv(8, 8, pads, algorithm)
    x = randn((n, h, w, 8), 1)
    y = layer.forward(x, training=True)
    g1, g2 = randn(y.shape, 2), randn(y.shape, 3)
    gx1 = layer.backward(g1)
    want1, _, _ = reference.conv_backward(g1, x, layer.params["w"], 1, pads)
    layer.forward(x, training=True)
    gx2 = layer.backward(g2)
    want2, _, _ = reference.conv_backward(g2, x, layer.params["w"], 1, pads)
    np.testing.assert_allclose(gx2, want2, rtol=1e-11, atol=1e-12)
    # The first gradient still holds its own values: no later backward reuses its memory.
    assert not np.shares_memory(gx1, gx2)
    np.testing.assert_allclose(gx1, want1, rtol=1e-11, atol=1e-12)


@pytest.mark.parametrize("h, w, pads, n", RETURN_CASES)
@pytest.mark.parametrize("algorithm", ALGORITHMS)
def test_returned_input_gradient_is_not_overwritten_by_the_next_backward(algorithm, h, w,
                                                                         pads, n):
    """An input gradient handed to the caller is the caller's: the next backward leaves it."""
    _returned_gradient_case(algorithm, h, w, pads, n)


@pytest.mark.parametrize("h, w, pads, n", BOTTOM_CROP)
@pytest.mark.parametrize("algorithm", ["winograd", "winograd4"])
def test_returned_input_gradient_survives_a_bottom_only_crop(algorithm, h, w, pads, n):
    """Valid padding, odd output height, output width a multiple of the tile step, one image."""
    _returned_gradient_case(algorithm, h, w, pads, n)


def test_returned_input_gradient_after_a_bottom_only_crop_with_im2col():
    """The im2col path on the shape above keeps the caller's gradient (the control case)."""
    _returned_gradient_case("im2col", *BOTTOM_CROP[0])


@pytest.mark.parametrize("order", [("winograd", "im2col", "winograd4"),
                                   ("im2col", "winograd4", "winograd", "im2col")])
def test_switching_algorithm_between_steps_uses_the_last_forward(order):
    """Each step's gradients are those of its own forward, whatever the previous step ran."""
    pads = (1, 1, 1, 1)
    layer = _conv(8, 8, pads, order[0], relu=True)
    for step, algorithm in enumerate(order):
        layer.algorithm = algorithm
        x = randn((2, 7, 5, 8), 20 + step)
        y = layer.forward(x, training=True)
        want = np.maximum(reference.conv_forward(x, layer.params["w"], layer.params["b"], 1,
                                                 pads), 0.0)
        np.testing.assert_allclose(y, want, rtol=1e-11, atol=1e-12)
        g = randn(y.shape, 40 + step)
        gx = layer.backward(g)
        rgx, rgw, rgb = reference.conv_backward(g * (want > 0), x, layer.params["w"], 1, pads)
        np.testing.assert_allclose(gx, rgx, rtol=1e-11, atol=1e-12, err_msg=algorithm)
        np.testing.assert_allclose(layer.grads["w"], rgw, rtol=1e-11, atol=1e-12,
                                   err_msg=algorithm)
        np.testing.assert_allclose(layer.grads["b"], rgb, rtol=1e-11, atol=1e-12,
                                   err_msg=algorithm)
