"""Quantisation parameters and the integer-only reference kernels."""

from fractions import Fraction

import numpy as np
import pytest
from scipy.signal import correlate

from tinyconv.errors import DataError, InputError
from tinyconv.network import Network
from tinyconv.quant import int8_logits, quantize_network
from tinyconv.quant.calibrate import scale_zero_point
from tinyconv.quant.integer import (accumulate, integer_matmul, quantize_input, rounding_divide,
                                    run_layer)
from tinyconv.quant.quantize import input_table


def setup(text: str, k: int = 4, seed: int = 0, n: int = 64):
    """Random-weight network with random biases, a normalisation and uint8 images."""
    rng = np.random.default_rng(seed)
    net = Network.from_arch(text, k, seed=seed)
    for layer in net.layers:
        if "b" in layer.params:
            layer.params["b"][:] = rng.normal(0, 0.1, layer.params["b"].shape)
    h, w, c = net.arch.input.shape
    mean, std = rng.uniform(0.3, 0.6, c), rng.uniform(0.15, 0.3, c)
    images = rng.integers(0, 256, (n, h, w, c), dtype=np.uint8)
    return net, mean, std, images


def test_scale_and_zero_point_represent_zero_exactly():
    """Real 0 maps to the integer zero point and the range ends map to -128 and 127."""
    # r = S (q - Z) with 0 exactly representable (Jacob et al., CVPR 2018, eq. 1)
    for lo, hi in ((-1.0, 3.0), (0.0, 6.0), (-2.5, 0.0), (0.2, 0.9), (-0.01, 10.0)):
        s, z = scale_zero_point(lo, hi)
        lo2, hi2 = min(lo, 0.0), max(hi, 0.0)
        assert s == pytest.approx((hi2 - lo2) / 255)
        assert -128 <= z <= 127
        assert s * (-128 - z) == pytest.approx(lo2, abs=s / 2)
        assert s * (127 - z) == pytest.approx(hi2, abs=s / 2)
    assert scale_zero_point(0.0, 0.0) == (1 / 255, -128)


def test_input_table_is_the_quantised_normalised_pixel():
    """table[p, c] dequantises to within half a step of (p/255 - mean_c)/std_c."""
    mean, std = np.array([0.2, 0.5, 0.7]), np.array([0.3, 0.25, 0.1])
    table, s, z = input_table(mean, std)
    assert table.shape == (256, 3) and table.dtype == np.int8
    real = (np.arange(256)[:, None] / 255 - mean) / std
    assert np.abs(s * (table.astype(float) - z) - real).max() <= s / 2 + 1e-12
    # worked value (computed): mean 0.5, std 0.25 spans [-2, 2]; S = 4/255, Z = 0, and
    # pixel p sits at p - 127.5 steps: every pixel is a tie, rounded up, so q = p - 127
    # (p = 255 clips to 127); ties to even would give pairs of equal values
    table, s, z = input_table(np.array([0.5]), np.array([0.25]))
    assert (s, z) == (pytest.approx(4 / 255), 0)
    assert table[:255, 0].tolist() == list(range(-127, 128))
    assert table[255, 0] == 127


def test_weights_symmetric_per_channel():
    """Each output channel uses [-127, 127] with its largest weight at +-127."""
    net, mean, std, images = setup("8x8rgb/c5k3-dw3-d7")
    qnet = quantize_network(net, mean, std, images, rounding="nearest")
    axes = {"conv": (0, 1, 2), "dwconv": (0, 1), "dense": (0,)}
    for layer in qnet.layers:
        if layer.weights is None:
            continue
        q = layer.weights.astype(int)
        assert q.min() >= -127 and q.max() <= 127
        assert (np.abs(q).max(axis=axes[layer.kind]) == 127).all()
        w = net.layers[layer.index].params["w"].astype(float)
        assert np.abs(q * layer.w_scale - w).max() <= layer.w_scale.max() / 2 + 1e-9
        assert 2 ** 30 <= layer.multiplier.min() and layer.multiplier.max() < 2 ** 31


@pytest.mark.parametrize("text", ["9x9rgb/c4k3", "10x10rgb/c3k5s2v", "11x11gray/c2k3s2",
                                  "9x9rgb/dw3s2", "8x8rgb/dw5v"])
def test_integer_convolution_equals_scipy_correlate(text):
    """Conv and dwconv accumulators equal scipy.signal.correlate of the integer arrays."""
    net, mean, std, images = setup(text, seed=2, n=6)
    qnet = quantize_network(net, mean, std, images)
    layer = qnet.layers[0]
    x = quantize_input(qnet, images)
    acc = accumulate(layer, x)
    op = layer.op
    top, bottom, left, right = op.pads
    xs = np.pad(x.astype(np.int64) - layer.in_zp, ((0, 0), (top, bottom), (left, right), (0, 0)))
    w = layer.weights.astype(np.int64)
    s = op.stride
    for i in range(x.shape[0]):
        for f in range(op.out_shape[2]):
            if layer.kind == "conv":  # SciPy cross-correlation over (h, w, c), 'valid'
                full = correlate(xs[i], w[..., f], mode="valid", method="direct")[..., 0]
            else:
                full = correlate(xs[i, ..., f], w[..., f], mode="valid", method="direct")
            want = full[::s, ::s][: op.out_shape[0], : op.out_shape[1]] + layer.bias[f]
            np.testing.assert_array_equal(acc[i, ..., f], want)


def test_rounding_division_matches_exact_rounding():
    """Average-pool division rounds half away from zero (exact fractions oracle)."""
    totals = np.arange(-600, 601)
    for count in (1, 2, 4, 9, 16, 49):
        want = []
        for t in totals:  # standard library fractions: round half away from zero
            x = Fraction(int(t), count)
            m = int(abs(x)) + (abs(x) - int(abs(x)) >= Fraction(1, 2))
            want.append(m if x >= 0 else -m)
        assert rounding_divide(totals, count).tolist() == want


def test_pools_on_int8():
    """Max pool is the window maximum; average pools keep scale and zero point."""
    net, mean, std, images = setup("9x9rgb/c4k3-p2-a2-gap", seed=3, n=5)
    qnet = quantize_network(net, mean, std, images)
    conv, maxpool, avgpool, gap = qnet.layers[:4]
    x = run_layer(conv, quantize_input(qnet, images))
    y = run_layer(maxpool, x)
    for i, j in ((0, 0), (3, 2), (1, 3)):  # plain loop reference; the ragged 9th row dropped
        np.testing.assert_array_equal(y[:, i, j], x[:, 2 * i:2 * i + 2, 2 * j:2 * j + 2].max(axis=(1, 2)))
    assert (maxpool.in_scale, maxpool.in_zp) == (maxpool.out_scale, maxpool.out_zp)
    z = run_layer(avgpool, y)
    block = y[:, 0:2, 2:4].astype(int).sum(axis=(1, 2))
    np.testing.assert_array_equal(z[:, 0, 1], rounding_divide(block, 4))
    g = run_layer(gap, z)
    np.testing.assert_array_equal(g, rounding_divide(z.astype(int).sum(axis=(1, 2)), 4))
    assert avgpool.out_scale == gap.out_scale == conv.out_scale


def test_relu_is_the_output_clamp():
    """After a ReLU the output never goes below the zero point (real 0)."""
    net, mean, std, images = setup("10x10rgb/c6k3-d5", seed=4)
    qnet = quantize_network(net, mean, std, images)
    conv = qnet.layers[0]
    assert conv.relu and conv.lo == max(conv.out_zp, -128)
    out = run_layer(conv, quantize_input(qnet, images))
    assert out.min() >= conv.out_zp
    assert not qnet.layers[-1].relu and qnet.layers[-1].lo == -128


def test_int8_logits_close_to_float():
    """Dequantised int8 logits stay within a few output steps of the float logits."""
    net, mean, std, images = setup("12x12rgb/c8k3-p2-c8k3-gap-d8", k=5, seed=5, n=200)
    qnet = quantize_network(net, mean, std, images[:100])
    q = int8_logits(qnet, images[100:])
    real = (q.astype(float) - qnet.logits_zp) * qnet.logits_scale
    x = (images[100:] / 255.0 - mean) / std
    want = net.forward(x.astype(np.float32))
    # each of 4 requantisations adds at most half a step; 8 steps is a loose bound
    assert np.abs(real - want).max() <= 8 * qnet.logits_scale


def test_bad_inputs_are_refused():
    """Float images, wrong shapes and bad normalisation get clear errors."""
    net, mean, std, images = setup("8x8rgb/c2k3")
    with pytest.raises(DataError, match="dtype float64.*pass uint8 images"):
        quantize_network(net, mean, std, images.astype(np.float64))
    with pytest.raises(DataError, match=r"shape \(64, 8, 8, 1\), expected \(n >= 1, 8, 8, 3\)"):
        quantize_network(net, mean, std, images[..., :1])
    with pytest.raises(InputError, match="mean has 2 values but the network reads 3"):
        quantize_network(net, mean[:2], std, images)
    with pytest.raises(InputError, match="std .* must be > 0"):
        quantize_network(net, mean, np.array([0.2, 0.0, 0.2]), images)
    qnet = quantize_network(net, mean, std, images)
    with pytest.raises(DataError, match="prepare them for the network's input"):
        int8_logits(qnet, images[:, :4])


def test_accumulator_overflow_is_refused():
    """A dense layer too wide for int32 accumulators is refused, naming the limit."""
    # 67,600 inputs > (2^31 - 1) // (255 * 127) = 66,311 (computed)
    net = Network.from_arch("260x260gray", 2)
    images = np.zeros((1, 260, 260, 1), np.uint8)
    with pytest.raises(InputError, match=r"67600 inputs per output can overflow an int32 "
                                         r"accumulator \(at most 66311 fit\)"):
        quantize_network(net, [0.5], [0.25], images)


def test_as_pixels_inverts_prepare_of_uint8():
    """Prepared uint8 images (p / 255 in float32) come back as the same pixels."""
    from tinyconv.quant import as_pixels

    raw = np.arange(256, dtype=np.uint8).reshape(1, 16, 16, 1)
    np.testing.assert_array_equal(as_pixels(raw.astype(np.float32) * np.float32(1 / 255)), raw)


def test_integer_matmul_is_exact_on_both_paths():
    """The float64-BLAS product equals NumPy's int64 product bit for bit; huge values take int64."""
    rng = np.random.default_rng(11)
    # int8-layer ranges: inputs minus zero point in [-255, 255], weights in [-127, 127].
    a = rng.integers(-255, 256, size=(37, 4608))
    b = rng.integers(-127, 128, size=(4608, 9))
    got = integer_matmul(a, b)
    assert got.dtype == np.int64
    np.testing.assert_array_equal(got, a @ b)  # NumPy int64 product: exact integer arithmetic
    # 9 terms of about 2**52 exceed 2**53 and the odd total needs 56 bits: float64
    # would round it, so the int64 path must run.
    big_a = np.full((2, 9), 2 ** 31 + 1, dtype=np.int64)
    big_b = np.full((9, 1), 2 ** 21 + 1, dtype=np.int64)
    want = 9 * (2 ** 31 + 1) * (2 ** 21 + 1)
    assert integer_matmul(big_a, big_b)[0, 0] == want
    assert int(round(float(big_a[0] @ big_b[:, 0].astype(float)))) != want  # what float64 gives


def test_integer_matmul_switches_to_int64_just_above_two_to_the_53():
    """At the 2**53 bound itself: one product needing 54 bits is exact, one just below is too."""
    # (2**27 + 1)(2**26 + 1) = 2**53 + 2**27 + 2**26 + 1, odd and above 2**53: float64
    # cannot hold it (IEEE 754 binary64, 53-bit significand), so int64 must compute it.
    a, b = np.array([[2 ** 27 + 1]]), np.array([[2 ** 26 + 1]])
    want = (2 ** 27 + 1) * (2 ** 26 + 1)  # Python integers: exact
    assert float(want) != want
    assert integer_matmul(a, b)[0, 0] == want
    # (2**26 - 1)(2**27 + 1) = 2**53 - 2**26 - 1 < 2**53: the float64 path is exact.
    a, b = np.array([[2 ** 26 - 1]]), np.array([[2 ** 27 + 1]])
    assert integer_matmul(a, b)[0, 0] == (2 ** 26 - 1) * (2 ** 27 + 1)
    # Terms below 2**53 whose sum crosses it: 3 * (2**52 + 1) is odd and needs 54 bits.
    a = np.full((1, 3), 2 ** 52 + 1, dtype=np.int64)
    b = np.ones((3, 1), dtype=np.int64)
    assert integer_matmul(a, b)[0, 0] == 3 * (2 ** 52 + 1)
