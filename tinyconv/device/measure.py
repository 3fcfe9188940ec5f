"""Measure a quantised network on an emulated core: instructions, flash, RAM, bit-exactness.

One measurement builds two programs from the same generated C: a plain one,
whose ``classify`` calls give the instructions per image, and one with the
step marks bound, which gives the instructions of each step (the marks add a
few instructions per step, so the plain build is the figure of record).

* instructions = SysTick ticks x the core's instructions per tick (exact under
  ``-icount shift=0`` up to one tick: 40 or 50 instructions);
* flash = the bytes of the classifier's own symbols in the linked ELF (its
  code and constant arrays, ``arm-none-eabi-nm -S``), without the test program
  and the C library;
* RAM = its static buffers plus the deepest stack a ``classify`` call used
  (found by painting the stack before each call, common practice);
* bit-exact = every logit and class equals the NumPy integer reference.
"""

from __future__ import annotations

import tempfile
from dataclasses import asdict, dataclass, field
from pathlib import Path

import numpy as np

from tinyconv.device.build import build_elf, run_elf, symbol_sizes
from tinyconv.device.cores import Core, milliseconds
from tinyconv.device.model import device_steps
from tinyconv.device.toolchain import Toolchain, find_toolchain
from tinyconv.export.c_writer import generate_c
from tinyconv.quant.integer import int8_outputs
from tinyconv.quant.quantize import QuantizedNetwork

# arm-none-eabi-nm symbol types: code, read-only data (constants), zeroed and initialised data
TEXT_TYPES = frozenset("tT")
CONST_TYPES = frozenset("rR")
DATA_TYPES = frozenset("bBdD")


@dataclass(frozen=True)
class StepFigure:
    """One step of the classifier as measured: ``name`` and ``kind`` as in the cost
    table (``input`` for the input quantisation), and its instructions per image."""

    name: str
    kind: str
    instructions: int


@dataclass(frozen=True)
class Measurement:
    """What one network did on one emulated core.

    Attributes
    ----------
    core, board : str
    opt : str
        Compiler optimisation level.
    images : int
        Images classified.
    instructions : int
        Mean instructions per image (whole ``classify`` call).
    instructions_min, instructions_max : int
        Over the images.
    macs : int
        Multiply-accumulates per image (cost model).
    flash_bytes, flash_code_bytes, flash_data_bytes : int
        The classifier's code + constant arrays, and each part.
    ram_bytes, ram_static_bytes, stack_bytes : int
        Static buffers + deepest stack, and each part.
    bit_exact : bool
        Every logit and class equals the integer reference.
    mismatched_images : int
    steps : tuple of StepFigure
        Per step, from the marked build (empty when not measured).
    """

    core: str
    board: str
    opt: str
    images: int
    instructions: int
    instructions_min: int
    instructions_max: int
    macs: int
    flash_bytes: int
    flash_code_bytes: int
    flash_data_bytes: int
    ram_bytes: int
    ram_static_bytes: int
    stack_bytes: int
    bit_exact: bool
    mismatched_images: int
    steps: tuple[StepFigure, ...] = field(default=())

    @property
    def instructions_per_mac(self) -> float:
        return self.instructions / self.macs if self.macs else float("nan")

    def ms_at(self, core: Core, clock_mhz: float | None = None) -> float:
        """Milliseconds per image on a part with this core (its assumed CPI and clock)."""
        return milliseconds(self.instructions, core, clock_mhz)

    def to_dict(self) -> dict:
        out = asdict(self)
        out["steps"] = [asdict(s) for s in self.steps]
        return out


#: room the test program, its images and the C library take beside the classifier
HARNESS_ROOM = 256 * 1024


def check_fits(qnet: QuantizedNetwork) -> None:
    """Refuse, before writing any C, a network the emulated board cannot hold."""
    from tinyconv.cost import cost_of
    from tinyconv.device.build import DeviceError
    from tinyconv.device.cores import BOARD_MEMORY
    from tinyconv.device.harness import STACK_BYTES

    cost = cost_of(qnet.arch, qnet.n_classes)
    if cost.flash_bytes > BOARD_MEMORY - HARNESS_ROOM:
        raise DeviceError(f"{qnet.arch} needs {cost.flash_bytes:,} bytes of constants, more "
                          f"than the emulated board's {BOARD_MEMORY // 1024 // 1024} MB of "
                          "code memory holds beside the test program; measure a smaller "
                          "network")
    if cost.peak_int8_bytes > BOARD_MEMORY - STACK_BYTES - HARNESS_ROOM:
        raise DeviceError(f"{qnet.arch} needs {cost.peak_int8_bytes:,} bytes of activations, "
                          f"more than the emulated board's {BOARD_MEMORY // 1024 // 1024} MB of "
                          "data memory holds; measure a smaller network or input")


def measure(qnet: QuantizedNetwork, images: np.ndarray, core: Core, *, prefix: str = "tc",
            opt: str = "-O2", steps: bool = True, workdir: Path | None = None,
            tools: Toolchain | None = None, macs: int | None = None,
            extra_flags: tuple[str, ...] = (), style: str = "fast") -> Measurement:
    """Build ``qnet``'s C for ``core``, run it on ``images`` under QEMU and measure it.

    Parameters
    ----------
    qnet : QuantizedNetwork
    images : ndarray of uint8, shape (n, h, w, c)
        In the network's input size and colour mode; n >= 1.
    core : Core
    prefix : str
        Symbol prefix of the generated C.
    opt : str
        Compiler optimisation level (``-O2`` by default).
    steps : bool
        Also build the marked program and measure each step.
    workdir : Path, optional
        Keep the build here; a temporary folder otherwise.
    tools : Toolchain, optional
        Found on PATH when not given (:class:`ToolMissing` when absent).
    macs : int, optional
        MACs per image, for ``instructions_per_mac``.
    extra_flags : tuple of str
        Further compiler flags (e.g. ``-DTC_USE_DSP=0`` for the portable C).
    style : {"fast", "plain"}
        The generated kernels (:func:`tinyconv.export.c_writer.generate_c`).
    """
    tools = tools or find_toolchain()
    images = np.ascontiguousarray(images, np.uint8)
    if images.ndim != 4 or images.shape[1:] != tuple(qnet.input_shape) or not len(images):
        raise ValueError(f"images of shape {images.shape} for a network of input "
                         f"{qnet.input_shape}")
    check_fits(qnet)
    code = generate_c(qnet, prefix, style=style)
    names = [(name, kind) for _, name, kind, _, _ in device_steps(qnet.arch, qnet.n_classes)]
    want_logits, want_classes = int8_outputs(qnet, images)
    with tempfile.TemporaryDirectory(prefix="tinyconv-device-") as tmp:
        folder = Path(workdir) if workdir is not None else Path(tmp)
        elf = build_elf(tools, code, images, len(names), core, folder, opt=opt,
                        extra_flags=extra_flags)
        out = run_elf(tools, elf, core, len(images), qnet.n_classes)
        symbols = symbol_sizes(tools, elf, prefix)
        step_figures: tuple[StepFigure, ...] = ()
        if steps:
            marked = build_elf(tools, code, images, len(names), core, folder, marks=True,
                               opt=opt, extra_flags=extra_flags)
            mout = run_elf(tools, marked, core, len(images), qnet.n_classes)
            # ticks between consecutive marks, less the cost of a mark, averaged over images
            spans = np.diff(mout.marks, axis=1) - mout.mark_ticks
            per_step = np.maximum(spans.mean(axis=0), 0) * core.tick_instructions
            step_figures = tuple(StepFigure(n, k, int(round(v)))
                                 for (n, k), v in zip(names, per_step))
    wrong = (out.logits != want_logits).any(axis=1) | (out.classes != want_classes)
    code_bytes = sum(size for kind, size in symbols.values() if kind in TEXT_TYPES)
    data_bytes = sum(size for kind, size in symbols.values() if kind in CONST_TYPES)
    static_bytes = sum(size for kind, size in symbols.values() if kind in DATA_TYPES)
    instr = out.ticks * core.tick_instructions
    return Measurement(core=core.name, board=core.board, opt=opt, images=len(images),
                       instructions=int(round(instr.mean())),
                       instructions_min=int(instr.min()), instructions_max=int(instr.max()),
                       macs=int(macs or 0),
                       flash_bytes=code_bytes + data_bytes, flash_code_bytes=code_bytes,
                       flash_data_bytes=data_bytes,
                       ram_bytes=static_bytes + out.stack_bytes, ram_static_bytes=static_bytes,
                       stack_bytes=out.stack_bytes, bit_exact=not wrong.any(),
                       mismatched_images=int(wrong.sum()), steps=step_figures)


def random_network(arch, n_classes: int, seed: int = 0, n_images: int = 64):
    """A quantised network with seeded random weights, and images to run it on.

    Weights are the engine's He initialisation, biases and batch-norm
    statistics drawn at random (so no layer is trivially zero), the input
    normalisation centred on mid-grey, and the images smooth random fields
    (a random level per image plus noise), which calibrate the activations.

    Returns
    -------
    qnet : QuantizedNetwork
    images : ndarray of uint8, shape (n_images, h, w, c)
    """
    from tinyconv.network import Network
    from tinyconv.quant import quantize_network

    rng = np.random.default_rng(seed)
    net = Network.from_arch(arch, n_classes, seed=seed)
    for layer in net.layers:
        params = getattr(layer, "params", None) or {}
        if "b" in params:
            params["b"][...] = rng.normal(0.0, 0.1, params["b"].shape)
        if "beta" in params:
            params["beta"][...] = rng.normal(0.0, 0.3, params["beta"].shape)
            params["gamma"][...] = rng.uniform(0.5, 1.5, params["gamma"].shape)
        state = getattr(layer, "state", None) or {}
        if "mean" in state:
            state["mean"][...] = rng.normal(0.0, 0.3, state["mean"].shape)
            state["var"][...] = rng.uniform(0.3, 2.0, state["var"].shape)
    h, w, c = net.arch.input.shape
    base = rng.uniform(0, 255, (n_images, 1, 1, c)) + rng.normal(0, 40, (n_images, h, w, c))
    images = np.clip(base, 0, 255).astype(np.uint8)
    qnet = quantize_network(net, np.full(c, 0.5), np.full(c, 0.25), images)
    return qnet, images

