"""Tests of the architecture text form, its validation, JSON form and expansion.

Outside sources: output sizes of same and valid padding (common practice:
``floor((h + 2p - k) / s) + 1``; same padding gives ``ceil(h / s)``), checked
against the size the generator below computes by its own arithmetic; JSON
through the standard library's :mod:`json`.
"""

from __future__ import annotations

import json
import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tinyconv.arch import (Arch, ArchError, BatchNorm, Conv, InputSpec, expand, from_dict,
                           parse, to_dict)
from tinyconv.errors import InputError

MODES = ["rgb", "gray", "ycc", "hsv"]


@st.composite
def sized_texts(draw) -> tuple[str, tuple[int, int]]:
    """A valid text and the map size (h, w) after its spatial layers.

    The sizes are tracked here with the textbook formulas, independently of
    :func:`tinyconv.arch.expand`, so that pools and valid kernels always fit.
    """
    mode = draw(st.sampled_from(MODES))
    h, w = draw(st.integers(1, 40)), draw(st.integers(1, 40))
    start = f"{h}x{w}{mode}"
    tokens: list[str] = []
    for _ in range(draw(st.integers(0, 6))):
        kind = draw(st.sampled_from(["conv", "dw", "pool", "bn", "drop"]))
        if kind in ("conv", "dw"):
            valid = draw(st.booleans())
            stride = draw(st.sampled_from([1, 2]))
            if valid:
                k = draw(st.integers(1, min(h, w, 7)))
                h, w = (h - k) // stride + 1, (w - k) // stride + 1   # common practice
            else:
                k = draw(st.sampled_from([1, 3, 5, 7]))
                h, w = math.ceil(h / stride), math.ceil(w / stride)   # common practice
            suffix = ("s2" if stride == 2 else "") + ("v" if valid else "")
            tokens.append((f"c{draw(st.integers(1, 64))}k{k}" if kind == "conv"
                           else f"dw{k}") + suffix)
        elif kind == "pool":
            if min(h, w) < 2:
                continue
            size = draw(st.integers(2, min(h, w, 4)))
            h, w = h // size, w // size
            tokens.append(draw(st.sampled_from("pa")) + str(size))
        elif kind == "bn":
            tokens.append("bn")
        else:
            tokens.append(f"x{draw(st.integers(1, 99))}")
    size = (h, w)
    if draw(st.booleans()):
        tokens.append("gap")
    for _ in range(draw(st.integers(0, 3))):
        tokens.append(draw(st.sampled_from([f"d{draw(st.integers(1, 300))}", "bn",
                                            f"x{draw(st.integers(1, 99))}"])))
    return start + ("/" + "-".join(tokens) if tokens else ""), size


texts = sized_texts().map(lambda pair: pair[0])


# ---------------------------------------------------------------- round trip


@pytest.mark.parametrize("text", [
    "32x32rgb/c8k3-p2-c16k3-p2-gap", "8x8gray", "16x12hsv/dw3s2v-bn-a2-gap-d16-bn-x50",
    "5x7ycc/c1k1-c2k4v-x1-d1", "4096x2gray/p2",
])
def test_examples_round_trip(text):
    """A few hand-written texts print back exactly."""
    assert str(parse(text)) == text


@settings(max_examples=200, deadline=None)
@given(sized_texts())
def test_round_trip_property(pair):
    """str(parse(t)) == t for generated texts, and expand meets the independent map size."""
    text, (h, w) = pair
    arch = parse(text)
    assert str(arch) == text
    assert parse(str(arch)) == arch
    spatial = [op.out_shape for op in expand(arch, 3)
               if op.kind in ("conv", "dwconv", "maxpool", "avgpool")]
    if spatial:
        assert spatial[-1][:2] == (h, w)


@settings(max_examples=80, deadline=None)
@given(texts)
def test_json_round_trip_property(text):
    """to_json/from_json and to_dict/from_dict give back the same architecture."""
    arch = parse(text)
    assert Arch.from_json(arch.to_json()) == arch
    data = json.loads(arch.to_json())  # standard-library JSON reads what we write
    assert from_dict(data) == arch and to_dict(arch) == data


# ---------------------------------------------------------------- fuzzing


def _parse_or_arch_error(text: str) -> None:
    try:
        arch = parse(text)
    except ArchError as exc:
        assert exc.position is None or exc.position >= 0
        assert str(exc)
        return
    assert str(arch) == text  # anything accepted round-trips


@settings(max_examples=200, deadline=None)
@given(st.text(max_size=40))
def test_fuzz_arbitrary_strings(text):
    """parse raises nothing but ArchError on arbitrary (unicode) strings."""
    _parse_or_arch_error(text)


@settings(max_examples=300, deadline=None)
@given(st.text(alphabet="0123456789xckdwpasvgbnr/-yh e", max_size=30))
def test_fuzz_strings_of_the_texts_alphabet(text):
    """parse raises nothing but ArchError on strings made of the text form's characters."""
    _parse_or_arch_error(text)


@settings(max_examples=120, deadline=None)
@given(texts, st.data())
def test_fuzz_mutated_valid_texts(text, data):
    """Deleting, inserting or replacing characters of a valid text yields parse or ArchError."""
    chars = list(text)
    for _ in range(data.draw(st.integers(1, 3))):
        i = data.draw(st.integers(0, len(chars)))
        op = data.draw(st.sampled_from(["del", "ins", "rep"]))
        ch = data.draw(st.sampled_from("0123456789xckdwpasvgbn/-９\u00b2"))
        if op == "ins" or i == len(chars):
            chars.insert(i, ch)
        elif op == "del":
            del chars[i]
        else:
            chars[i] = ch
    _parse_or_arch_error("".join(chars))


@settings(max_examples=40, deadline=None)
@given(st.one_of(st.none(), st.integers(), st.binary(), st.lists(st.text()),
                 st.floats()))
def test_non_strings_raise_type_error(value):
    """A non-str raises TypeError naming the type."""
    with pytest.raises(TypeError, match="architecture text must be a str, got"):
        parse(value)


def test_other_scripts_digits_are_refused():
    """Digits of other scripts (which int() reads) are refused, so texts round-trip."""
    with pytest.raises(ArchError, match=r"input '３２x32rgb' is not of the form"):
        parse("３２x32rgb")
    with pytest.raises(ArchError, match="layer 1 'c８k3': expected one of"):
        parse("32x32rgb/c８k3")


# ---------------------------------------------------------------- errors


@pytest.mark.parametrize("text, position, token, message", [
    ("32x32", 0, "32x32", r"input '32x32' is not of the form \{h\}x\{w\}\{mode\}, e\.g\. "
                          r"32x32rgb \(modes: rgb, gray, ycc, hsv\)"),
    ("c8k3-p2", 0, "c8k3-p2", "an architecture text starts with its input"),
    ("32x32foo", 0, "32x32foo", "unknown colour mode 'foo'; expected one of rgb, gray"),
    ("032x32rgb", 0, "032x32rgb", "sizes must be written without leading zeros"),
    ("0x32rgb", 0, "0x32rgb", "sides must be between 1 and 4096, got 0x32"),
    ("32x32rgb/", 1, "", "nothing after '/'; write '32x32rgb' for a network with only"),
    ("32x32rgb/c8k3--p2", 2, "", "empty layer token at position 2"),
    ("32x32rgb/c8k3-q", 2, "q", r"layer 2 'q': expected one of c\{filters\}k\{kernel\}"),
    ("32x32rgb/c8k3 ", 1, "c8k3 ", "layer 1 'c8k3 ': contains white space"),
    ("32x32rgb/c8k4", 1, "c8k4", "kernel 4 is even and same padding needs an odd kernel; "
                                 "use k3 or k5, or valid padding"),
    ("32x32rgb/c8k33", 1, "c8k33", "kernel must be between 1 and 31, got 33"),
    ("32x32rgb/c0k3", 1, "c0k3", "filters must be between 1 and 65536, got 0"),
    ("32x32rgb/c8k3s1", 1, "c8k3s1", "stride 1 is the default; leave out 's1'"),
    ("32x32rgb/dw3s3", 1, "dw3s3", "stride must be 1 or 2, got 3; write s2"),
    ("32x32rgb/p1", 1, "p1", "pool size must be at least 2, got 1"),
    ("32x32rgb/d0", 1, "d0", "dense units must be between 1 and 65536, got 0"),
    ("32x32rgb/x100", 1, "x100", "dropout percent must be between 1 and 99, got 100"),
    ("32x32rgb/c08k3", 1, "c08k3", "leading zero in '08'"),
    # sizes against the input: the token, its position and the size it met
    ("4x4gray/p2-p2-p2", 3, "p2", "layer 3 'p2': pool size 2 is larger than the map 1x1"),
    ("4x6gray/c8k5v", 1, "c8k5v", "kernel 5 is larger than the input map 4x6"),
    ("8x8gray/gap-c8k3", 2, "c8k3", "a convolution needs an image map, but meets a vector "
                                    "of 1 features"),
    ("8x8gray/d4-p2", 2, "p2", "pooling needs an image map, but meets a vector of 4"),
    ("8x8gray/gap-gap", 2, "gap", "global pooling needs an image map, but meets a vector "
                                  "of 1 features; keep one gap"),
])
def test_errors_name_token_position_and_rule(text, position, token, message):
    """Each rule's error names the token and its position, and says what was expected."""
    with pytest.raises(ArchError, match=message) as info:
        parse(text)
    assert (info.value.position, info.value.token) == (position, token)
    assert isinstance(info.value, InputError)


@pytest.mark.parametrize("data, message", [
    ("c8k3", "got str without an 'input' object"),
    ({"input": {"h": 8, "w": 8}}, r"'input' has keys \['h', 'w'\], needs exactly h, w, mode"),
    ({"input": {"h": "8", "w": 8, "mode": "rgb"}}, "input h = '8' is not an integer"),
    ({"input": {"h": 8, "w": 8, "mode": "rgb"}, "layers": "c8k3"}, "'layers' is a str"),
    ({"input": {"h": 8, "w": 8, "mode": "rgb"}, "layers": [{"type": "lstm"}]},
     "layer 1: unknown type 'lstm'; expected one of bn, conv, dense"),
    ({"input": {"h": 8, "w": 8, "mode": "rgb"}, "layers": [{"type": "dense", "size": 3}]},
     r"layer 1 \(dense\) has unknown fields \['size'\]; known: \['units'\]"),
    ({"input": {"h": 8, "w": 8, "mode": "rgb"},
      "layers": [{"type": "conv", "filters": 8.0, "kernel": 3}]},
     r"layer 1 \(conv\) field filters = 8.0 is not an integer"),
    ({"input": {"h": 8, "w": 8, "mode": "rgb"},
      "layers": [{"type": "conv", "filters": 8, "kernel": 3, "stride": 3}]},
     "has a value the architecture rules do not allow"),
    ({"input": {"h": 8, "w": 8, "mode": "rgb"}, "layers": [{"type": "pool", "size": 2}]},
     "missing 1 required positional argument: 'kind'"),
    ({"input": {"h": 2, "w": 2, "mode": "rgb"},
      "layers": [{"type": "pool", "kind": "max", "size": 4}]},
     "pool size 4 is larger than the map 2x2"),
])
def test_json_form_errors(data, message):
    """Bad JSON objects raise ArchError naming what is wrong."""
    with pytest.raises(ArchError, match=message):
        from_dict(data)


def test_json_syntax_error_is_an_arch_error():
    """Text that is not JSON raises ArchError, not a bare JSONDecodeError."""
    with pytest.raises(ArchError, match="architecture JSON does not parse"):
        Arch.from_json("{")


# ---------------------------------------------------------------- expansion


def test_expand_relu_and_batch_norm_order_and_head():
    """conv -> bn -> relu when bn follows; relu right after otherwise; head has position 0."""
    ops = expand(parse("8x8gray/c4k3-bn-p2-d5-x10"), 3)
    assert [op.kind for op in ops] == ["conv", "bn", "relu", "maxpool", "flatten", "dense",
                                       "relu", "dropout", "dense"]
    assert [op.position for op in ops] == [1, 2, 2, 3, 4, 4, 4, 5, 0]
    assert ops[-1].name == "head:dense" and ops[-1].out_shape == (3,)
    assert ops[0].name == "1:c4k3"


def test_same_padding_puts_the_extra_pixel_after():
    """Same padding, stride 2, k=3 on 8: out 4, total pad (4-1)*2+3-8 = 1, after (common practice)."""
    op = expand(parse("8x7gray/c2k3s2"), 2)[0]
    assert op.out_shape == (4, 4, 2)
    # width 7: out 4, total pad max((4-1)*2 + 3 - 7, 0) = 2 -> 1 before, 1 after
    assert op.pads == (0, 1, 1, 1)


def test_expand_refuses_bad_class_counts():
    """n_classes below 2 or not an int raises InputError naming the value."""
    arch = Arch(InputSpec(4, 4, "gray"), (Conv(2, 3), BatchNorm()))
    for bad in (1, True, 2.0):
        with pytest.raises(InputError, match="number of classes must be an integer of at "
                                             "least 2, got"):
            expand(arch, bad)
