"""Fast paths of the engine against the slow ones they replace.

The network fuses a layer with the ReLU after it, masks ReLU gradients inside
max-pool backward and lets training skip the first input gradient; each must
give what the plain layer-by-layer walk gives (whose layers are themselves
tested against the loop references and finite differences).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from helpers import randn
from tinyconv.layers import reference
from tinyconv.layers.kernels_pool import maxpool_backward, maxpool_forward
from tinyconv.network import Network

TEXTS = [
    "8x8gray/c4k3-p2-d8",
    "9x9rgb/c4k3s2-dw3-c6k1-p2-gap",
    "8x8rgb/dw3s2-c4k1-a2-bn-d6",
    "10x10rgb/c3k3-p2-c5k3v-p2-d7",
]


def _plain_forward(net: Network, x: np.ndarray) -> np.ndarray:
    """Each layer's own forward in order (no fusion)."""
    out = np.asarray(x, dtype=net.dtype)
    for layer in net.layers:
        out = layer.forward(out, True)
    return out


def _plain_backward(net: Network, g: np.ndarray) -> np.ndarray:
    for layer in reversed(net.layers):
        g = layer.backward(g)
    return g


@pytest.mark.parametrize("text", TEXTS)
def test_fused_passes_equal_the_plain_layer_walk(text):
    """Fused forward/backward give the plain walk's logits, input and parameter gradients (float64)."""
    fast = Network.from_arch(text, 3, seed=4, dtype=np.float64)
    slow = Network.from_arch(text, 3, seed=4, dtype=np.float64)
    for (_, a), (_, b) in zip(fast.param_list(), slow.param_list()):
        a[...] = b[...] = randn(a.shape, a.size) * 0.5
    x = randn((3,) + fast.arch.input.shape, 1)
    g = randn((3, 3), 2)
    np.testing.assert_allclose(fast.forward(x, training=True), _plain_forward(slow, x),
                               rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(fast.backward(g), _plain_backward(slow, g), rtol=1e-12,
                               atol=1e-12)
    for (name, a), (_, b) in zip(fast.grad_list(), slow.grad_list()):
        np.testing.assert_allclose(a, b, rtol=1e-12, atol=1e-12, err_msg=name)


@pytest.mark.parametrize("text", TEXTS)
def test_skipping_the_input_gradient_keeps_parameter_gradients(text):
    """backward(input_grad=False) returns None when the first layer can skip, with identical gradients."""
    net = Network.from_arch(text, 3, seed=5)
    x = randn((4,) + net.arch.input.shape, 3, np.float32)
    g = randn((4, 3), 4, np.float32)
    net.forward(x, training=True)
    full = net.backward(g)
    want = [a.copy() for _, a in net.grad_list()]
    net.forward(x, training=True)
    got = net.backward(g, input_grad=False)
    first = type(net.layers[0]).__name__
    assert (got is None) == (first in ("Conv", "Flatten")), first
    if got is not None:
        np.testing.assert_array_equal(got, full)
    for (name, a), b in zip(net.grad_list(), want):
        np.testing.assert_array_equal(a, b, err_msg=name)
    # The layers are left as they were (the contract's default).
    assert all(getattr(layer, "input_grad", True) for layer in net.layers)


@pytest.mark.parametrize("seed", range(4))
def test_maxpool_backward_with_relu_mask_matches_the_two_references(seed):
    """Max-pool backward with the ReLU mask equals ReLU backward of the reference max-pool backward."""
    rng = np.random.default_rng(seed)
    s = int(rng.integers(2, 4))
    shape = (2, int(rng.integers(s, 3 * s + 2)), int(rng.integers(s, 3 * s + 2)), 3)
    x = reference.relu(rng.standard_normal(shape))  # a ReLU output: many exact zeros
    g = rng.standard_normal((2, shape[1] // s, shape[2] // s, 3))
    y, arg = maxpool_forward(x, s)
    got = maxpool_backward(g, arg, s, x.shape, y)
    want = reference.relu_backward(reference.maxpool_backward(g, x, s), x)
    np.testing.assert_array_equal(got, want)


def test_fit_is_bit_identical_for_one_seed():
    """Two fits with the same seeds give bit-identical weights (single-threaded determinism)."""
    from tinyconv.train import TrainConfig, fit

    text = "8x8rgb/c4k3-p2-dw3-c6k1-gap"
    x = randn((40, 8, 8, 3), 6, np.float32)
    y = np.random.default_rng(7).integers(0, 3, 40)
    nets = []
    for _ in range(2):
        net = Network.from_arch(text, 3, seed=8)
        fit(net, x, y, TrainConfig(epochs=2, batch_size=16, optimizer="sgd", lr=0.05))
        nets.append(net)
    for (name, a), (_, b) in zip(nets[0].param_list(), nets[1].param_list()):
        np.testing.assert_array_equal(a, b, err_msg=name)



@pytest.mark.parametrize("kind", ["sgd", "adam"])
def test_one_pass_optimiser_gives_the_numpy_formula_bits(kind):
    """The one-pass SGD and Adam kernels give bit for bit the NumPy expressions of the update rules."""
    from tinyconv.optim import SGD, Adam

    rng = np.random.default_rng(9)
    theta = rng.standard_normal((3, 3, 2, 5)).astype(np.float32)
    want = theta.copy()
    opt = SGD([("0:a/w", theta)], momentum=0.9) if kind == "sgd" else Adam([("0:a/w", theta)])
    m, v = np.zeros_like(want), np.zeros_like(want)
    for t in range(1, 5):
        g = rng.standard_normal(want.shape).astype(np.float32)
        opt.update([g], lr=0.01)
        if kind == "sgd":  # Polyak 1964 heavy ball, as written in numpy
            v *= 0.9
            v += g
            want -= 0.01 * v
        else:  # Kingma & Ba, ICLR 2015, with the corrections folded into step and eps
            c2 = math.sqrt(1.0 - 0.999 ** t)
            m *= 0.9
            m += (1.0 - 0.9) * g
            v *= 0.999
            v += (1.0 - 0.999) * np.square(g)
            want -= (0.01 * c2 / (1.0 - 0.9 ** t)) * m / (np.sqrt(v) + 1e-8 * c2)
    np.testing.assert_array_equal(theta, want)


@pytest.mark.parametrize("mask", [False, True])
def test_unrolled_2x2_pool_matches_the_references(mask):
    """The unrolled 2 x 2 max pool (even sizes) gives the loop reference's output, winners and gradient."""
    rng = np.random.default_rng(11)
    x = reference.relu(rng.standard_normal((2, 6, 8, 5)))  # exact zeros make ties
    y, arg = maxpool_forward(x, 2)
    ry, rarg = reference.maxpool_forward(x, 2)
    np.testing.assert_array_equal(y, ry)
    np.testing.assert_array_equal(arg, rarg)
    g = rng.standard_normal(y.shape)
    want = reference.maxpool_backward(g, x, 2)
    if mask:
        want = reference.relu_backward(want, x)
    np.testing.assert_array_equal(maxpool_backward(g, arg, 2, x.shape, y if mask else None), want)


@pytest.mark.parametrize("c, k, s", [(2, 3, 1), (3, 3, 2), (12, 3, 1), (5, 7, 2)])
def test_im2col_both_loop_orders_match_the_reference(c, k, s):
    """im2col equals the loop reference for short (<= 32) and long kernel-row runs."""
    from tinyconv.layers.convalg import im2col as kc

    xp = randn((2, 9, 10, c), c + k)
    np.testing.assert_array_equal(kc.im2col(xp, k, k, s), reference.im2col(xp, k, k, s))


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
@pytest.mark.parametrize("c, k, s, hp, wp", [(3, 3, 1, 9, 11), (3, 3, 2, 10, 9), (1, 3, 1, 7, 8),
                                             (8, 3, 1, 8, 7), (3, 5, 2, 11, 12), (33, 2, 1, 4, 5)])
def test_im2col_col2im_short_and_long_runs_match_the_references(dtype, c, k, s, hp, wp):
    """im2col (the 9-value copy of 3 x 3 on 3 channels and the slice loop) and col2im equal the
    loop references exactly: col2im adds in the reference's order."""
    from tinyconv.layers.convalg import im2col as kc

    xp = randn((2, hp, wp, c), c + 7 * k + s).astype(dtype)
    cols = kc.im2col(xp, k, k, s, np.full((2, (hp - k) // s + 1, (wp - k) // s + 1, k, k, c),
                                          np.nan, dtype=dtype))  # every entry written
    assert cols.dtype == dtype
    np.testing.assert_array_equal(cols, reference.im2col(xp, k, k, s))
    g = randn(cols.shape, c + k).astype(dtype)
    got = kc.col2im(g, xp.shape, k, k, s, np.full(xp.shape, np.nan, dtype=dtype))
    np.testing.assert_array_equal(got, reference.col2im(g, xp.shape, k, k, s))


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
@pytest.mark.parametrize("shape", [(4099, 3), (1024, 16), (129, 65), (64, 10), (17, 700)])
def test_blocked_bias_kernels_match_the_references(dtype, shape):
    """Bias add and bias + ReLU, per-row and blocked (large maps), equal the loop reference
    and numpy bit for bit, in place, NaN kept."""
    from tinyconv.layers import kernels_act as ka

    rng = np.random.default_rng(shape[0])
    y = rng.standard_normal(shape).astype(dtype)
    y[1, 0] = np.nan
    b = rng.standard_normal(shape[1]).astype(dtype)
    got = y.copy()
    assert ka.bias_relu_(got, b) is got
    np.testing.assert_array_equal(got, np.maximum(y + b, 0))  # numpy.maximum propagates NaN
    finite = np.isfinite(y)
    np.testing.assert_array_equal(got[finite], reference.bias_relu(y, b)[finite])
    got = y.copy()
    assert ka.add_bias_(got, b) is got
    np.testing.assert_array_equal(got, y + b)
