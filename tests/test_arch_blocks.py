"""Tests of residual blocks and stacked colour modes in the architecture text form.

Outside source: the ReLU rule inside a block is the "linear bottleneck" of
inverted bottlenecks (no ReLU after the narrowing 1x1 convolution nor after the
addition; common practice), checked op by op below. JSON through the standard
library's :mod:`json`.
"""

from __future__ import annotations

import json

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tinyconv.arch import (Arch, ArchError, Block, Conv, InputSpec, expand, from_dict, parse,
                           to_dict)
from tinyconv.ops import sources

BOTTLENECK = "32x32rgb/c16k3-p2-[c48k1-dw3-c16k1]-[c48k1-dw3-c16k1]-p2-gap"


@pytest.mark.parametrize("text", [
    BOTTLENECK, "32x32rgb+hsv/c8k3-p2", "8x8gray/[c1k3]", "16x16gray/c8k3-[c8k3-bn-c8k3-bn]",
    "16x16ycc+gray+hsv/c4k3s2-[dw3]-[x20]-gap-[d4-d4]", "12x12rgb/c6k3-[c12k1-bn-dw5-bn-c6k1]-a2",
])
def test_block_and_stacked_texts_round_trip(text):
    """Texts with blocks and stacked modes print back exactly, and so does their JSON."""
    arch = parse(text)
    assert str(arch) == text
    assert Arch.from_json(arch.to_json()) == arch
    assert from_dict(json.loads(arch.to_json())) == arch  # standard-library JSON


@st.composite
def block_texts(draw) -> str:
    """A valid text made of stages, each a convolution to f channels and 0-2 blocks
    that keep f channels (inverted bottlenecks or plain pairs), and pooling."""
    modes = draw(st.lists(st.sampled_from(["rgb", "gray", "ycc", "hsv"]), min_size=1,
                          max_size=3, unique=True))
    start = side = draw(st.integers(4, 24))
    tokens: list[str] = []
    for _ in range(draw(st.integers(1, 3))):
        f = draw(st.integers(1, 24))
        tokens.append(f"c{f}k{draw(st.sampled_from([1, 3]))}")
        for _ in range(draw(st.integers(0, 2))):
            bn = "-bn" if draw(st.booleans()) else ""
            if draw(st.booleans()):
                e = f * draw(st.integers(1, 4))
                inner = [f"c{e}k1{bn}", f"dw{draw(st.sampled_from([3, 5]))}{bn}", f"c{f}k1{bn}"]
            else:
                inner = [f"c{f}k3{bn}", f"c{f}k3{bn}"]
            tokens.append("[" + "-".join(inner) + "]")
        if side >= 2 and draw(st.booleans()):
            tokens.append("p2")
            side //= 2
    if draw(st.booleans()):
        tokens.append("gap")
    return f"{start}x{start}{'+'.join(modes)}/" + "-".join(tokens)


@settings(max_examples=150, deadline=None)
@given(block_texts())
def test_round_trip_property_with_blocks(text):
    """str(parse(t)) == t for generated texts with blocks, and every add reads two
    tensors of its own shape."""
    arch = parse(text)
    assert str(arch) == text
    assert from_dict(to_dict(arch)) == arch
    ops = expand(arch, 3)
    shapes = {-1: arch.input.shape} | {i: op.out_shape for i, op in enumerate(ops)}
    for i, (op, reads) in enumerate(zip(ops, sources(ops))):
        if op.kind == "add":
            assert [shapes[j] for j in reads] == [op.in_shape, op.in_shape]


def test_stacked_modes_add_their_channels():
    """rgb+hsv reads 6 channels, gray+ycc 4; the modes keep their order."""
    assert parse("32x32rgb+hsv").input.channels == 6
    spec = parse("8x8gray+ycc/c2k3").input
    assert spec == InputSpec(8, 8, "gray+ycc") and spec.modes == ("gray", "ycc")
    assert spec.shape == (8, 8, 4)
    assert expand(parse("8x8hsv+gray/c2k3"), 2)[0].in_shape == (8, 8, 4)


@pytest.mark.parametrize("text, message", [
    ("8x8rgb+rgb/c2k3", r"colour mode 'rgb' is stacked 2 times; stack each mode at most once, "
                        r"e.g. rgb$"),
    ("8x8rgb+lab/c2k3", r"unknown colour mode 'lab'; expected one of rgb, gray, ycc, hsv, or "
                        r"several joined by '\+'"),
    ("8x8rgb+", r"is not of the form"),
])
def test_bad_stacked_modes(text, message):
    """A repeated or unknown stacked mode is refused at position 0, naming it."""
    with pytest.raises(ArchError, match=message) as info:
        parse(text)
    assert info.value.position == 0


def test_relu_placement_in_an_inverted_bottleneck():
    """ReLU after the widening 1x1 and the depthwise conv, none after the narrowing 1x1
    nor after the addition; batch norm keeps the rule (conv, bn, ReLU)."""
    kinds = [(op.name, op.kind) for op in expand(parse(BOTTLENECK), 4)]
    assert kinds[3:9] == [("3:c48k1", "conv"), ("3:c48k1", "relu"), ("4:dw3", "dwconv"),
                          ("4:dw3", "relu"), ("5:c16k1", "conv"),
                          ("3:[c48k1-dw3-c16k1]", "add")]
    assert kinds[9] == ("6:c48k1", "conv")  # the second block starts without a ReLU between
    with_bn = [op.kind for op in expand(parse("8x8gray/c4k3-[c8k1-bn-dw3-bn-c4k1-bn]"), 2)]
    assert with_bn[:2] == ["conv", "relu"]
    assert with_bn[2:11] == ["conv", "bn", "relu", "dwconv", "bn", "relu", "conv", "bn", "add"]


def test_the_add_reaches_back_to_the_block_input():
    """An add reads the op before it and the op before its block (-1: the image)."""
    ops = expand(parse("8x8gray/[c1k3-c1k3]-c4k3-[c4k1]"), 2)
    reads = sources(ops)
    adds = [i for i, op in enumerate(ops) if op.kind == "add"]
    assert [reads[i] for i in adds] == [(adds[0] - 1, -1), (adds[1] - 1, adds[0] + 2)]
    assert ops[adds[0] + 2].kind == "relu"  # the block input is the ReLU'd map


def test_positions_count_the_tokens_inside_blocks():
    """Layer positions keep counting inside blocks; an add carries its block's first one."""
    names = [op.name for op in expand(parse("8x8gray/c2k3-[c4k1-c2k1]-p2"), 2)]
    assert names == ["1:c2k3", "1:c2k3", "2:c4k1", "2:c4k1", "3:c2k1", "2:[c4k1-c2k1]",
                     "4:p2", "head:flatten", "head:dense"]


@pytest.mark.parametrize("text, position, token, message", [
    ("16x16gray/c8k3-[c16k1-dw3-c16k1]", 2, "[c16k1-dw3-c16k1]",
     r"block at layer 2 '\[c16k1-dw3-c16k1\]': its input is 16x16x8 but its output is "
     r"16x16x16; a residual block adds its input to its output, so both must have the same "
     r"shape: make the block's last layer give 8 channels \(e.g. c8k1\), or widen the map "
     r"to 16 channels before the block"),
    ("16x16gray/c8k3-[c8k3s2]", 2, "[c8k3s2]",
     r"its input is 16x16x8 but its output is 8x8x8.*move the stride or pooling out of the "
     r"block"),
    ("16x16gray/c8k3-[c8k3-p2]", 2, "[c8k3-p2]", r"move the stride or pooling out"),
    ("16x16gray/c8k3-[gap]", 2, "[gap]",
     r"its output is a vector of 8 features.*keep gap and dense layers out of the block"),
    ("16x16gray/c8k3-[c8k3-[c8k3]-c8k3]", 3, "[c8k3]",
     r"layer 3 '\[c8k3\]': a block opens inside the block opened at layer 2 '\[c8k3'; blocks "
     r"do not nest"),
    ("16x16gray/c8k3-c8k3]", 2, "c8k3]", r"'\]' closes no block; put '\[' before"),
    ("16x16gray/c8k3-[c8k3-c8k3", 2, "[c8k3",
     r"layer 2 '\[c8k3': the block opened here is never closed; end its last layer with "
     r"'\]'"),
    ("16x16gray/c8k3-[]", 2, "[]", r"a bracket needs a layer beside it"),
    ("16x16gray/c8k3-[[c8k3]]", 2, "[[c8k3]]", r"blocks do not nest"),
    ("16x16gray/c8k3-[c8k3]]", 2, "[c8k3]]", r"one '\]' closes a block; remove the second"),
    ("16x16gray/c8k3-c8[k3", 2, "c8[k3", r"brackets go around whole layers"),
    ("16x16gray/c8k3-[c8k4]", 2, "[c8k4]", r"kernel 4 is even"),
])
def test_bad_blocks_are_refused_with_their_position(text, position, token, message):
    """A bad block names its position, its token, the rule and the fix."""
    with pytest.raises(ArchError, match=message) as info:
        parse(text)
    assert (info.value.position, info.value.token) == (position, token)


def test_json_blocks_do_not_nest():
    """A block inside a block in the JSON form is refused at its position."""
    inner = {"type": "block", "layers": [{"type": "conv", "filters": 1, "kernel": 3,
                                          "stride": 1, "valid": False}]}
    data = {"input": {"h": 8, "w": 8, "mode": "gray"},
            "layers": [{"type": "block", "layers": [inner]}]}
    with pytest.raises(ArchError, match="layer 1: a block inside a block; blocks do not nest"):
        from_dict(data)
    data["layers"] = [{"type": "block", "layers": []}]
    with pytest.raises(ArchError, match="layer 1: an empty block"):
        from_dict(data)


def test_block_spec_prints_its_layers_in_brackets():
    """A Block prints as its layers joined by '-' inside '[' and ']'."""
    assert str(Block((Conv(4, 1), Conv(2, 3)))) == "[c4k1-c2k3]"
