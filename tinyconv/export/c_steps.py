"""The C stage's table: how each step kind is called in ``{prefix}_classify``, :data:`EMITTERS`.

One :class:`CEmitter` per step kind (and ``head``, the last dense layer, which
also gives the class) writes the kernel call of one step; its kernels' C text
comes from the style's kernel module (:mod:`tinyconv.export.c_fast`,
:mod:`tinyconv.export.c_kernels`, whose ``NEEDS`` name the templates of each
kind), or, for a kind whose kernels live in its own module, from the
emitter's ``kernels``. A new step kind adds one entry here (DEVELOPERS.md,
"Where a change goes").
"""

from __future__ import annotations

from dataclasses import dataclass
from math import prod
from typing import Callable

from tinyconv.quant.quantize import QuantLayer


@dataclass(frozen=True)
class CEmitter:
    """How one step kind appears in the generated C.

    Attributes
    ----------
    call : callable(layer, p, src, dst, scratch, style, skip) -> str
        The kernel call of one step: ``p`` is the symbol prefix, ``src``,
        ``dst``, ``scratch`` and ``skip`` (a second input, else "") are C
        addresses in the activation buffer, ``style`` is ``fast`` or ``plain``.
    kernels : callable(style, prefix) -> str, or None
        The C text of the kind's kernels when they are its own; None when the
        style's kernel module has them.
    """

    call: Callable[[QuantLayer, str, str, str, str, str, str], str]
    kernels: Callable[[str, str], str] | None = None


def _arrays(layer: QuantLayer, p: str, style: str) -> str:
    # the fast kernels read one record a channel (bias, multiplier, nh, code)
    base = f"{p}_l{layer.index}"
    if style == "fast":
        return f"{base}_w, {base}_rec"
    return f"{base}_w, {base}_bias, {base}_mult, {base}_shift"


def _zero_point(layer: QuantLayer, style: str) -> str:
    # the fast dense and head kernels have the input zero point folded into the bias
    return "" if style == "fast" else f"{layer.in_zp}, "


def _tail(layer: QuantLayer, p: str, style: str) -> str:
    return f"{_arrays(layer, p, style)}, {layer.out_zp}, {layer.lo}, {layer.hi}"


def add_call(layer: QuantLayer, p: str, src: str, dst: str, scratch: str, style: str,
             skip: str) -> str:
    op = layer.op
    (ma, mb, my), (na, nb, ny) = layer.multiplier, layer.shift
    return (f"    {p}_add({src}, {skip}, {dst}, {prod(op.out_shape)}, {layer.in_zp}, "
            f"{layer.skip_zp},\n        {ma}, {na}, {mb}, {nb}, {my}, {ny}, "
            f"{layer.out_zp});\n")


def head_call(layer: QuantLayer, p: str, src: str, dst: str, scratch: str, style: str,
              skip: str) -> str:
    op = layer.op
    return (f"    best = {p}_head({src}, {dst}, {prod(op.in_shape)}, {op.out_shape[0]}, "
            f"{_zero_point(layer, style)}\n        {_arrays(layer, p, style)}, {layer.out_zp});\n")


def dense_call(layer: QuantLayer, p: str, src: str, dst: str, scratch: str, style: str,
               skip: str) -> str:
    op = layer.op
    return (f"    {p}_dense({src}, {dst}, {prod(op.in_shape)}, {op.out_shape[0]}, "
            f"{_zero_point(layer, style)}\n        {_tail(layer, p, style)});\n")


def conv_call(layer: QuantLayer, p: str, src: str, dst: str, scratch: str, style: str,
              skip: str) -> str:
    op = layer.op
    h, w, c = op.in_shape
    oh, ow, f = op.out_shape
    top, _, left, _ = op.pads
    col = f"{scratch}, " if style == "fast" else ""
    return (f"    {p}_conv({src}, {dst}, {col}{h}, {w}, {c}, {oh}, {ow}, {f}, "
            f"{op.kernel}, {op.stride}, {top}, {left}, {layer.in_zp},\n        "
            f"{_tail(layer, p, style)});\n")


def dwconv_call(layer: QuantLayer, p: str, src: str, dst: str, scratch: str, style: str,
                skip: str) -> str:
    op = layer.op
    h, w, c = op.in_shape
    oh, ow, _ = op.out_shape
    top, _, left, _ = op.pads
    return (f"    {p}_dwconv({src}, {dst}, {h}, {w}, {c}, {oh}, {ow}, {op.kernel}, "
            f"{op.stride}, {top}, {left}, {layer.in_zp},\n        {_tail(layer, p, style)});\n")


def gap_call(layer: QuantLayer, p: str, src: str, dst: str, scratch: str, style: str,
             skip: str) -> str:
    h, w, c = layer.op.in_shape
    return f"    {p}_gap({src}, {dst}, {h * w}, {c});\n"


def pool_call(layer: QuantLayer, p: str, src: str, dst: str, scratch: str, style: str,
              skip: str) -> str:
    """maxpool and avgpool: ``{p}_{kind}``."""
    op = layer.op
    h, w, c = op.in_shape
    oh, ow, _ = op.out_shape
    return f"    {p}_{layer.kind}({src}, {dst}, {w}, {c}, {oh}, {ow}, {op.size});\n"


#: the C stage's entry of every step kind, and of the head
EMITTERS: dict[str, CEmitter] = {
    "conv": CEmitter(conv_call),
    "dwconv": CEmitter(dwconv_call),
    "dense": CEmitter(dense_call),
    "head": CEmitter(head_call),
    "maxpool": CEmitter(pool_call),
    "avgpool": CEmitter(pool_call),
    "gap": CEmitter(gap_call),
    "add": CEmitter(add_call),
}


def emitter_of(kind: str) -> CEmitter:
    """The :class:`CEmitter` of a step kind (or ``head``)."""
    emitter = EMITTERS.get(kind)
    if emitter is None:
        raise ValueError(f"step kind {kind!r} has no C emitter; known kinds: "
                         f"{', '.join(EMITTERS)}; add its CEmitter to "
                         "tinyconv.export.c_steps.EMITTERS")
    return emitter
