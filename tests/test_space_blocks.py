"""Search spaces with residual blocks ([blocks]) and stacked colour modes.

Outside source: the standard library's :mod:`tomllib` reads the files; the
expected candidate lists are worked out by hand.
"""

from __future__ import annotations

import pytest

from search.space import SpaceError, enumerate_space, load_space
from tinyconv.arch import parse

BLOCKS = """
[input]
specs = ["16x16gray"]
[stages]
count = [1]
filters = [8]
[head]
kind = ["gap"]
[blocks]
count = [0, 1]
kind = ["bottleneck", "pair"]
expansion = [2, 3]
"""


def texts(space_text: str) -> list[str]:
    return [str(a) for a in enumerate_space(load_space(space_text))]


def test_blocks_enumerate_in_the_documented_order():
    """No block, then one bottleneck per expansion, then one pair (the expansion does
    not change a pair, so it comes once)."""
    assert texts(BLOCKS) == [
        "16x16gray/c8k3-p2-gap",
        "16x16gray/c8k3-[c16k1-dw3-c8k1]-p2-gap",
        "16x16gray/c8k3-[c24k1-dw3-c8k1]-p2-gap",
        "16x16gray/c8k3-[c8k3-c8k3]-p2-gap",
    ]
    assert load_space(BLOCKS).size_bound() >= 4


def test_blocks_per_stage_with_batch_norm_and_stride():
    """Counts per stage; bn inside the blocks; blocks after a strided stage's conv."""
    got = texts("""
[input]
specs = ["16x16gray"]
[stages]
count = [2]
filters = [4]
pool = ["stride"]
[options]
batch_norm = [true]
[blocks]
count = [[0], [2]]
kind = ["pair"]
""")
    assert got == ["16x16gray/c4k3s2-bn-c4k3s2-bn-[c4k3-bn-c4k3-bn]-[c4k3-bn-c4k3-bn]"]
    assert parse(got[0]) is not None


def test_stacked_modes_in_a_space():
    """modes may stack colour modes: each size in each (stacked) mode."""
    got = texts("""
[input]
sizes = [8]
modes = ["rgb", "rgb+hsv"]
""")
    assert got == ["8x8rgb", "8x8rgb+hsv"]


def test_every_candidate_of_the_shipped_blocks_space_round_trips():
    """builtin:blocks holds plain chains, inverted bottlenecks and pairs, parsing back."""
    archs = enumerate_space(load_space("builtin:blocks"))
    names = [str(a) for a in archs]
    assert len(set(names)) == len(names) and all(parse(t) == a for t, a in zip(names, archs))
    assert any("[" not in t for t in names) and any("dw3-c" in t and "[" in t for t in names)
    assert any(t.count("[") == 2 for t in names)


@pytest.mark.parametrize("text, message", [
    ("[input]\nspecs = ['8x8gray']\n[blocks]\nkind = ['wide']",
     r"blocks.kind = \['wide'\]: 'wide' is not one of bottleneck, pair"),
    ("[input]\nspecs = ['8x8gray']\n[blocks]\ncount = [9]",
     r"blocks.count = \[9\]: 9 is not a number of blocks 0..8"),
    ("[input]\nspecs = ['8x8gray']\n[blocks]\nexpansion = [0]",
     r"blocks.expansion = \[0\]: 0 is not an integer 1..16"),
    ("[input]\nspecs = ['8x8gray']\n[blocks]\nwidth = [2]",
     r"unknown key blocks.width; known keys in \[blocks\]: count, kind, expansion"),
    ("[input]\nsizes = [8]\nmodes = ['rgb+rgb']",
     r"input.modes = \['rgb\+rgb'\]: 'rgb\+rgb' is not a colour mode \(rgb, gray, ycc, "
     r"hsv\) or several joined by '\+'"),
])
def test_bad_block_tables_name_key_value_and_rule(text, message):
    """Each bad [blocks] value or stacked mode names the key, its value and the rule."""
    with pytest.raises(SpaceError, match=message):
        load_space(text)
