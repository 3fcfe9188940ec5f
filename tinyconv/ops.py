"""The concrete operations of a network, with per-image shapes: :func:`expand`.

The one description that the engine, the cost model, the quantiser and the C
writer all build from (the text form is in :mod:`tinyconv.arch`).
"""

from __future__ import annotations

from dataclasses import dataclass

from tinyconv.arch_specs import (Arch, ArchError, BatchNorm, Block, Conv, Dense, Depthwise,
                                 Dropout, GlobalPool, LayerSpec, Pool, token_count)
from tinyconv.errors import InputError

#: op kinds with weights, after which a ReLU may come
WEIGHTED_KINDS = ("conv", "dwconv", "dense")


@dataclass(frozen=True)
class Op:
    """One concrete operation of a network, with its shapes.

    ``kind`` is one of ``conv``, ``dwconv``, ``maxpool``, ``avgpool``, ``gap``,
    ``flatten``, ``dense``, ``relu``, ``bn``, ``dropout``, ``add``. ``position``
    is the 1-based position of the text token it comes from (0 for the
    implicit head). Shapes are per image: (h, w, c) or (n_features,).

    Every op reads the output of the op before it (the first op reads the
    network's input). An ``add`` closes a residual block and also reads the
    block's input: the output of the op ``reach + 1`` places before it, where
    ``reach`` counts the block's own ops (see :func:`sources`). Its position and
    token are those of the block: its first layer's position and its text.
    """

    kind: str
    in_shape: tuple[int, ...]
    out_shape: tuple[int, ...]
    position: int = 0
    token: str = ""
    filters: int = 0
    kernel: int = 0
    stride: int = 1
    padding: str = "same"
    pads: tuple[int, int, int, int] = (0, 0, 0, 0)
    size: int = 0
    units: int = 0
    rate: float = 0.0
    reach: int = 0

    @property
    def name(self) -> str:
        """A short label such as ``3:c8k3`` or ``head:dense``."""
        return f"{self.position}:{self.token}" if self.position else f"head:{self.kind}"


def conv_output(size: int, kernel: int, stride: int, valid: bool) -> tuple[int, int, int]:
    """Output size and (before, after) padding of one spatial axis.

    Notes
    -----
    Valid: ``out = floor((size - k) / s) + 1`` with no padding. Same:
    ``out = ceil(size / s)``, total padding ``max((out - 1) s + k - size, 0)``
    split with the extra pixel after (common practice).
    """
    if valid:
        return (size - kernel) // stride + 1, 0, 0
    out = -(-size // stride)
    total = max((out - 1) * stride + kernel - size, 0)
    return out, total // 2, total - total // 2


def sources(ops: tuple[Op, ...]) -> tuple[tuple[int, ...], ...]:
    """Per op, the indices of the ops whose outputs it reads (-1: the network input).

    The one statement of the graph every walker follows: ``(i - 1,)`` for every
    op but an ``add``, which reads ``(i - 1, i - 1 - reach)``: its block's last
    output and its block's input.
    """
    return tuple((i - 1, i - 1 - op.reach) if op.kind == "add" else (i - 1,)
                 for i, op in enumerate(ops))


def expand(arch: Arch, n_classes: int, *, text: str = "") -> tuple[Op, ...]:
    """The concrete operations of ``arch`` for ``n_classes`` outputs.

    Raises
    ------
    ArchError
        When a layer does not fit the map it meets, naming token, position and size.
    InputError
        When ``n_classes`` is not an integer >= 2.
    """
    check_classes(n_classes)
    ops: list[Op] = []
    shape: tuple[int, ...] = arch.input.shape
    layers = arch.layers
    pos = 1
    for i, layer in enumerate(layers):
        prev = layers[i - 1] if i > 0 else None
        follows_bn = i + 1 < len(layers) and isinstance(layers[i + 1], BatchNorm)
        step, shape = expand_layer(layer, shape, pos, prev, follows_bn,
                                   lambda: text or str(arch))
        ops.extend(step)
        pos += token_count(layer)
    ops.extend(expand_head(shape, n_classes))
    return tuple(ops)


def check_classes(n_classes: int) -> int:
    """``n_classes`` if it is an integer >= 2, else :class:`InputError`."""
    if isinstance(n_classes, bool) or not isinstance(n_classes, int) or n_classes < 2:
        raise InputError(f"number of classes must be an integer of at least 2, got "
                         f"{n_classes!r}")
    return n_classes


def expand_head(shape: tuple[int, ...], n_classes: int) -> list[Op]:
    """The implicit head on a map or vector of ``shape``: flatten if spatial, dense."""
    ops = []
    if len(shape) == 3:
        flat = (shape[0] * shape[1] * shape[2],)
        ops.append(Op("flatten", shape, flat))
        shape = flat
    ops.append(Op("dense", shape, (n_classes,), units=n_classes))
    return ops


def expand_layer(layer: LayerSpec, shape: tuple[int, ...], pos: int,
                 prev: LayerSpec | None, follows_bn: bool, text=lambda: "",
                 linear: bool = False) -> tuple[list[Op], tuple[int, ...]]:
    """The ops of one layer (1-based position ``pos``) meeting a map of ``shape``.

    ``prev`` is the layer before (None for the first) and ``follows_bn`` says
    whether a batch norm comes next: they decide where the ReLU goes. The ops
    depend only on (layer, shape, whether prev is conv/depthwise/dense,
    follows_bn) apart from their ``position``, so callers may reuse them.
    ``text`` is called for the error message only. ``linear`` (inside a block:
    its last weighted layer and the batch norm right after it) leaves the ReLU
    out. A :class:`Block` expands to its layers' ops and an ``add``
    (:func:`expand_block`).

    Returns
    -------
    ops : list of Op
    out_shape : tuple of int

    Raises
    ------
    ArchError
        When the layer does not fit ``shape``.
    """
    if isinstance(layer, Block):
        return expand_block(layer, shape, pos, text)
    tok = str(layer)
    ops: list[Op] = []

    def fail(why: str) -> None:
        whole = text()
        raise ArchError(f"{whole!r}: layer {pos} {tok!r}: {why}", text=whole,
                        position=pos, token=tok)

    if isinstance(layer, (Conv, Depthwise)):
        if len(shape) != 3:
            fail(f"a convolution needs an image map, but meets a vector of "
                 f"{shape[0]} features (after gap or dense); move it earlier")
        h, w, c = shape
        k, s = layer.kernel, layer.stride
        if layer.valid and (k > h or k > w):
            fail(f"kernel {k} is larger than the input map {h}x{w}; "
                 "use a smaller kernel or same padding")
        oh, pt, pb = conv_output(h, k, s, layer.valid)
        ow, pl, pr = conv_output(w, k, s, layer.valid)
        f = layer.filters if isinstance(layer, Conv) else c
        kind = "conv" if isinstance(layer, Conv) else "dwconv"
        ops.append(Op(kind, shape, (oh, ow, f), pos, tok, filters=f, kernel=k, stride=s,
                      padding="valid" if layer.valid else "same", pads=(pt, pb, pl, pr)))
        shape = (oh, ow, f)
        if not (follows_bn or linear):
            ops.append(Op("relu", shape, shape, pos, tok))
    elif isinstance(layer, Pool):
        if len(shape) != 3:
            fail(f"pooling needs an image map, but meets a vector of "
                 f"{shape[0]} features; move it before gap or dense")
        h, w, c = shape
        if layer.size > h or layer.size > w:
            fail(f"pool size {layer.size} is larger than the map {h}x{w} it "
                 "meets (it would shrink it below 1x1); use a smaller pool "
                 "or fewer pooling layers")
        out = (h // layer.size, w // layer.size, c)
        ops.append(Op("maxpool" if layer.kind == "max" else "avgpool", shape, out, pos,
                      tok, size=layer.size, stride=layer.size))
        shape = out
    elif isinstance(layer, GlobalPool):
        if len(shape) != 3:
            fail(f"global pooling needs an image map, but meets a vector of "
                 f"{shape[0]} features; keep one gap, before any dense layer")
        ops.append(Op("gap", shape, (shape[2],), pos, tok))
        shape = (shape[2],)
    elif isinstance(layer, Dense):
        if len(shape) == 3:
            flat = (shape[0] * shape[1] * shape[2],)
            ops.append(Op("flatten", shape, flat, pos, tok))
            shape = flat
        ops.append(Op("dense", shape, (layer.units,), pos, tok, units=layer.units))
        shape = (layer.units,)
        if not (follows_bn or linear):
            ops.append(Op("relu", shape, shape, pos, tok))
    elif isinstance(layer, BatchNorm):
        ops.append(Op("bn", shape, shape, pos, tok))
        if isinstance(prev, (Conv, Depthwise, Dense)) and not linear:
            ops.append(Op("relu", shape, shape, pos, tok))
    elif isinstance(layer, Dropout):
        ops.append(Op("dropout", shape, shape, pos, tok, rate=layer.rate))
    else:  # pragma: no cover - the parser makes only the types above
        raise TypeError(f"unknown layer spec {layer!r}")
    return ops, shape


def _shape_text(shape: tuple[int, ...]) -> str:
    return "x".join(map(str, shape)) if len(shape) == 3 else f"a vector of {shape[0]} features"


def expand_block(block: Block, shape: tuple[int, ...], pos: int, text=lambda: ""
                 ) -> tuple[list[Op], tuple[int, ...]]:
    """The ops of a residual block whose first layer is at position ``pos``: its
    layers' ops, then the ``add`` of its input to their output.

    The layers are expanded as a text of their own (the first has no layer
    before it, the last no batch norm after it), except that the last
    conv/depthwise/dense layer, and a batch norm right after it, get no ReLU.

    Raises
    ------
    ArchError
        When a layer does not fit, or when the block's output does not have its
        input's shape; the latter points at the block (its first position and
        its text) and says what to change.
    """
    layers = block.layers
    weighted = [j for j, layer in enumerate(layers) if isinstance(layer, (Conv, Depthwise, Dense))]
    last = weighted[-1] if weighted else -1
    ops: list[Op] = []
    out = shape
    for j, layer in enumerate(layers):
        prev = layers[j - 1] if j > 0 else None
        follows_bn = j + 1 < len(layers) and isinstance(layers[j + 1], BatchNorm)
        linear = j == last or (j == last + 1 and last >= 0 and isinstance(layer, BatchNorm))
        step, out = expand_layer(layer, out, pos + j, prev, follows_bn, text, linear)
        ops.extend(step)
    tok = str(block)
    if out != shape:
        if len(out) != len(shape):
            fix = "keep gap and dense layers out of the block (after it)"
        elif out[:-1] != shape[:-1]:
            fix = "move the stride or pooling out of the block, before or after it"
        else:
            fix = (f"make the block's last layer give {shape[-1]} channels (e.g. "
                   f"c{shape[-1]}k1), or widen the map to {out[-1]} channels before the "
                   "block")
        whole = text()
        raise ArchError(f"{whole!r}: block at layer {pos} {tok!r}: its input is "
                        f"{_shape_text(shape)} but its output is {_shape_text(out)}; a "
                        "residual block adds its input to its output, so both must have "
                        f"the same shape: {fix}", text=whole, position=pos, token=tok)
    ops.append(Op("add", shape, shape, pos, tok, reach=len(ops)))
    return ops, shape
