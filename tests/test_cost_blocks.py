"""Peak activation memory from live ranges: residual blocks hold their input.

Outside reference: the peak of a network is the largest, over its steps, of
the memory of the tensors alive together (a tensor lives from the step that
writes it to the last that reads it) plus the step's scratch (common practice;
for a chain this is Liberis & Lane 2019's input + output rule [from memory]).
The test walks the live ranges itself (``helpers.walk_peak``) and checks a
worked example computed by hand.
"""

from __future__ import annotations

import pytest
from hypothesis import given, settings

from helpers import walk_peak
from test_arch_blocks import block_texts
from tinyconv.arch import expand, parse
from tinyconv.cost import cost_of, scratch_bytes, totals_of

BLOCK_NETS = [
    "32x32rgb/c16k3-p2-[c48k1-dw3-c16k1]-[c48k1-dw3-c16k1]-p2-gap",
    "16x16gray/[c1k3]-c8k3s2-[c8k3-bn-c8k3-bn]-p2-d10",
    "20x20rgb+hsv/c12k3-p2-[c36k1-bn-dw5-bn-c12k1-bn]-a2-gap-[d12-d12]",
    "12x12ycc/c6k3-[x20]-[c6k1]-p3",
]


def test_worked_example_of_a_block():
    """8x8gray/c4k3-[c8k1-dw3-c4k1], 3 classes (computed by hand): input 64 B; c4k3
    64 + 256 + 48 scratch (two patches of 9 values padded to 12); c8k1 256 + 512 + 16; dw3 256 + 512 + 512 = 1,280 (the
    peak: the block's input stays alive); c4k1 256 + 512 + 256 + 32; add 3 x 256."""
    cost = cost_of("8x8gray/c4k3-[c8k1-dw3-c4k1]", 3)
    got = [(r.name, r.live_elements + r.scratch_bytes) for r in cost.rows
           if r.live_elements]
    assert got == [("input", 64), ("1:c4k3", 368), ("2:c8k1", 784), ("3:dw3", 1_280),
                   ("4:c4k1", 1_056), ("2:[c8k1-dw3-c4k1]", 768), ("head:dense", 259)]
    assert cost.peak_int8_bytes == 1_280 and cost.peak_op == "3:dw3"
    assert cost.peak_float32_bytes == 4 * 1_280
    dw = next(r for r in cost.rows if r.name == "3:dw3")
    assert dw.alive == ("1:c4k3", "2:c8k1", "3:dw3")


@pytest.mark.parametrize("text", BLOCK_NETS)
def test_peak_equals_an_independent_walk_of_the_live_ranges(text):
    """cost_of's int8 and float32 peaks equal the test's own live-range walk."""
    ops = expand(parse(text), 5)
    cost = cost_of(text, 5)
    shape = parse(text).input.shape
    assert cost.peak_int8_bytes == walk_peak(ops, shape, scratch_bytes)
    assert cost.peak_elements == walk_peak(ops, shape)
    assert cost.peak_float32_bytes == 4 * walk_peak(ops, shape)


@settings(max_examples=60, deadline=None)
@given(block_texts())
def test_totals_of_equals_cost_of_with_blocks(text):
    """The fast per-layer totals equal cost_of (peak, params, MACs, flash, exportable)
    and the independent walk on generated texts with blocks."""
    full, light = cost_of(text, 4), totals_of(text, 4)
    assert (light.params, light.macs, light.flash_bytes, light.peak_int8_bytes,
            light.exportable) == (full.params, full.macs, full.flash_bytes,
                                  full.peak_int8_bytes, full.exportable)
    assert full.peak_int8_bytes == walk_peak(expand(parse(text), 4), parse(text).input.shape,
                                             scratch_bytes)


def test_a_block_costs_more_memory_than_the_same_chain():
    """The same layers without the brackets never need more memory: the block's
    input is what the addition adds."""
    chain, block = "16x16gray/c8k3-c16k1-dw3-c8k1", "16x16gray/c8k3-[c16k1-dw3-c8k1]"
    assert cost_of(block, 3).peak_int8_bytes > cost_of(chain, 3).peak_int8_bytes
    assert cost_of(block, 3).params == cost_of(chain, 3).params


def test_batch_norm_after_a_block_is_not_exportable():
    """A bn after a block follows an addition, not a weighted layer: not foldable."""
    assert not cost_of("8x8gray/c4k3-[c4k3]-bn", 2).exportable
    assert not totals_of("8x8gray/c4k3-[c4k3]-bn", 2).exportable
    assert cost_of("8x8gray/c4k3-[c4k3-bn]", 2).exportable
