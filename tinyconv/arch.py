"""The architecture of a network as frozen dataclasses, and its text form.

A text names one candidate, e.g. ``32x32rgb/c8k3-p2-c16k3-p2-gap``:

* the input ``{h}x{w}{mode}``, mode one of ``rgb``, ``gray``, ``ycc``, ``hsv``,
  or several joined by ``+`` (``32x32rgb+hsv``: the channels of each mode
  stacked in that order, 6 here; each mode at most once);
* then, after ``/``, layer tokens joined by ``-``:

  ======================  ==============================================
  ``c{f}k{k}[s2][v]``     convolution, f filters, k x k kernel
  ``dw{k}[s2][v]``        depthwise convolution, k x k kernel
  ``p{s}`` / ``a{s}``     max / average pooling, size s, stride s
  ``gap``                 global average pooling
  ``d{n}``                hidden dense layer of n units
  ``bn``                  batch normalisation
  ``x{pct}``              dropout of pct percent (training only)
  ======================  ==============================================

  ``s2`` is stride 2 (stride 1 is the default and is not written); ``v`` is
  valid padding (same padding is the default and needs an odd kernel).

* ``[`` before a layer and ``]`` after a later one (or the same one) make the
  layers between a residual block: the block's input is added to its output,
  so the two must have the same shape, e.g. the inverted bottleneck
  ``32x32rgb/c16k3-p2-[c48k1-dw3-c16k1]-p2-gap``. Blocks do not nest, and
  positions keep counting the layer tokens inside them.

ReLU follows every convolution and hidden dense layer; when a batch norm
follows such a layer directly, the ReLU goes after the batch norm
(conv, norm, ReLU: common practice). Inside a block the last conv, depthwise
or dense layer has no ReLU (nor has the batch norm right after it), and the
addition has none either, so a block adds a linear correction to its input:
the inverted bottleneck's "linear bottleneck" (common practice). The
classifier head (a flatten when the map is still spatial, then a dense layer
to the number of classes) is implicit, so one text serves any number of
classes. A text with no layers (``8x8gray``) is softmax regression on the
pixels.

The text round-trips exactly: ``str(parse(t)) == t``.

:func:`expand` (in :mod:`tinyconv.ops`, re-exported here) turns an
architecture into the flat list of :class:`Op` with shapes: the one
description that the engine, the cost model, the quantiser and the C writer
all build from. The dataclasses are in :mod:`tinyconv.arch_specs`, the JSON
form in :mod:`tinyconv.arch_json`.
"""

from __future__ import annotations

import re

from tinyconv.arch_json import from_dict, to_dict
from tinyconv.arch_specs import (MAX_SIDE, MAX_WIDTH, MODE_JOIN, MODES, Arch, ArchError,
                                 BatchNorm, Block, Conv, Dense, Depthwise, Dropout, GlobalPool,
                                 InputSpec, LayerSpec, Pool, flat_layers, token_count)
from tinyconv.ops import (Op, check_classes, conv_output, expand, expand_block, expand_head,
                          expand_layer, sources)

__all__ = ["MAX_SIDE", "MAX_WIDTH", "MODE_JOIN", "MODES", "Arch", "ArchError", "BatchNorm",
           "Block", "Conv", "Dense", "Depthwise", "Dropout", "GlobalPool", "InputSpec",
           "LayerSpec", "Pool", "flat_layers", "token_count", "Op",
           "check_classes", "conv_output", "expand", "expand_block", "expand_head",
           "expand_layer", "sources", "parse",
           "parse_input", "from_dict", "to_dict"]

# ---------------------------------------------------------------- the parser

# [0-9], not \d: \d also matches other scripts' digits, which int() accepts but
# which would not print back the same (the text must round-trip exactly).
_INPUT = re.compile(r"([0-9]+)x([0-9]+)([a-z]+(?:\+[a-z]+)*)")
_CONV = re.compile(r"c([0-9]+)k([0-9]+)(s[0-9]+)?(v)?")
_DW = re.compile(r"dw([0-9]+)(s[0-9]+)?(v)?")
_POOL = re.compile(r"([pa])([0-9]+)")
_DENSE = re.compile(r"d([0-9]+)")
_DROP = re.compile(r"x([0-9]+)")

_EXPECTED = ("c{filters}k{kernel}[s2][v], dw{kernel}[s2][v], p{size}, a{size}, gap, "
             "d{units}, bn or x{percent}")


def _number(digits: str) -> int:
    """An integer written without leading zeros (so that texts round-trip)."""
    if len(digits) > 1 and digits[0] == "0":
        raise ValueError(f"leading zero in {digits!r}")
    return int(digits)


def parse_input(text: str) -> InputSpec:
    """Parse ``{h}x{w}{mode}``, e.g. ``32x32rgb``."""
    if not isinstance(text, str):
        raise TypeError(f"input spec must be a str, got {type(text).__name__}")
    m = _INPUT.fullmatch(text)
    if not m:
        hint = ""
        if text[:1].isalpha():
            hint = "; an architecture text starts with its input, e.g. 32x32rgb/c8k3-p2"
        raise ArchError(f"input {text!r} is not of the form {{h}}x{{w}}{{mode}}, "
                        f"e.g. 32x32rgb (modes: {', '.join(MODES)}){hint}",
                        text=text, position=0, token=text)
    try:
        h, w = _number(m.group(1)), _number(m.group(2))
    except ValueError:
        raise ArchError(f"input {text!r}: sizes must be written without leading zeros",
                        text=text, position=0, token=text) from None
    mode = m.group(3)
    parts = mode.split(MODE_JOIN)
    for part in parts:
        if part not in MODES:
            raise ArchError(f"input {text!r}: unknown colour mode {part!r}; "
                            f"expected one of {', '.join(MODES)}, or several joined by "
                            f"'{MODE_JOIN}' (e.g. rgb{MODE_JOIN}hsv)",
                            text=text, position=0, token=text)
    for part in parts:
        if parts.count(part) > 1:
            raise ArchError(f"input {text!r}: colour mode {part!r} is stacked "
                            f"{parts.count(part)} times; stack each mode at most once, "
                            f"e.g. {MODE_JOIN.join(dict.fromkeys(parts))}",
                            text=text, position=0, token=text)
    if not (1 <= h <= MAX_SIDE and 1 <= w <= MAX_SIDE):
        raise ArchError(f"input {text!r}: sides must be between 1 and {MAX_SIDE}, "
                        f"got {h}x{w}", text=text, position=0, token=text)
    return InputSpec(h, w, mode)


def _parse_token(tok: str) -> LayerSpec:
    """One layer token; raises ValueError with the reason (no position)."""
    if tok == "gap":
        return GlobalPool()
    if tok == "bn":
        return BatchNorm()
    if m := _DW.fullmatch(tok):
        kernel = _number(m.group(1))
        stride = _stride(m.group(2))
        _check_kernel(kernel, bool(m.group(3)))
        return Depthwise(kernel, stride, bool(m.group(3)))
    if m := _CONV.fullmatch(tok):
        filters, kernel = _number(m.group(1)), _number(m.group(2))
        if not 1 <= filters <= MAX_WIDTH:
            raise ValueError(f"filters must be between 1 and {MAX_WIDTH}, got {filters}")
        stride = _stride(m.group(3))
        _check_kernel(kernel, bool(m.group(4)))
        return Conv(filters, kernel, stride, bool(m.group(4)))
    if m := _POOL.fullmatch(tok):
        size = _number(m.group(2))
        if size < 2:
            raise ValueError(f"pool size must be at least 2, got {size}")
        if size > MAX_SIDE:
            raise ValueError(f"pool size must be at most {MAX_SIDE}, got {size}")
        return Pool("max" if m.group(1) == "p" else "avg", size)
    if m := _DENSE.fullmatch(tok):
        units = _number(m.group(1))
        if not 1 <= units <= MAX_WIDTH:
            raise ValueError(f"dense units must be between 1 and {MAX_WIDTH}, got {units}")
        return Dense(units)
    if m := _DROP.fullmatch(tok):
        pct = _number(m.group(1))
        if not 1 <= pct <= 99:
            raise ValueError(f"dropout percent must be between 1 and 99, got {pct}; "
                             "for no dropout leave the token out")
        return Dropout(pct)
    if any(ch.isspace() for ch in tok):
        raise ValueError("contains white space; write the text without spaces")
    raise ValueError(f"expected one of {_EXPECTED}")


def _stride(group: str | None) -> int:
    if group is None:
        return 1
    stride = _number(group[1:])
    if stride == 1:
        raise ValueError("stride 1 is the default; leave out 's1'")
    if stride != 2:
        raise ValueError(f"stride must be 1 or 2, got {stride}; write s2 or leave the "
                         "stride out")
    return stride


def _check_kernel(kernel: int, valid: bool) -> None:
    if not 1 <= kernel <= 31:
        raise ValueError(f"kernel must be between 1 and 31, got {kernel}")
    if kernel % 2 == 0 and not valid:
        raise ValueError(f"kernel {kernel} is even and same padding needs an odd kernel; "
                         f"use k{kernel - 1} or k{kernel + 1}, or valid padding (suffix v)")


def _brackets(tok: str) -> tuple[bool, str, bool]:
    """(opens a block, the layer token inside the brackets, closes a block)."""
    opens = tok.startswith("[")
    core = tok[1:] if opens else tok
    closes = core.endswith("]")
    core = core[:-1] if closes else core
    if "[" in core or "]" in core:
        if core.startswith("["):
            raise ValueError("blocks do not nest: one '[' opens a block; close it with ']' "
                             "before opening the next")
        if core.endswith("]"):
            raise ValueError("one ']' closes a block; remove the second")
        raise ValueError("brackets go around whole layers: '[' before a block's first layer "
                         "and ']' after its last, e.g. [c48k1-dw3-c16k1]")
    if not core:
        raise ValueError("a bracket needs a layer beside it, e.g. [c16k3-c16k3]; "
                         "an empty block adds nothing")
    return opens, core, closes


def parse(text: str) -> Arch:
    """Parse an architecture text and validate it against its own input size.

    Raises
    ------
    TypeError
        If ``text`` is not a string.
    ArchError
        Naming the token, its position and what was expected, or the size it met;
        for a block, the position and text of its first token.
    """
    if not isinstance(text, str):
        raise TypeError(f"architecture text must be a str, got {type(text).__name__}")
    head, slash, body = text.partition("/")
    spec = parse_input(head)
    if slash and not body:
        raise ArchError(f"{text!r}: nothing after '/'; write {head!r} for a network "
                        "with only the classifier head", text=text, position=1, token="")
    layers: list[LayerSpec] = []
    block: list[LayerSpec] | None = None  # the layers of the open block
    opened = (0, "")  # position and token of the open block's first layer

    def fail(pos: int, tok: str, why: str) -> ArchError:
        return ArchError(f"{text!r}: layer {pos} {tok!r}: {why}", text=text, position=pos,
                         token=tok)

    if body:
        for pos, tok in enumerate(body.split("-"), 1):
            if not tok:
                raise ArchError(f"{text!r}: empty layer token at position {pos} "
                                f"(two '-' in a row, or one at an end); expected {_EXPECTED}",
                                text=text, position=pos, token=tok)
            try:
                opens, core, closes = _brackets(tok)
                layer = _parse_token(core)
            except ValueError as exc:
                raise fail(pos, tok, str(exc)) from None
            if opens and block is not None:
                raise fail(pos, tok, f"a block opens inside the block opened at layer "
                                     f"{opened[0]} {opened[1]!r}; blocks do not nest, so close "
                                     "that one with ']' first")
            if closes and block is None and not opens:
                raise fail(pos, tok, "']' closes no block; put '[' before the block's first "
                                     "layer, e.g. [c48k1-dw3-c16k1]")
            if opens:
                block, opened = [], (pos, tok)
            if block is None:
                layers.append(layer)
                continue
            block.append(layer)
            if closes:
                layers.append(Block(tuple(block)))
                block = None
    if block is not None:
        raise ArchError(f"{text!r}: layer {opened[0]} {opened[1]!r}: the block opened here is "
                        "never closed; end its last layer with ']'", text=text,
                        position=opened[0], token=opened[1])
    arch = Arch(spec, tuple(layers))
    expand(arch, n_classes=2, text=text)  # validates sizes against the input
    return arch
