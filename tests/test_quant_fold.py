"""Batch-norm folding and the merge of ops into deployable steps."""

import numpy as np
import pytest

from helpers import randomise_biases_and_norms
from tinyconv.arch import ArchError
from tinyconv.cost import writes_buffer
from tinyconv.network import Network
from tinyconv.quant.floatref import run_steps
from tinyconv.quant.fold import fold_batch_norm, network_steps

FOLD_ARCHS = [
    "12x12rgb/c6k3-bn-p2-dw3-bn-c4k1-bn-gap-d8-bn",
    "10x10gray/c4k3s2v-bn-x20-a2-d6-bn-x50",
    "9x9rgb/dw3s2-bn-c5k3-bn",
]


def randomise(net: Network, seed: int) -> Network:
    """Give every bias and batch norm non-trivial values (a fresh net has 0, 1)."""
    return randomise_biases_and_norms(net, np.random.default_rng(seed), shift_sd=0.5,
                                      var_range=(0.2, 3.0), bias_sd=0.2)


def test_fold_formula_matches_definition():
    """bn(x w + b) equals x w' + b' for the folded pair."""
    # batch norm at inference: gamma (z - mean) / sqrt(var + eps) + beta (Ioffe & Szegedy 2015)
    rng = np.random.default_rng(0)
    x, w, b = rng.normal(size=(20, 7)), rng.normal(size=(7, 4)), rng.normal(size=4)
    gamma, beta = rng.uniform(0.5, 2, 4), rng.normal(size=4)
    mean, var, eps = rng.normal(size=4), rng.uniform(0.1, 2, 4), 1e-5
    want = gamma * (x @ w + b - mean) / np.sqrt(var + eps) + beta
    w2, b2 = fold_batch_norm(w, b, gamma, beta, mean, var, eps)
    np.testing.assert_allclose(x @ w2 + b2, want, rtol=1e-12, atol=1e-12)


@pytest.mark.parametrize("text", FOLD_ARCHS)
def test_folded_steps_equal_network_forward(text):
    """Folded steps reproduce the network's evaluation-mode logits to 1e-5."""
    h_w_c = Network.from_arch(text, 5).arch.input.shape
    x = np.random.default_rng(1).normal(size=(16, *h_w_c))
    for dtype, tol in ((np.float64, 1e-9), (np.float32, 1e-5)):
        net = randomise(Network.from_arch(text, 5, seed=2, dtype=dtype), seed=3)
        want = net.forward(x.astype(dtype)).astype(np.float64)
        got = run_steps(network_steps(net), x.astype(dtype))
        # relative to the size of the logits: folding is exact in real arithmetic
        assert np.abs(got - want).max() <= tol * max(1.0, np.abs(want).max())


@pytest.mark.parametrize("text", FOLD_ARCHS + ["8x8gray", "16x16rgb/x10-c4k3-p2-d3"])
def test_steps_cover_each_op_once(text):
    """Every op lands in exactly one step; steps are the cost model's buffer writers."""
    net = Network.from_arch(text, 3)
    steps = network_steps(net)
    covered = sorted(i for s in steps for i in s.covers)
    assert covered == list(range(len(net.ops)))
    assert [s.kind for s in steps] == [op.kind for op in net.ops if writes_buffer(op.kind)]
    assert all(s.relu == any(net.ops[i].kind == "relu" for i in s.covers) for s in steps)


@pytest.mark.parametrize("text, position, after", [
    ("8x8gray/c4k3-p2-bn", 3, "'p2'"),
    ("8x8gray/bn-c4k3", 1, "the input"),
    ("8x8gray/c4k3-x10-bn", 3, "'x10'"),
    ("8x8gray/c4k3-bn-bn", 3, "'bn'"),
    ("8x8gray/c4k3-gap-bn", 3, "'gap'"),
])
def test_unfoldable_batch_norm_refused(text, position, after):
    """A batch norm not right after conv/dwconv/dense is refused with position and fix."""
    net = Network.from_arch(text, 3)
    with pytest.raises(ArchError, match=rf"layer {position} 'bn' follows {after}.*move the "
                                        r"'bn' directly after a c/dw/d layer") as info:
        network_steps(net)
    assert info.value.position == position
