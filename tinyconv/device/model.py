"""The device part of the cost model: instructions, flash and RAM per core, before training.

Instructions: each step the C runs (the input quantisation, then every conv,
depthwise, dense, pooling step, residual addition and the head) costs a linear function of a few
counts of its loop nest: output values, kernel rows and columns visited, taps
inside the image, multiply-accumulates done. The coefficients are fitted per
core and step kind to emulator counts (``constants.json`` beside this file,
written by ``python -m tinyconv.device.refit``, which states the compiler and
options it measured). A whole image adds the call's own overhead.

Flash: the constant arrays, exactly as :mod:`tinyconv.cost` counts them, plus
the code: a fitted size per kernel the network uses and per step it calls.

RAM: the static activation buffer (the cost model's int8 peak, exactly) plus a
stack bound per core (the deepest stack measured over the fitting networks,
with a margin), so the estimate bounds the measurement.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from functools import lru_cache
from importlib import resources
from math import prod
from typing import Union

from tinyconv.arch import Arch, Op, expand, parse
from tinyconv.cost import cost_of
from tinyconv.device.cores import Core, core_named, milliseconds
from tinyconv.errors import InputError

#: op kinds that are steps of the C (the others are fused, folded or free)
STEP_KINDS = ("conv", "dwconv", "dense", "maxpool", "avgpool", "gap", "add")
#: the C kernels (templates) each step kind needs; code size is fitted per kernel
KERNELS = {"input": (), "conv": ("scale", "conv"), "dwconv": ("scale", "dwconv"),
           "dense": ("scale", "dot", "dense"), "head": ("scale", "dot", "head"),
           "maxpool": ("maxpool",), "avgpool": ("rdiv", "avgpool"), "gap": ("rdiv", "gap"),
           "add": ("scale", "add")}
CONSTANTS_FILE = "constants.json"


def _visited(size: int, out: int, kernel: int, stride: int, pad: int) -> int:
    """Sum over output positions of the kernel offsets that land inside ``size``."""
    total = 0
    for o in range(out):
        start = o * stride - pad
        total += min(start + kernel, size) - max(start, 0)
    return total


def _edge_positions(size: int, out: int, kernel: int, stride: int, pad: int) -> int:
    """Output positions whose kernel window reaches outside ``size`` (into the padding)."""
    return sum(1 for o in range(out) if o * stride - pad < 0 or o * stride - pad + kernel > size)


def step_features(kind: str, op: Op | None, in_shape: tuple[int, ...]) -> dict[str, float]:
    """Counts of one step's loop nest in the fast kernels, the variables of its model.

    Parameters
    ----------
    kind : str
        ``input``, ``head`` or one of :data:`STEP_KINDS`.
    op : Op or None
        The op (None for the input step).
    in_shape : tuple
        The step's input shape (for the input step, the image's).

    Notes
    -----
    Convolution (:mod:`tinyconv.export.c_fast`): ``n = oh ow`` output pixels in
    ``ceil(n / 2)`` pairs; per pixel a patch of ``k`` kernel rows whose values
    inside the image are copied (``vy vx c`` in all, with ``vy = sum_oy (rows
    of the kernel inside)``, likewise ``vx``); per pair of pixels and pair of
    filters ``K // 4`` steps of four values and ``K % 4`` single ones, ``K = k k
    c``; one requantisation per output. Dense: pairs of outputs, steps of four
    inputs, single ones. Depthwise: blocks of four channels per pixel, kernel
    rows inside, products inside, and the padding's taps of edge pixels.
    Residual addition: the values of its output.
    """
    if kind == "input":
        # the loop indexes the table by ``i % c``: free for one channel, a mask for a
        # power of two, a multiply for the others
        n, c = float(prod(in_shape)), in_shape[-1]
        return {"one": 1.0, "values": n, "channel_index": n if c & (c - 1) else 0.0}
    if kind in ("dense", "head"):
        n_in, n_out = prod(op.in_shape), prod(op.out_shape)
        pairs = -(-n_out // 2)
        return {"one": 1.0, "outputs": float(n_out), "pairs": float(pairs),
                "steps4": float(pairs * (n_in // 4)), "singles": float(pairs * (n_in % 4))}
    if kind == "gap":
        h, w, c = op.in_shape
        return {"one": 1.0, "outputs": float(c), "reads": float(h * w * c)}
    if kind == "add":
        # one pass over the values, three fixed-point rescalings each
        return {"one": 1.0, "values": float(prod(op.out_shape))}
    if kind in ("maxpool", "avgpool"):
        oh, ow, c = op.out_shape
        size = op.size
        feats = {"one": 1.0, "pixels": float(oh * ow), "outputs": float(oh * ow * c)}
        if kind == "maxpool" and size == 2:
            feats["outputs_by_2"] = float(oh * ow * c)
        else:
            feats["reads"] = float(oh * ow * c * size * size)
            feats["rows"] = float(oh * ow * c * size)
        return feats
    h, w, c = op.in_shape
    oh, ow, f = op.out_shape
    k, s = op.kernel, op.stride
    top, _, left, _ = op.pads
    vy = _visited(h, oh, k, s, top)
    vx = _visited(w, ow, k, s, left)
    n = oh * ow
    if kind == "conv":
        kk = k * k * c
        pixel_pairs, filter_pairs = -(-n // 2), f // 2
        odd = f % 2
        return {"one": 1.0, "pixel_pairs": float(pixel_pairs), "patch_rows": float(n * k),
                "patch_values": float(vy * vx * c),
                "blocks": float(pixel_pairs * filter_pairs),
                "steps4": float(pixel_pairs * filter_pairs * (kk // 4)),
                "singles": float(pixel_pairs * filter_pairs * (kk % 4)),
                "odd_steps4": float(pixel_pairs * odd * (kk // 4)),
                "odd_singles": float(pixel_pairs * odd * (kk % 4)),
                "outputs": float(n * f)}
    # dwconv: blocks of four channels, the channel loop innermost
    blocks = -(-c // 4)
    full = c // 4
    edge = (_edge_positions(h, oh, k, s, top) * ow + _edge_positions(w, ow, k, s, left) * oh
            - _edge_positions(h, oh, k, s, top) * _edge_positions(w, ow, k, s, left))
    return {"one": 1.0, "pixels": float(n), "blocks": float(n * blocks),
            "rows": float(vy * ow * blocks), "taps4": float(vy * vx * full),
            "taps_rest": float(vy * vx * (c - 4 * full)),
            "edge_taps": float(edge * k * k * blocks), "outputs": float(n * c)}


@dataclass(frozen=True)
class StepCost:
    """One step of the C: its cost-table row index (0 is the input), name, kind and
    the model's instructions."""

    row: int
    name: str
    kind: str
    instructions: float


def device_steps(arch: Union[Arch, str], n_classes: int) -> list[tuple[int, str, str, Op | None,
                                                                         tuple[int, ...]]]:
    """``(row, name, kind, op, in_shape)`` of each step the generated C runs.

    ``row`` indexes :attr:`tinyconv.cost.Cost.rows` (0: the input quantisation,
    ``i + 1``: ``expand(...)[i]``); the last dense op is the ``head``.
    """
    arch = parse(arch) if isinstance(arch, str) else arch
    ops = expand(arch, n_classes)
    out = [(0, "input", "input", None, arch.input.shape)]
    last = max(i for i, op in enumerate(ops) if op.kind == "dense")
    for i, op in enumerate(ops):
        if op.kind in STEP_KINDS:
            out.append((i + 1, op.name, "head" if i == last else op.kind, op, op.in_shape))
    return out


@lru_cache(maxsize=1)
def load_constants() -> dict:
    """The fitted constants (``constants.json``): per core, per step kind, coefficients."""
    text = resources.files("tinyconv.device").joinpath(CONSTANTS_FILE).read_text()
    return json.loads(text)


def core_constants(core: Core) -> dict:
    table = load_constants()["cores"]
    if core.name not in table:
        raise InputError(f"no fitted time model for {core.name}; run "
                         "`python -m tinyconv.device.refit` to fit one")
    return table[core.name]


def step_instructions(kind: str, features: dict[str, float], coef: dict) -> float:
    """The model's instructions of one step: sum of coefficient x count."""
    weights = coef["steps"][kind]
    return sum(weights.get(name, 0.0) * value for name, value in features.items())


@dataclass(frozen=True)
class DeviceEstimate:
    """The model's figures for one network on one core.

    Attributes
    ----------
    core : str
    instructions : int
        Per image, whole ``classify`` call.
    flash_bytes : int
        Constant arrays (exact) + code (fitted).
    flash_data_bytes, flash_code_bytes : int
    ram_bytes : int
        Static activation buffer (exact) + stack bound.
    ram_static_bytes, stack_bytes : int
    steps : tuple of StepCost
    """

    core: str
    instructions: int
    flash_bytes: int
    flash_data_bytes: int
    flash_code_bytes: int
    ram_bytes: int
    ram_static_bytes: int
    stack_bytes: int
    steps: tuple[StepCost, ...]

    def ms(self, core: Core, clock_mhz: float | None = None) -> float:
        return milliseconds(self.instructions, core, clock_mhz)

    def brief(self) -> dict:
        """The three figures a measurement is compared with."""
        return {"instructions": self.instructions, "flash_bytes": self.flash_bytes,
                "ram_bytes": self.ram_bytes}


def code_bytes(kinds: list[str], coef: dict) -> float:
    """Fitted code size of a classifier whose steps have these kinds."""
    code = coef["code"]
    used = {kernel for kind in kinds for kernel in KERNELS[kind]}
    return (code["base"] + sum(code["kernel"][k] for k in used)
            + sum(code["call"][kind] for kind in kinds))


def estimate(arch: Union[Arch, str], n_classes: int, core: Union[Core, str]) -> DeviceEstimate:
    """Instructions, flash and RAM of ``arch``'s generated C on ``core``, from the model.

    Raises
    ------
    ArchError, InputError
        For a bad architecture, number of classes or core.
    """
    core = core_named(core) if isinstance(core, str) else core
    coef = core_constants(core)
    cost = cost_of(arch, n_classes)
    steps = []
    for row, name, kind, op, in_shape in device_steps(arch, n_classes):
        steps.append(StepCost(row, name, kind,
                              step_instructions(kind, step_features(kind, op, in_shape), coef)))
    total = coef["call"] + sum(s.instructions for s in steps)
    code = code_bytes([s.kind for s in steps], coef)
    data = cost.flash_bytes
    stack = int(coef["stack_bytes"])
    return DeviceEstimate(core.name, int(round(total)), int(round(data + code)), data,
                          int(round(code)), cost.peak_int8_bytes + stack, cost.peak_int8_bytes,
                          stack, tuple(steps))


def instructions_of(arch: Union[Arch, str], n_classes: int, core: Union[Core, str]) -> int:
    """The model's instructions per image alone (what a time budget filters on)."""
    core = core_named(core) if isinstance(core, str) else core
    coef = core_constants(core)
    total = coef["call"] + sum(step_instructions(kind, step_features(kind, op, in_shape), coef)
                               for _, _, kind, op, in_shape in device_steps(arch, n_classes))
    return int(round(total))


def time_ms(arch: Union[Arch, str], n_classes: int, core: Union[Core, str],
            clock_mhz: float | None = None) -> float:
    """Modelled milliseconds per image on ``core`` at ``clock_mhz`` (its assumed CPI)."""
    core = core_named(core) if isinstance(core, str) else core
    return milliseconds(instructions_of(arch, n_classes, core), core, clock_mhz)
