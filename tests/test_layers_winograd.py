"""Tests of the Winograd paths of the convolution layer: F(2x2, 3x3) and F(4x4, 3x3).

Outside references: numpy.correlate and scipy.signal.correlate2d (single
tiles through each algorithm's matrices), the loop references of
tinyconv.layers.reference (whole layers, forward and backward) and central
finite differences (gradients). tests/test_conv_algorithms.py compares whole
layers of every algorithm with scipy.signal.correlate.
"""

from __future__ import annotations

import importlib.util
from pathlib import Path

import numpy as np
import pytest
from scipy import signal

from helpers import conv_op, randn
from tinyconv.gradients import check_layer
from tinyconv.layers import build, reference
from tinyconv.layers.convalg import winograd_f4_unrolled as kw4u
from tinyconv.layers.convalg import winograd_f2 as kw
from tinyconv.layers.convalg import winograd_f4 as kw4
from tinyconv.layers.convalg import winograd
from tinyconv.layers.conv import Conv, pick_algorithm
from tinyconv.losses import softmax_cross_entropy
from tinyconv.network import Network

# (h, w, c_in, filters, valid): odd and even sizes (odd outputs need a partial
# last tile), same and valid padding, a 1 x 1 and a 2 x 2 output.
SHAPES = [
    (6, 6, 4, 3, False),
    (5, 7, 3, 2, False),
    (7, 5, 2, 5, True),
    (3, 3, 2, 2, True),
    (4, 4, 3, 2, True),
    (9, 8, 5, 4, False),
    (1, 1, 2, 3, False),
]


ALGORITHMS = ["winograd", "winograd4"]
# The generator of winograd_f4_unrolled.py, a development tool outside the package.
GENERATOR = Path(__file__).resolve().parents[1] / "devtools" / "gen_winograd_f4.py"


@pytest.fixture(scope="module")
def gen_f4():
    """The generator module, loaded from its file."""
    spec = importlib.util.spec_from_file_location("gen_winograd_f4", GENERATOR)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module
# The transform matrices of each algorithm (module, tile size).
MATRICES = [(kw, 4), (kw4, 6)]


def _layer(shape, seed=0, dtype=np.float64, relu=False, algorithm="winograd"):
    h, w, c, f, valid = shape
    op = conv_op(h, w, c, f, 3, 1, valid)
    layer = build(op, np.random.default_rng(seed), dtype)
    layer.params["b"][...] = randn((f,), seed + 7)
    layer.algorithm = algorithm
    layer.relu = relu
    return op, layer


@pytest.mark.parametrize("mod, alpha", MATRICES)
def test_one_dimensional_minimal_filter_equals_numpy_correlate(mod, alpha):
    """F(m, 3) in one dimension: A^T [(G g) * (B^T d)] is the m-output correlation of d with g."""
    rng = np.random.default_rng(0)
    for _ in range(20):
        d, g = rng.standard_normal(alpha), rng.standard_normal(3)
        got = mod.AT @ ((mod.G @ g) * (mod.BT @ d))
        # Reference: numpy.correlate, mode 'valid' (no kernel flip).
        np.testing.assert_allclose(got, np.correlate(d, g, mode="valid"), rtol=1e-12, atol=1e-14)


@pytest.mark.parametrize("mod, alpha", MATRICES)
def test_two_dimensional_tile_equals_scipy_correlate2d(mod, alpha):
    """One tile: A^T [(G g G^T) * (B^T d B)] A is scipy's valid 2-D correlation."""
    rng = np.random.default_rng(1)
    for _ in range(20):
        d, g = rng.standard_normal((alpha, alpha)), rng.standard_normal((3, 3))
        got = mod.AT @ ((mod.G @ g @ mod.G.T) * (mod.BT @ d @ mod.BT.T)) @ mod.AT.T
        np.testing.assert_allclose(got, signal.correlate2d(d, g, mode="valid"),
                                   rtol=1e-12, atol=1e-13)


@pytest.mark.parametrize("algorithm", ALGORITHMS)
@pytest.mark.parametrize("relu", [False, True])
@pytest.mark.parametrize("shape", SHAPES + [(13, 10, 3, 4, False), (10, 9, 2, 3, True)])
def test_forward_and_backward_match_loop_reference(shape, relu, algorithm):
    """Winograd forward, input, weight and bias gradients equal the loop reference (float64)."""
    op, layer = _layer(shape, seed=2, relu=relu, algorithm=algorithm)
    x = randn((3,) + op.in_shape, 3)
    y = layer.forward(x, training=True)
    ref = reference.conv_forward(x, layer.params["w"], layer.params["b"], 1, op.pads)
    if relu:
        ref = np.maximum(ref, 0.0)
    assert y.shape == (3,) + op.out_shape
    np.testing.assert_allclose(y, ref, rtol=1e-11, atol=1e-12)
    g = randn(y.shape, 4)
    gx = layer.backward(g)
    g_in = g * (ref > 0) if relu else g
    rgx, rgw, rgb = reference.conv_backward(g_in, x, layer.params["w"], 1, op.pads)
    np.testing.assert_allclose(gx, rgx, rtol=1e-11, atol=1e-12)
    np.testing.assert_allclose(layer.grads["w"], rgw, rtol=1e-11, atol=1e-12)
    np.testing.assert_allclose(layer.grads["b"], rgb, rtol=1e-11, atol=1e-12)


@pytest.mark.parametrize("algorithm", ALGORITHMS)
@pytest.mark.parametrize("shape", SHAPES[:4] + [(10, 9, 2, 3, False)])
def test_gradients_match_central_differences(shape, algorithm):
    """The transforms' adjoints are the true gradients: central differences agree (< 1e-6)."""
    op, layer = _layer(shape, algorithm=algorithm)
    # Outside check: central differences (Nocedal & Wright, section 8.1 [from memory]).
    rows = check_layer(layer, randn((2,) + op.in_shape, 5), seed=1, max_coords=None)
    assert [r.tensor for r in rows] == ["x", "w", "b"]
    for row in rows:
        assert row.passed and row.max_rel_error < 1e-6, row


@pytest.mark.parametrize("algorithm, tol", [("winograd", 2e-6), ("winograd4", 2e-5)])
def test_float32_agrees_with_im2col_to_float32_precision(algorithm, tol):
    """In float32 the algorithms differ only by rounding (16 x 16 x 32 -> 64, as in N3).

    F(4x4, 3x3)'s larger coefficients round about ten times more (common practice).
    """
    rng = np.random.default_rng(6)
    x = rng.standard_normal((4, 16, 16, 32)).astype(np.float32)
    layers = {}
    for alg in ("im2col", algorithm):
        layer = Conv(32, 64, 3, 1, (1, 1, 1, 1), rng=np.random.default_rng(7), relu=True)
        layer.params["b"][...] = 0.1
        layer.algorithm = alg
        layers[alg] = layer
    ys = {a: layer.forward(x, True) for a, layer in layers.items()}
    assert ys[algorithm].dtype == np.float32
    g = rng.standard_normal(ys["im2col"].shape).astype(np.float32)
    gxs = {a: layer.backward(g) for a, layer in layers.items()}
    scale = np.abs(ys["im2col"]).max()
    np.testing.assert_allclose(ys[algorithm], ys["im2col"], atol=tol * scale)
    np.testing.assert_allclose(gxs[algorithm], gxs["im2col"], atol=tol * np.abs(gxs["im2col"]).max())
    for key in ("w", "b"):
        ref = layers["im2col"].grads[key]
        np.testing.assert_allclose(layers[algorithm].grads[key], ref, atol=5 * tol * np.abs(ref).max())


@pytest.mark.parametrize("algorithm", ALGORITHMS)
def test_reused_buffers_follow_the_batch_size_and_keep_earlier_outputs(algorithm):
    """A smaller last batch reallocates the tile buffers; earlier outputs are untouched."""
    op, layer = _layer((6, 6, 4, 3, False), algorithm=algorithm)
    x1, x2 = randn((5,) + op.in_shape, 1), randn((2,) + op.in_shape, 2)
    y1 = layer.forward(x1, training=True)
    y1_copy = y1.copy()
    layer.backward(randn(y1.shape, 3))
    y2 = layer.forward(x2, training=True)
    np.testing.assert_array_equal(y1, y1_copy)
    g = randn(y2.shape, 4)
    gx = layer.backward(g)
    rgx, rgw, _ = reference.conv_backward(g, x2, layer.params["w"], 1, op.pads)
    np.testing.assert_allclose(gx, rgx, rtol=1e-11, atol=1e-12)
    np.testing.assert_allclose(layer.grads["w"], rgw, rtol=1e-11, atol=1e-12)


@pytest.mark.parametrize("algorithm", ALGORITHMS)
def test_skipped_input_gradient_keeps_parameter_gradients(algorithm):
    """With input_grad False the backward returns None and the same weight gradient."""
    op, layer = _layer((5, 7, 3, 2, False), algorithm=algorithm)
    x = randn((2,) + op.in_shape, 1)
    g = randn((2,) + op.out_shape, 2)
    layer.forward(x, training=True)
    layer.backward(g)
    full = layer.grads["w"].copy()
    layer.input_grad = False
    layer.forward(x, training=True)
    assert layer.backward(g) is None
    np.testing.assert_array_equal(layer.grads["w"], full)


def test_inference_keeps_no_arrays():
    """A forward with training=False keeps no buffers or tiles."""
    op, layer = _layer(SHAPES[0])
    layer.forward(randn((2,) + op.in_shape, 1), training=False)
    assert not layer._buffers and layer._wino is None


def test_network_trained_with_either_algorithm_gives_the_same_gradients():
    """A whole network (auto picks F(4x4) and F(2x2) for its c16k3 layers) matches im2col in float64."""
    text = "8x8rgb/c16k3-c16k3-p2-c16k3-bn-gap"
    nets = [Network.from_arch(text, 3, seed=1, dtype=np.float64) for _ in range(2)]
    chosen = [pick_algorithm(l.kernel, l.stride, l.c_in, l.filters, True, op.out_shape[0])
              for l, op in zip(nets[0].layers, nets[0].ops) if isinstance(l, Conv)]
    assert chosen == ["im2col", "winograd4", "winograd"]  # c_in 3; 16 on 8 x 8; 16 on 4 x 4
    for layer in nets[1].layers:
        if isinstance(layer, Conv):
            layer.algorithm = "im2col"
    x, labels = randn((6, 8, 8, 3), 2), np.arange(6) % 3
    grads = []
    for net in nets:
        logits = net.forward(x, training=True)
        _, g = softmax_cross_entropy(logits, labels)
        net.backward(g)
        grads.append({name: a.copy() for name, a in net.grad_list()})
    ran = [l._wino.variant.name if l._wino is not None else "im2col"
           for l in nets[0].layers if isinstance(l, Conv)]
    assert ran == chosen  # the auto layers ran what pick_algorithm says
    assert grads[0].keys() == grads[1].keys()
    for name in grads[0]:
        np.testing.assert_allclose(grads[0][name], grads[1][name], rtol=1e-9, atol=1e-12,
                                   err_msg=name)


def test_algorithm_choice_and_bad_settings():
    """auto follows the measured thresholds; a bad name or shape is refused with the layer named."""
    assert pick_algorithm(3, 1, 32, 64, False) == "winograd"
    assert pick_algorithm(3, 1, 32, 64, True) == "winograd4"
    assert pick_algorithm(3, 1, 16, 8, True, 8) == "winograd4"
    assert pick_algorithm(3, 1, 16, 8, True, 4) == "winograd"   # 4 x 4 maps: F(2x2)
    assert pick_algorithm(3, 1, 8, 16, True) == "im2col"
    assert pick_algorithm(3, 1, 8, 16, False) == "im2col"
    assert pick_algorithm(3, 1, 3, 32, True) == "im2col"
    assert pick_algorithm(3, 2, 32, 32, True) == "im2col"
    assert pick_algorithm(5, 1, 32, 32, True) == "im2col"
    assert pick_algorithm(3, 1, 32, 7, True) == "im2col"   # fewer than 8 filters
    assert pick_algorithm(3, 1, 32, 7, False) == "im2col"
    layer = build(conv_op(6, 6, 2, 2, 5, 1), np.random.default_rng(0), np.float64)
    for name in ALGORITHMS:
        layer.algorithm = name
        with pytest.raises(ValueError, match="3 x 3 kernel of stride 1"):
            layer.forward(randn((1, 6, 6, 2)))
    layer.algorithm = "fast"
    with pytest.raises(ValueError, match="algorithm must be one of"):
        layer.forward(randn((1, 6, 6, 2)))


def test_plane_buffer_planes_are_contiguous_and_not_4k_apart():
    """Each of the 16 planes is C-contiguous; the plane stride avoids multiples of 4 KiB."""
    for tiles, channels in ((64, 32), (4096, 64), (7, 3)):
        a = kw.plane_buffer(tiles, channels, np.float32)
        assert a.shape == (16, tiles, channels)
        assert a[3].flags.c_contiguous
        assert a.strides[0] % 4096 != 0 and a.strides[0] >= tiles * channels * 4
        a[...] = np.arange(a.size, dtype=np.float32).reshape(a.shape)  # no overlap between planes
        assert np.array_equal(a.reshape(-1), np.arange(a.size, dtype=np.float32))


@pytest.mark.parametrize("algorithm", ALGORITHMS)
@pytest.mark.parametrize("chunk_bytes", [1, 16000, 1 << 30])
def test_chunks_of_images_give_the_same_results(monkeypatch, chunk_bytes, algorithm):
    """One image per chunk, ragged chunks (2 + 2 + 1 images) and the whole batch agree with the reference."""
    monkeypatch.setattr(winograd, "CHUNK_BYTES", chunk_bytes)
    op, layer = _layer((7, 6, 4, 5, False), seed=8, relu=True, algorithm=algorithm)
    x = randn((5,) + op.in_shape, 9)
    if algorithm == "winograd":
        per = 4 * 3  # tiles per image: ceil(7 / 2) x ceil(6 / 2)
        assert winograd.chunk_images(per, 5, 8, 5) == {1: 1, 16000: 2, 1 << 30: 5}[chunk_bytes]
    y = layer.forward(x, training=True)
    ref = np.maximum(reference.conv_forward(x, layer.params["w"], layer.params["b"], 1, op.pads), 0)
    np.testing.assert_allclose(y, ref, rtol=1e-11, atol=1e-12)
    np.testing.assert_allclose(layer.forward(x), ref, rtol=1e-11, atol=1e-12)  # inference chunks too
    g = randn(y.shape, 10)
    gx = layer.backward(g)
    rgx, rgw, rgb = reference.conv_backward(g * (ref > 0), x, layer.params["w"], 1, op.pads)
    np.testing.assert_allclose(gx, rgx, rtol=1e-11, atol=1e-12)
    np.testing.assert_allclose(layer.grads["w"], rgw, rtol=1e-11, atol=1e-12)
    np.testing.assert_allclose(layer.grads["b"], rgb, rtol=1e-11, atol=1e-12)


def test_generated_kernels_are_what_the_generator_writes(gen_f4):
    """winograd_f4_unrolled.py is exactly devtools/gen_winograd_f4.py's output (regenerate after changing the matrices)."""
    path = kw4u.__file__
    with open(path, encoding="utf-8") as fh:
        assert fh.read() == gen_f4.source(), \
            "run: python devtools/gen_winograd_f4.py > tinyconv/layers/convalg/winograd_f4_unrolled.py"


def test_generated_combination_reads_the_matrix_row(gen_f4):
    """One generated expression: row 1 of B^T is (0, -4, -4, 1, 1, 0)."""
    assert gen_f4.combo(kw4.BT[1], ["a", "b", "c", "d", "e", "f"]) == "-k4 * b - k4 * c + d + e"
    with pytest.raises(ValueError, match="not in CONSTANTS"):
        gen_f4.combo([3.0], ["a"])


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_unrolled_kernels_equal_the_loop_kernels(dtype):
    """The straight-line F(4x4, 3x3) transforms give the loop kernels' values, edge tiles included."""
    rng = np.random.default_rng(12)
    n, c, f = 2, 5, 3
    oh, ow = 9, 8                       # 3 x 2 tiles, the last row of tiles partial
    th, tw = kw4.tiles(oh, ow)
    xp = rng.standard_normal((n, 4 * th + 2, 4 * tw + 2, c)).astype(dtype)
    k = np.array(kw4u.CONSTANTS, dtype=dtype)
    nz = {name: kw4.nonzeros(p, dtype) for name, p in
          (("BT", kw4.BT), ("B", kw4.BT.T), ("AT", kw4.AT), ("A", kw4.AT.T))}
    t = n * th * tw
    tol = dict(rtol=1e-5 if dtype == np.float32 else 1e-13, atol=1e-5 if dtype == np.float32 else 1e-13)
    v1, v2 = np.empty((36, t, c), dtype), np.empty((36, t, c), dtype)
    kw4.input_transform(xp, *nz["BT"], th, tw, v1)
    kw4u.input_transform(xp, k, th, tw, v2)
    np.testing.assert_allclose(v2, v1, **tol)
    m = rng.standard_normal((36, t, f)).astype(dtype)
    bias = rng.standard_normal(f).astype(dtype)
    for relu in (False, True):
        y1, y2 = np.empty((n, oh, ow, f), dtype), np.empty((n, oh, ow, f), dtype)
        kw4.output_transform(m, *nz["AT"], bias, relu, th, tw, y1)
        kw4u.output_transform(m, k, *nz["AT"], bias, relu, th, tw, y2)
        np.testing.assert_allclose(y2, y1, **tol)
    dy = rng.standard_normal((n, oh, ow, f)).astype(dtype)
    d1, d2 = np.empty((36, t, f), dtype), np.empty((36, t, f), dtype)
    kw4.output_transform_adjoint(dy, *nz["A"], th, tw, d1)
    kw4u.output_transform_adjoint(dy, k, *nz["A"], th, tw, d2)
    np.testing.assert_allclose(d2, d1, **tol)
    g1, g2 = np.empty_like(xp), np.empty_like(xp)
    kw4.input_transform_adjoint(v1, *nz["B"], th, tw, g1)
    kw4u.input_transform_adjoint(v1, k, th, tw, g2)
    np.testing.assert_allclose(g2, g1, **tol)
