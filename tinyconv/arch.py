"""The architecture of a network as frozen dataclasses, and its text form.

A text names one candidate, e.g. ``32x32rgb/c8k3-p2-c16k3-p2-gap``:

* the input ``{h}x{w}{mode}``, mode one of ``rgb``, ``gray``, ``ycc``, ``hsv``;
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

ReLU follows every convolution and hidden dense layer; when a batch norm
follows such a layer directly, the ReLU goes after the batch norm
(conv, norm, ReLU: common practice). The classifier head (a flatten when the
map is still spatial, then a dense layer to the number of classes) is implicit,
so one text serves any number of classes. A text with no layers (``8x8gray``)
is softmax regression on the pixels.

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
from tinyconv.arch_specs import (MAX_SIDE, MAX_WIDTH, MODES, Arch, ArchError, BatchNorm, Conv,
                                 Dense, Depthwise, Dropout, GlobalPool, InputSpec, LayerSpec,
                                 Pool)
from tinyconv.ops import Op, check_classes, conv_output, expand, expand_head, expand_layer

__all__ = ["MAX_SIDE", "MAX_WIDTH", "MODES", "Arch", "ArchError", "BatchNorm", "Conv", "Dense",
           "Depthwise", "Dropout", "GlobalPool", "InputSpec", "LayerSpec", "Pool", "Op",
           "check_classes", "conv_output", "expand", "expand_head", "expand_layer", "parse",
           "parse_input", "from_dict", "to_dict"]

# ---------------------------------------------------------------- the parser

# [0-9], not \d: \d also matches other scripts' digits, which int() accepts but
# which would not print back the same (the text must round-trip exactly).
_INPUT = re.compile(r"([0-9]+)x([0-9]+)([a-z]+)")
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
    if mode not in MODES:
        raise ArchError(f"input {text!r}: unknown colour mode {mode!r}; "
                        f"expected one of {', '.join(MODES)}",
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


def parse(text: str) -> Arch:
    """Parse an architecture text and validate it against its own input size.

    Raises
    ------
    TypeError
        If ``text`` is not a string.
    ArchError
        Naming the token, its position and what was expected, or the size it met.
    """
    if not isinstance(text, str):
        raise TypeError(f"architecture text must be a str, got {type(text).__name__}")
    head, slash, body = text.partition("/")
    spec = parse_input(head)
    if slash and not body:
        raise ArchError(f"{text!r}: nothing after '/'; write {head!r} for a network "
                        "with only the classifier head", text=text, position=1, token="")
    layers: list[LayerSpec] = []
    if body:
        for pos, tok in enumerate(body.split("-"), 1):
            if not tok:
                raise ArchError(f"{text!r}: empty layer token at position {pos} "
                                f"(two '-' in a row, or one at an end); expected {_EXPECTED}",
                                text=text, position=pos, token=tok)
            try:
                layers.append(_parse_token(tok))
            except ValueError as exc:
                raise ArchError(f"{text!r}: layer {pos} {tok!r}: {exc}",
                                text=text, position=pos, token=tok) from None
    arch = Arch(spec, tuple(layers))
    expand(arch, n_classes=2, text=text)  # validates sizes against the input
    return arch

