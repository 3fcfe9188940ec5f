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

:func:`expand` turns an architecture into the flat list of :class:`Op` with
shapes: the one description that the engine, the cost model, the quantiser
and the C writer all build from.
"""

from __future__ import annotations

import json
import re
from dataclasses import dataclass, fields
from typing import Union

from tinyconv.errors import InputError

MODES = {"rgb": 3, "gray": 1, "ycc": 3, "hsv": 3}
MAX_SIDE = 4096
MAX_WIDTH = 65536


class ArchError(InputError):
    """A bad architecture text, or one that does not fit its input.

    Attributes
    ----------
    text : str
        The whole text, when known.
    position : int or None
        1-based position of the offending layer token (0 for the input).
    token : str or None
        The offending token.
    """

    def __init__(self, message: str, *, text: str = "", position: int | None = None,
                 token: str | None = None):
        super().__init__(message)
        self.text = text
        self.position = position
        self.token = token


# ---------------------------------------------------------------- the specs


@dataclass(frozen=True)
class InputSpec:
    """Image size and colour mode the network reads, e.g. ``32x32rgb``."""

    h: int
    w: int
    mode: str = "rgb"

    @property
    def channels(self) -> int:
        return MODES[self.mode]

    @property
    def shape(self) -> tuple[int, int, int]:
        """Per-image shape (h, w, c)."""
        return (self.h, self.w, self.channels)

    def __str__(self) -> str:
        return f"{self.h}x{self.w}{self.mode}"


@dataclass(frozen=True)
class Conv:
    """Standard convolution: ``filters`` output channels, square kernel."""

    filters: int
    kernel: int
    stride: int = 1
    valid: bool = False

    def __str__(self) -> str:
        return (f"c{self.filters}k{self.kernel}" + ("s2" if self.stride == 2 else "")
                + ("v" if self.valid else ""))


@dataclass(frozen=True)
class Depthwise:
    """Depthwise convolution: one k x k filter per input channel."""

    kernel: int
    stride: int = 1
    valid: bool = False

    def __str__(self) -> str:
        return f"dw{self.kernel}" + ("s2" if self.stride == 2 else "") + ("v" if self.valid else "")


@dataclass(frozen=True)
class Pool:
    """Max (``kind='max'``) or average (``kind='avg'``) pooling, size = stride."""

    kind: str
    size: int

    def __str__(self) -> str:
        return ("p" if self.kind == "max" else "a") + str(self.size)


@dataclass(frozen=True)
class GlobalPool:
    """Global average pooling: (h, w, c) -> (c,)."""

    def __str__(self) -> str:
        return "gap"


@dataclass(frozen=True)
class Dense:
    """Hidden dense (fully connected) layer of ``units`` outputs."""

    units: int

    def __str__(self) -> str:
        return f"d{self.units}"


@dataclass(frozen=True)
class BatchNorm:
    """Batch normalisation over the last (channel) axis."""

    def __str__(self) -> str:
        return "bn"


@dataclass(frozen=True)
class Dropout:
    """Inverted dropout of ``pct`` percent of activations, training only."""

    pct: int

    @property
    def rate(self) -> float:
        return self.pct / 100.0

    def __str__(self) -> str:
        return f"x{self.pct}"


LayerSpec = Union[Conv, Depthwise, Pool, GlobalPool, Dense, BatchNorm, Dropout]


@dataclass(frozen=True)
class Arch:
    """A network architecture: input spec and hidden layers (head implicit)."""

    input: InputSpec
    layers: tuple[LayerSpec, ...] = ()

    def __str__(self) -> str:
        if not self.layers:
            return str(self.input)
        return f"{self.input}/" + "-".join(str(layer) for layer in self.layers)

    def with_input(self, spec: InputSpec) -> "Arch":
        """The same layers on another input."""
        return Arch(spec, self.layers)

    # -------- JSON form, for files
    def to_json(self) -> str:
        """A JSON object: ``{"input": {...}, "layers": [{"type": ..., ...}]}``."""
        return json.dumps(to_dict(self), sort_keys=True)

    @staticmethod
    def from_json(text: str) -> "Arch":
        """Inverse of :meth:`to_json`; bad JSON or content raises :class:`ArchError`."""
        try:
            data = json.loads(text)
        except json.JSONDecodeError as exc:
            raise ArchError(f"architecture JSON does not parse: {exc}; expected "
                            f"{_SHAPE_HINT}") from None
        return from_dict(data)


_TYPES = {"conv": Conv, "depthwise": Depthwise, "pool": Pool, "gap": GlobalPool,
          "dense": Dense, "bn": BatchNorm, "dropout": Dropout}
_TYPE_NAMES = {cls: name for name, cls in _TYPES.items()}


def to_dict(arch: Arch) -> dict:
    """Plain-data form of an architecture (for JSON)."""
    layers = []
    for layer in arch.layers:
        entry = {"type": _TYPE_NAMES[type(layer)]}
        entry.update({f.name: getattr(layer, f.name) for f in fields(layer)})
        layers.append(entry)
    return {"input": {"h": arch.input.h, "w": arch.input.w, "mode": arch.input.mode},
            "layers": layers}


_TYPE_WORDS = {int: "an integer", bool: "true or false", str: "a string"}
_SHAPE_HINT = '{"input": {"h": 32, "w": 32, "mode": "rgb"}, "layers": [{"type": "conv", ...}]}'


def from_dict(data: dict) -> Arch:
    """Inverse of :func:`to_dict`; the result is validated like a parsed text.

    Raises
    ------
    ArchError
        When ``data`` is not of the shape :func:`to_dict` writes, a layer type or
        field is unknown, a value has the wrong type, or the architecture it
        describes breaks a rule of the text form (same messages as :func:`parse`).
    """

    def bad(why: str, position: int | None = None) -> ArchError:
        return ArchError(f"not an architecture object: {why}; expected {_SHAPE_HINT}",
                         position=position)

    if not isinstance(data, dict) or not isinstance(data.get("input"), dict):
        raise bad(f"got {type(data).__name__} without an 'input' object")
    unknown = set(data) - {"input", "layers"}
    if unknown:
        raise bad(f"unknown keys {sorted(unknown)}")
    inp = data["input"]
    if set(inp) != {"h", "w", "mode"}:
        raise bad(f"'input' has keys {sorted(inp)}, needs exactly h, w, mode", 0)
    for key, typ in (("h", int), ("w", int), ("mode", str)):
        if not isinstance(inp[key], typ) or isinstance(inp[key], bool):
            raise bad(f"input {key} = {inp[key]!r} is not {_TYPE_WORDS[typ]}", 0)
    entries = data.get("layers", [])
    if not isinstance(entries, list):
        raise bad(f"'layers' is a {type(entries).__name__}, not a list")
    layers = []
    for i, entry in enumerate(entries, 1):
        if not isinstance(entry, dict) or "type" not in entry:
            raise bad(f"layer {i} is {entry!r}, not an object with a 'type'", i)
        kind = entry["type"]
        if kind not in _TYPES:
            raise ArchError(f"layer {i}: unknown type {kind!r}; expected one of "
                            f"{', '.join(sorted(_TYPES))}", position=i, token=str(kind))
        cls = _TYPES[kind]
        known = {f.name: f for f in fields(cls)}
        args = {k: v for k, v in entry.items() if k != "type"}
        if set(args) - set(known):
            raise bad(f"layer {i} ({kind}) has unknown fields {sorted(set(args) - set(known))}; "
                      f"known: {sorted(known) or 'none'}", i)
        for key, value in args.items():
            want = {"int": int, "bool": bool, "str": str}[str(known[key].type)]
            if not isinstance(value, want) or (want is int and isinstance(value, bool)):
                raise bad(f"layer {i} ({kind}) field {key} = {value!r} is not "
                          f"{_TYPE_WORDS[want]}", i)
        try:
            layers.append(cls(**args))
        except TypeError as exc:  # a required field left out
            raise bad(f"layer {i} ({kind}): {exc}", i) from None
    built = Arch(InputSpec(inp["h"], inp["w"], inp["mode"]), tuple(layers))
    # Through the text, so that the same rules apply to both forms; a value the
    # text cannot say (stride 3, pool kind 'min') prints as something else.
    arch = parse(str(built))
    if arch != built:
        for i, (a, b) in enumerate(zip(arch.layers, built.layers), 1):
            if a != b:
                raise bad(f"layer {i} {b!r} has a value the architecture rules do not "
                          f"allow (it would read back as {a!r})", i)
        raise bad(f"input {built.input!r} would read back as {arch.input!r}", 0)
    return arch


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


# ---------------------------------------------------------------- expansion


@dataclass(frozen=True)
class Op:
    """One concrete operation of a network, with its shapes.

    ``kind`` is one of ``conv``, ``dwconv``, ``maxpool``, ``avgpool``, ``gap``,
    ``flatten``, ``dense``, ``relu``, ``bn``, ``dropout``. ``position`` is the
    1-based position of the text token it comes from (0 for the implicit
    head). Shapes are per image: (h, w, c) or (n_features,).
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
    for i, layer in enumerate(layers):
        prev = layers[i - 1] if i > 0 else None
        follows_bn = i + 1 < len(layers) and isinstance(layers[i + 1], BatchNorm)
        step, shape = expand_layer(layer, shape, i + 1, prev, follows_bn,
                                   lambda: text or str(arch))
        ops.extend(step)
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
                 prev: LayerSpec | None, follows_bn: bool, text=lambda: ""
                 ) -> tuple[list[Op], tuple[int, ...]]:
    """The ops of one layer (1-based position ``pos``) meeting a map of ``shape``.

    ``prev`` is the layer before (None for the first) and ``follows_bn`` says
    whether a batch norm comes next: they decide where the ReLU goes. The ops
    depend only on (layer, shape, whether prev is conv/depthwise/dense,
    follows_bn) apart from their ``position``, so callers may reuse them.
    ``text`` is called for the error message only.

    Returns
    -------
    ops : list of Op
    out_shape : tuple of int

    Raises
    ------
    ArchError
        When the layer does not fit ``shape``.
    """
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
        if not follows_bn:
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
        if not follows_bn:
            ops.append(Op("relu", shape, shape, pos, tok))
    elif isinstance(layer, BatchNorm):
        ops.append(Op("bn", shape, shape, pos, tok))
        if isinstance(prev, (Conv, Depthwise, Dense)):
            ops.append(Op("relu", shape, shape, pos, tok))
    elif isinstance(layer, Dropout):
        ops.append(Op("dropout", shape, shape, pos, tok, rate=layer.rate))
    else:  # pragma: no cover - the parser makes only the types above
        raise TypeError(f"unknown layer spec {layer!r}")
    return ops, shape
