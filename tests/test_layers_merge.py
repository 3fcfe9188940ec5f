"""The residual addition and the channel stacking: fast against slow, and gradients.

Outside source: central differences (Nocedal & Wright, Numerical Optimization,
section 8.1 [from memory]) through :mod:`tinyconv.gradients`, on the layers
alone and on whole networks with blocks.
"""

from __future__ import annotations

import importlib

import numpy as np
import pytest

from helpers import randn
from tinyconv import gradients
from tinyconv.arch import parse_input
from tinyconv.cli import COMMANDS, main
from tinyconv.data.prepare import prepare
from tinyconv.layers import reference
from tinyconv.layers.merge import Add, Stack, add_forward, stack_backward, stack_forward
from tinyconv.network import Network
from tinyconv.ops import sources

# The gradient-check command, found by what it does (its help text).
GRAD_COMMAND, (GRAD_MODULE, _) = next((name, entry) for name, entry in COMMANDS.items()
                                      if "gradient" in entry[1])
shift_away_from_kinks = importlib.import_module(
    f"tinyconv.commands.{GRAD_MODULE}").shift_away_from_kinks


@pytest.mark.parametrize("seed", range(4))
def test_fast_joins_equal_the_loop_references(seed):
    """add, stack and its backward equal the loops on seeded random shapes."""
    rng = np.random.default_rng(seed)
    n, h, w = (int(v) for v in rng.integers(1, 5, 3))
    c = int(rng.integers(1, 6))
    x, skip = randn((n, h, w, c), seed), randn((n, h, w, c), seed + 10)
    np.testing.assert_array_equal(add_forward(x, skip), reference.residual_add(x, skip))
    channels = [int(v) for v in rng.integers(1, 4, int(rng.integers(1, 4)))]
    parts = [randn((n, h, w, k), seed + 20 + i) for i, k in enumerate(channels)]
    np.testing.assert_array_equal(stack_forward(parts), reference.stack_channels(parts))
    g = randn((n, h, w, sum(channels)), seed + 30)
    for got, want in zip(stack_backward(g, channels), reference.split_channels(g, channels)):
        np.testing.assert_array_equal(got, want)


def test_joins_pass_the_finite_difference_check():
    """The addition's and the stacking's input gradients match central differences."""
    pair = [randn((2, 3, 3, 4), 1), randn((2, 3, 3, 4), 2)]
    rows = gradients.check_joining(Add(), pair)
    assert [r.tensor for r in rows] == ["x0", "x1"] and gradients.all_passed(rows)
    parts = [randn((2, 3, 3, 3), 3), randn((2, 3, 3, 1), 4)]
    assert gradients.all_passed(gradients.check_joining(Stack([3, 1]), parts))


class _WrongAdd(Add):
    """An addition whose skip gradient is doubled: the check must catch it."""

    def backward(self, grad_out):
        return grad_out, 2 * grad_out


def test_a_wrong_addition_gradient_fails_the_check():
    """The check is real: a doubled skip gradient fails row x1 and only it."""
    rows = gradients.check_joining(_WrongAdd(), [randn((1, 2, 2, 2), 1), randn((1, 2, 2, 2), 2)])
    assert [r.passed for r in rows] == [True, False]


def test_shapes_that_do_not_join_are_refused():
    """Adding maps of two shapes, or stacking maps of two sizes, names both shapes."""
    with pytest.raises(ValueError, match=r"residual addition of shapes \(1, 2, 2, 3\) and "
                                         r"\(1, 2, 2, 4\)"):
        add_forward(np.zeros((1, 2, 2, 3)), np.zeros((1, 2, 2, 4)))
    with pytest.raises(ValueError, match=r"stacking maps of shapes \(1, 2, 2, 3\) and "
                                         r"\(1, 3, 2, 1\): all but the channel axis"):
        stack_forward([np.zeros((1, 2, 2, 3)), np.zeros((1, 3, 2, 1))])


def _graph_walk(net: Network, x: np.ndarray, g: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The slow twin of the network's passes: every layer on its own, outputs and
    gradients kept per op index and summed where a tensor has two readers."""
    reads = sources(net.ops)
    outs = {-1: x}
    for i, layer in enumerate(net.layers):
        ins = [outs[j] for j in reads[i]]
        outs[i] = (layer.forward_all(ins, True) if len(ins) == 2
                   else layer.forward(ins[0], True))
    grads = {len(net.layers) - 1: g}
    for i in range(len(net.layers) - 1, -1, -1):
        back = net.layers[i].backward(grads.pop(i))
        for j, part in zip(reads[i], back if len(reads[i]) == 2 else (back,)):
            grads[j] = grads[j] + part if j in grads else part
    return outs[len(net.layers) - 1], grads[-1]


BLOCK_NETS = [
    "12x12rgb/c4k3s2-[c8k1-bn-dw3-bn-c4k1-bn]-p2-[c4k3-c4k3]-gap",
    "8x8gray/[c1k3]-c4k3-p2-[c8k1-dw3-c4k1]-d5",
    "10x10rgb/c4k3-[c4k3]-p2-[x30]-gap-[d4-d4]",
]


@pytest.mark.parametrize("text", BLOCK_NETS)
def test_network_passes_equal_the_plain_graph_walk(text):
    """Fused forward/backward with blocks give the plain walk's logits and gradients."""
    fast = Network.from_arch(text, 3, seed=4, dtype=np.float64)
    slow = Network.from_arch(text, 3, seed=4, dtype=np.float64)
    for (_, a), (_, b) in zip(fast.param_list(), slow.param_list()):
        a[...] = b[...] = randn(a.shape, a.size) * 0.5
    for layer in fast.layers + slow.layers:
        if hasattr(layer, "hold_mask"):
            layer.rate = 0.0  # dropout off: the two networks draw no masks
    x = randn((3,) + fast.arch.input.shape, 1)
    g = randn((3, 3), 2)
    logits, grad_x = _graph_walk(slow, x, g)
    np.testing.assert_allclose(fast.forward(x, training=True), logits, rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(fast.backward(g), grad_x, rtol=1e-12, atol=1e-12)
    for (name, a), (_, b) in zip(fast.grad_list(), slow.grad_list()):
        np.testing.assert_allclose(a, b, rtol=1e-12, atol=1e-12, err_msg=name)


@pytest.mark.parametrize("text", BLOCK_NETS[:2])
def test_networks_with_blocks_pass_the_gradient_check(text):
    """Every tensor of a network with blocks (stride, pooling around; bn inside) passes."""
    net = Network.from_arch(text, 3, seed=1, dtype=np.float64)
    rng = np.random.default_rng(2)
    shift_away_from_kinks(net, rng)
    x = rng.standard_normal((3,) + net.arch.input.shape)
    rows = gradients.check_network(net, x, np.array([0, 1, 2]), max_coords=96)
    assert gradients.all_passed(rows), [r for r in rows if not r.passed]


def test_training_input_gradient_skip_keeps_blocks_right():
    """With input_grad=False the parameter gradients are those of the full backward,
    also when a block starts at the image."""
    text = "8x8gray/[c1k3-c1k3]-c4k3-d3"
    a = Network.from_arch(text, 3, seed=2, dtype=np.float64)
    b = Network.from_arch(text, 3, seed=2, dtype=np.float64)
    x, g = randn((2, 8, 8, 1), 3), randn((2, 3), 4)
    a.forward(x, training=True)
    b.forward(x, training=True)
    assert a.backward(g, input_grad=False) is None
    b.backward(g)
    for (name, ga), (_, gb) in zip(a.grad_list(), b.grad_list()):
        np.testing.assert_allclose(ga, gb, rtol=1e-12, err_msg=name)


def test_gradient_command_checks_blocks_and_stacked_modes(capsys):
    """The gradient-check command prints rows for each colour mode and each addition,
    and passes."""
    assert main([GRAD_COMMAND, "8x8rgb+hsv/c4k3-[c8k1-bn-dw3-bn-c4k1-bn]-gap",
                 "--classes", "3"]) == 0
    lines = capsys.readouterr().out.splitlines()
    rows = {tuple(line.split()[:2]) for line in lines if "pass" in line.split()}
    assert {("input:rgb", "x"), ("input:hsv", "x")} <= rows
    add = [op for op in Network.from_arch("8x8rgb+hsv/c4k3-[c8k1-bn-dw3-bn-c4k1-bn]-gap",
                                          3).ops if op.kind == "add"]
    assert len(add) == 1
    name = next(r[0] for r in rows if r[0].endswith(add[0].name))
    assert {(name, "x0"), (name, "x1")} <= rows
    assert lines[-1] == "all 21 tensors pass"


def test_prepare_stacks_modes_in_order():
    """A stacked input is each mode's conversion, side by side in the text's order."""
    images = np.random.default_rng(0).integers(0, 256, (2, 8, 8, 3)).astype(np.uint8)
    both = prepare(images, parse_input("4x4hsv+gray"))
    assert both.shape == (2, 4, 4, 4)
    np.testing.assert_array_equal(both[..., :3], prepare(images, parse_input("4x4hsv")))
    np.testing.assert_array_equal(both[..., 3:], prepare(images, parse_input("4x4gray")))
