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
from typing import Union

from tinyconv.arch import Arch, Op, expand, parse
from tinyconv.cost import cost_of, writes_buffer
from tinyconv.device.cores import Core, core_named, milliseconds
from tinyconv.device.features import step_model
from tinyconv.errors import InputError

CONSTANTS_FILE = "constants.json"


def step_features(kind: str, op: Op | None, in_shape: tuple[int, ...]) -> dict[str, float]:
    """Counts of one step's loop nest in the fast kernels, the variables of its model.

    Parameters
    ----------
    kind : str
        ``input``, ``head`` or a step kind of :data:`~tinyconv.device.features.STEP_MODELS`.
    op : Op or None
        The op (None for the input step).
    in_shape : tuple
        The step's input shape (for the input step, the image's).

    Notes
    -----
    Convolution (:mod:`tinyconv.export.c_fast_conv`): ``n = oh ow`` output
    pixels in ``ceil(n / 2)`` pairs; per pixel a patch whose values inside the
    image are copied (``vy vx c`` in all, with ``vy = sum_oy (rows of the
    kernel inside)``, likewise ``vx``): by table for a short ``K = k k c``
    whose kernel rows do not fill groups of four (a window reaching into the
    padding by the same table, testing each tap), else row by row; per pair of
    pixels and pair of filters ``ceil(K / 4)`` groups of four values (``K``
    padded with zeros), two a turn; one requantisation per output. Dense: pairs of
    outputs, steps of four inputs, single ones. Depthwise: blocks of four
    channels per pixel, kernel rows and taps inside (a whole row of a 3-wide
    window written out), and the padding's taps of edge pixels.
    Residual addition: the values of its output.
    """
    return step_model(kind).features(op, in_shape)


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
        if writes_buffer(op.kind):
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
    used = {kernel for kind in kinds for kernel in step_model(kind).kernels}
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
