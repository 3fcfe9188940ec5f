"""The JSON form of an architecture, for files: ``{"input": {...}, "layers": [...]}``."""

from __future__ import annotations

import json
from dataclasses import fields

from tinyconv.arch_specs import (Arch, ArchError, BatchNorm, Block, Conv, Dense, Depthwise,
                                 Dropout, GlobalPool, InputSpec, LayerSpec, Pool, token_count)

_TYPES = {"conv": Conv, "depthwise": Depthwise, "pool": Pool, "gap": GlobalPool,
          "dense": Dense, "bn": BatchNorm, "dropout": Dropout}
_TYPE_NAMES = {cls: name for name, cls in _TYPES.items()}


def _entry(layer: LayerSpec) -> dict:
    """One layer as plain data; a residual block as ``{"type": "block", "layers": [...]}``."""
    if isinstance(layer, Block):
        return {"type": "block", "layers": [_entry(inner) for inner in layer.layers]}
    entry = {"type": _TYPE_NAMES[type(layer)]}
    entry.update({f.name: getattr(layer, f.name) for f in fields(layer)})
    return entry


def to_dict(arch: Arch) -> dict:
    """Plain-data form of an architecture (for JSON)."""
    return {"input": {"h": arch.input.h, "w": arch.input.w, "mode": arch.input.mode},
            "layers": [_entry(layer) for layer in arch.layers]}


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
    layers = _layers(data.get("layers", []), "'layers'", bad, 1, nested=False)
    built = Arch(InputSpec(inp["h"], inp["w"], inp["mode"]), tuple(layers))
    # Through the text, so that the same rules apply to both forms; a value the
    # text cannot say (stride 3, pool kind 'min') prints as something else.
    from tinyconv.arch import parse
    arch = parse(str(built))
    if arch != built:
        pos = 1
        for a, b in zip(arch.layers, built.layers):
            if a != b:
                raise bad(f"layer {pos} {b!r} has a value the architecture rules do not "
                          f"allow (it would read back as {a!r})", pos)
            pos += token_count(b)
        raise bad(f"input {built.input!r} would read back as {arch.input!r}", 0)
    return arch


def _layers(entries, where: str, bad, pos: int, nested: bool) -> tuple[LayerSpec, ...]:
    """The layer specs of a list of entries whose first layer is at position ``pos``."""
    if not isinstance(entries, list):
        raise bad(f"{where} is a {type(entries).__name__}, not a list")
    layers: list[LayerSpec] = []
    for entry in entries:
        if not isinstance(entry, dict) or "type" not in entry:
            raise bad(f"layer {pos} is {entry!r}, not an object with a 'type'", pos)
        kind = entry["type"]
        if kind == "block":
            if nested:
                raise bad(f"layer {pos}: a block inside a block; blocks do not nest", pos)
            if set(entry) != {"type", "layers"}:
                raise bad(f"layer {pos} (block) has keys {sorted(entry)}, needs exactly "
                          "type and layers", pos)
            inner = _layers(entry["layers"], f"the layers of the block at layer {pos}", bad,
                            pos, nested=True)
            if not inner:
                raise bad(f"layer {pos}: an empty block; give it at least one layer", pos)
            layers.append(Block(inner))
            pos += len(inner)
            continue
        if kind not in _TYPES:
            raise ArchError(f"layer {pos}: unknown type {kind!r}; expected one of "
                            f"{', '.join(sorted(_TYPES) + ['block'])}", position=pos,
                            token=str(kind))
        cls = _TYPES[kind]
        known = {f.name: f for f in fields(cls)}
        args = {k: v for k, v in entry.items() if k != "type"}
        if set(args) - set(known):
            raise bad(f"layer {pos} ({kind}) has unknown fields "
                      f"{sorted(set(args) - set(known))}; known: {sorted(known) or 'none'}",
                      pos)
        for key, value in args.items():
            want = {"int": int, "bool": bool, "str": str}[str(known[key].type)]
            if not isinstance(value, want) or (want is int and isinstance(value, bool)):
                raise bad(f"layer {pos} ({kind}) field {key} = {value!r} is not "
                          f"{_TYPE_WORDS[want]}", pos)
        try:
            layers.append(cls(**args))
        except TypeError as exc:  # a required field left out
            raise bad(f"layer {pos} ({kind}): {exc}", pos) from None
        pos += 1
    return tuple(layers)



def to_json(arch: Arch) -> str:
    """A JSON object: ``{"input": {...}, "layers": [{"type": ..., ...}]}``."""
    return json.dumps(to_dict(arch), sort_keys=True)


def from_json(text: str) -> Arch:
    """Inverse of :func:`to_json`; bad JSON or content raises :class:`ArchError`."""
    try:
        data = json.loads(text)
    except json.JSONDecodeError as exc:
        raise ArchError(f"architecture JSON does not parse: {exc}; expected "
                        f"{_SHAPE_HINT}") from None
    return from_dict(data)
