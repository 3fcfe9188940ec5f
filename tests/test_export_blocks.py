"""Residual blocks in int8 and C: the addition's fixed point, the buffer plan, bit-exactness.

Outside references: the host C compiler (gcc) builds the generated C, whose
logits must equal the NumPy integer reference bit for bit; the addition's
integer result is checked against the real-valued formula of Jacob et al.
(CVPR 2018: rescale both inputs to a common scale, add, requantise), computed
in float64; the peak against the test's own walk of the live ranges.
"""

from __future__ import annotations

import shutil

import numpy as np
import pytest
from hypothesis import given, settings

from helpers import walk_peak
from test_arch_blocks import block_texts
from test_export_c import build, random_setup
from tinyconv.arch import expand, parse
from tinyconv.cost import cost_of, scratch_bytes
from tinyconv.export.placement import overlaps, plan_buffer
from tinyconv.export.c_writer import generate_c
from tinyconv.quant import quantize_network
from tinyconv.quant.integer import int8_outputs
from tinyconv.quant.residual import add_integer, add_multipliers

# Together: inverted bottlenecks and plain residual pairs, batch norm inside,
# stride and pooling around, a block on the image itself, a block of in-place
# layers only, blocks back to back, a block over vectors, stacked colour modes.
BLOCK_NETS = [
    ("32x32rgb/c16k3-p2-[c48k1-dw3-c16k1]-[c48k1-dw3-c16k1]-p2-gap", 8),
    ("16x16rgb/c8k3s2-[c16k1-bn-dw3-bn-c8k1-bn]-p2-[c8k3-c8k3]-gap", 5),
    ("12x12gray/[c1k3]-c6k3-[x20]-[c12k1-dw5-c6k1]-a2-d10", 4),
    ("14x14rgb+hsv/c8k3-[c8k3-bn-c8k3-bn]-p2-gap-[d8-d8]", 3),
    ("20x20ycc/c6k5s2v-[c18k1-dw3-c6k1]-p2-[c6k3]-d7", 6),
]


def test_addition_worked_examples():
    """Equal scales add the differences exactly; 0.02 x 100 + 0.05 x -30 = 0.5 is 5 steps
    of 0.1 (computed by hand)."""
    m, n = add_multipliers(0.1, 0.1, 0.1)
    a = np.array([10, -20, 100, 127], np.int8)
    b = np.array([5, 7, 100, -128], np.int8)
    got = add_integer(a, 3, b, -4, m, n, 1)
    np.testing.assert_array_equal(got, np.clip((a.astype(int) - 3) + (b.astype(int) + 4) + 1,
                                               -128, 127))
    m, n = add_multipliers(0.02, 0.05, 0.1)
    assert add_integer(np.array([100], np.int8), 0, np.array([-30], np.int8), 0, m, n,
                       3)[0] == 3 + 5


def test_addition_equals_the_real_formula_rounded():
    """On random scales and values the integers equal round((S_a d_a + S_b d_b) / S_y) + Z_y
    clamped (Jacob et al. 2018's real-valued form, in float64), away from exact halves."""
    rng = np.random.default_rng(0)
    for _ in range(100):
        sa, sb, sy = rng.uniform(0.002, 0.2, 3)
        za, zb, zy = (int(v) for v in rng.integers(-128, 128, 3))
        a = rng.integers(-128, 128, 500).astype(np.int8)
        b = rng.integers(-128, 128, 500).astype(np.int8)
        m, n = add_multipliers(sa, sb, sy)
        real = (sa * (a.astype(float) - za) + sb * (b.astype(float) - zb)) / sy
        away = np.abs(real - np.floor(real) - 0.5) > 1e-4  # not within rounding of a half
        want = np.clip(np.floor(real + 0.5) + zy, -128, 127)
        got = add_integer(a, za, b, zb, m, n, zy)
        np.testing.assert_array_equal(got[away], want[away])
        assert np.abs(got.astype(float) - want).max() <= 1


def test_addition_refuses_a_zero_scale():
    """A scale of 0 has no multiplier: named, with its value."""
    with pytest.raises(ValueError, match="the output scale must be finite and > 0, got 0.0"):
        add_multipliers(0.1, 0.1, 0.0)


def _alive_offsets(qnet, plan) -> list[list[tuple[int, int]]]:
    """Per layer, the [start, end) of each tensor alive and of the scratch, from the
    plan's offsets and the test's own live ranges (tensor t written by layer t - 1)."""
    n = len(qnet.layers)
    last = list(range(-1, n))
    for j, layer in enumerate(qnet.layers):
        for t in [j] + ([layer.skip + 1] if layer.skip is not None else []):
            last[t] = max(last[t], j)
    out = []
    for j in range(n):
        spans = [(p.offset, p.offset + p.size) for t, p in enumerate(plan.tensors)
                 if t - 1 <= j <= last[t]]
        step = plan.steps[j]
        if step.scratch_bytes:
            spans.append((step.scratch, step.scratch + step.scratch_bytes))
        out.append(spans)
    return out


@pytest.mark.parametrize("text, k", BLOCK_NETS)
def test_buffer_is_the_peak_and_nothing_alive_overlaps(text, k):
    """Plan size = cost model's int8 peak = the test's live-range walk; no two things
    alive at one step share a byte, and all lie inside the buffer."""
    net, mean, std, images = random_setup(text, k, seed=len(text))
    qnet = quantize_network(net, mean, std, images[:32])
    plan = plan_buffer(qnet)
    peak = walk_peak(expand(parse(text), k), parse(text).input.shape, scratch_bytes)
    assert plan.size == cost_of(text, k).peak_int8_bytes == peak
    assert overlaps(plan) == []
    for j, spans in enumerate(_alive_offsets(qnet, plan)):
        spans.sort()
        assert spans[0][0] >= 0 and spans[-1][1] <= plan.size, j
        assert all(a[1] <= b[0] for a, b in zip(spans, spans[1:])), (j, spans)


@settings(max_examples=25, deadline=None)
@given(block_texts())
def test_plans_of_generated_block_networks_are_sound(text):
    """On generated texts with blocks the plan is the peak and nothing alive overlaps."""
    net, mean, std, images = random_setup(text, 3, seed=1)
    plan = plan_buffer(quantize_network(net, mean, std, images[:4], rounding="nearest"))
    assert plan.size == cost_of(text, 3).peak_int8_bytes
    assert overlaps(plan) == []


def test_a_broken_plan_is_caught():
    """The overlap check is real: moving a block's input onto its last output is reported."""
    net, mean, std, images = random_setup(BLOCK_NETS[0][0], 8, seed=2)
    plan = plan_buffer(quantize_network(net, mean, std, images[:16]))
    held = next(t for t in plan.tensors if t.name == "2:p2")
    last = next(t for t in plan.tensors if t.name == "5:c16k1")
    moved = plan.__class__(plan.size, tuple(t if t is not held else t.__class__(
        t.name, t.producer, t.last_read, last.offset, t.size) for t in plan.tensors),
        plan.steps)
    assert any("2:p2" in p and "5:c16k1" in p for p in overlaps(moved))


needs_gcc = pytest.mark.skipif(shutil.which("gcc") is None, reason="needs gcc")


@needs_gcc
@pytest.mark.parametrize("style", ["fast", "plain"])
@pytest.mark.parametrize("text, k", BLOCK_NETS)
def test_c_with_blocks_matches_the_integer_reference(tmp_path, text, k, style):
    """Host-gcc logits and classes equal the integer reference on 200 images; the fast
    style's constant arrays are the cost model's flash and its static buffer the int8
    peak; the plain style's arrays are the same less the fast style's extras (filters
    padded to a multiple of 4 values, 4 more bytes a channel for the rounding constant)."""
    net, mean, std, images = random_setup(text, k, seed=len(text))
    qnet = quantize_network(net, mean, std, images[:64])
    code = generate_c(qnet, "tcb", style=style)
    run, sizes = build(tmp_path, code)
    logits, best = run(images[100:], k)
    want, classes = int8_outputs(qnet, images[100:])
    np.testing.assert_array_equal(logits, want)
    np.testing.assert_array_equal(best, classes)
    # the one size printed that is not a constant array's is the static buffer's
    constants = {a.name for a in code.arrays}
    (static,) = [n for name, n in sizes.items() if name not in constants]
    flash = sum(n for name, n in sizes.items() if name in constants)
    assert flash == code.flash_bytes
    if style == "plain":
        extras = 0
        for layer in qnet.layers:
            if layer.weights is None:
                continue
            channels = np.asarray(layer.multiplier).size
            extras += 4 * channels
            if layer.kind == "conv":
                k_total = int(np.prod(layer.weights.shape[:3]))
                extras += channels * (-k_total % 4)
        flash += extras
    assert flash == cost_of(text, k).flash_bytes
    if style == "fast":
        assert static == cost_of(text, k).peak_int8_bytes == plan_buffer(qnet).size


def test_int8_with_blocks_follows_the_float_network():
    """The int8 logits of a block network stay within a few output steps of the float
    ones (the addition's rounding adds at most half a step)."""
    from tinyconv.quant.evaluate import float_logits

    net, mean, std, images = random_setup(BLOCK_NETS[1][0], 5, seed=3)
    qnet = quantize_network(net, mean, std, images[:100])
    want = float_logits(net, images[100:], mean, std)
    got = qnet.logits_scale * (int8_outputs(qnet, images[100:])[0].astype(float)
                               - qnet.logits_zp)
    assert np.abs(got - want).max() < 0.05 * np.abs(want).max() + 4 * qnet.logits_scale
