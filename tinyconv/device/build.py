"""Build the classifier and the test program into an ELF for one core, and run it.

Compiled as a user would build the exported C: the classifier as its own
translation unit with ``arm-none-eabi-gcc -std=c99`` at the chosen
optimisation level, ``-ffunction-sections -fdata-sections`` and
``--gc-sections`` at link time, the newlib C library for ``memcpy`` and libgcc
for 64-bit division. The run is ``qemu-system-arm -icount shift=0`` with
semihosting on, so instruction counts repeat exactly from run to run.
"""

from __future__ import annotations

import subprocess
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from tinyconv.device import harness
from tinyconv.device.cores import Core
from tinyconv.device.toolchain import INSTALL, Toolchain, ToolMissing, missing_newlib
from tinyconv.errors import InputError
from tinyconv.export.c_writer import CCode

#: optimisation levels a build may use
OPT_LEVELS = ("-O0", "-O1", "-O2", "-O3", "-Os")
C_FLAGS = ("-std=c99", "-Wall", "-ffunction-sections", "-fdata-sections")


class DeviceError(InputError):
    """A build or emulator run that failed for a reason the user can act on."""


@dataclass(frozen=True)
class Output:
    """What the test program printed, parsed.

    Attributes
    ----------
    ticks : ndarray of int64, shape (n,)
        SysTick ticks of each ``classify`` call.
    classes : ndarray of int64, shape (n,)
    logits : ndarray of int8, shape (n, K)
    stack_bytes : int
        Deepest stack the classifier used over all images.
    marks : ndarray of int64, shape (n, steps + 1) or None
        Ticks from the call's start to the start of each step and to the end.
    mark_ticks : int
        Ticks of an empty pair of marks (taken out of each step's figure).
    """

    ticks: np.ndarray
    classes: np.ndarray
    logits: np.ndarray
    stack_bytes: int
    marks: np.ndarray | None
    mark_ticks: int


def _run(cmd: list[str], cwd: Path, what: str, timeout: float = 300.0) -> str:
    try:
        done = subprocess.run(cmd, cwd=cwd, capture_output=True, text=True, timeout=timeout)
    except subprocess.TimeoutExpired:
        raise DeviceError(f"{what} did not finish within {timeout:.0f} s: {' '.join(cmd)}; "
                          "try fewer images (--images) or a smaller network") from None
    if done.returncode != 0:
        err = done.stderr.strip() or done.stdout.strip()
        if missing_newlib(err):
            raise ToolMissing(f"the Arm C library (newlib) is missing: {err.splitlines()[0]}; "
                              f"install it with `{INSTALL}`")
        if "will not fit" in err or "overflowed" in err or "do not fit" in err:
            raise DeviceError(f"the network does not fit the emulated board's 4 MB of code "
                              f"or data memory ({what}): {err.splitlines()[-1]}; measure a "
                              "smaller network")
        raise DeviceError(f"{what} failed (exit {done.returncode}) in {cwd}:\n{err[-2000:]}")
    return done.stdout


def build_elf(tools: Toolchain, code: CCode, images: np.ndarray, n_steps: int, core: Core,
              workdir: Path, marks: bool = False, opt: str = "-O2",
              extra_flags: tuple[str, ...] = ()) -> Path:
    """Write every source into ``workdir``, compile and link; returns the ELF's path.

    Parameters
    ----------
    tools : Toolchain
    code : CCode
        The generated classifier.
    images : ndarray of uint8, shape (n, h, w, c)
        Embedded in the test program as constant data.
    n_steps : int
        Steps of the classifier, the input step included.
    core : Core
    workdir : Path
        Created if missing; keeps every file of the build.
    marks : bool
        Bind the classifier's step marks to the tick recorder.
    opt : str
        One of :data:`OPT_LEVELS`.
    extra_flags : tuple of str
        Further compiler flags (e.g. a macro the classifier reads).
    """
    if opt not in OPT_LEVELS:
        raise InputError(f"optimisation level {opt!r} is not one of {', '.join(OPT_LEVELS)}")
    workdir.mkdir(parents=True, exist_ok=True)
    p = code.prefix
    files = {f"{p}.c": code.source, f"{p}.h": code.header, "board.h": harness.BOARD_H,
             "board.c": harness.board_c(), "board.ld": harness.linker_script(core),
             "main.c": harness.main_c(p, images, n_steps, marks),
             "marks.h": harness.marks_h(p)}
    for name, text in files.items():
        (workdir / name).write_text(text)
    flags = [tools.gcc, *core.gcc_flags, *C_FLAGS, opt, *extra_flags]
    classifier = [*flags, "-c", f"{p}.c", "-o", f"{p}.o"]
    if marks:
        classifier[1:1] = ["-include", "marks.h"]
    _run(classifier, workdir, f"compiling {p}.c for {core.name}")
    _run([*flags, "-c", "main.c", "-o", "main.o"], workdir, "compiling the test program")
    _run([*flags, "-c", "board.c", "-o", "board.o"], workdir, "compiling the start-up code")
    elf = f"{p}_{core.name}{'_marks' if marks else ''}.elf"
    _run([tools.gcc, *core.gcc_flags, "-nostartfiles", "-T", "board.ld", "-Wl,--gc-sections",
          "main.o", "board.o", f"{p}.o", "-o", elf, "-lc", "-lgcc"], workdir,
         f"linking for {core.board}")
    return workdir / elf


def run_elf(tools: Toolchain, elf: Path, core: Core, n_images: int, n_classes: int,
            timeout: float = 600.0) -> Output:
    """Run ``elf`` on the core's board with exact instruction counting; parse its output."""
    out_file = elf.with_suffix(".out")
    out_file.unlink(missing_ok=True)
    # the program's output goes to a file of its own, QEMU's messages to stderr
    cmd = [tools.qemu, "-M", core.board, "-nographic", "-monitor", "none", "-serial", "none",
           "-icount", "shift=0", "-chardev", f"file,id=board,path={out_file.name}",
           "-semihosting-config", "enable=on,target=native,chardev=board",
           "-kernel", elf.name]
    _run(cmd, elf.parent, f"running {elf.name} on {core.board}", timeout)
    text = out_file.read_text() if out_file.exists() else ""
    ticks, classes, logits, marks = [], [], [], []
    stack = mark_ticks = None
    ended = False
    for line in text.splitlines():
        parts = line.split()
        if not parts:
            continue
        tag, values = parts[0], [int(v) for v in parts[1:] if v.lstrip("-").isdigit()]
        if tag == "I":
            ticks.append(values[1])
            classes.append(values[2])
            logits.append(values[3:])
        elif tag == "M":
            marks.append(values[1:])
        elif tag == "S":
            stack = values[0]
        elif tag == "H":
            mark_ticks = values[0]
        elif tag == "E":
            ended = True
        elif tag == "F":
            raise DeviceError(f"the program faulted on {core.board} ({elf}); this is a bug "
                              "in the generated C or the harness: please report it")
    if not ended or len(ticks) != n_images or stack is None:
        raise DeviceError(f"the emulator's output from {elf} is incomplete ({len(ticks)} of "
                          f"{n_images} images): {text[-500:]!r}")
    logit_array = np.array(logits, np.int64)
    if logit_array.shape != (n_images, n_classes):
        raise DeviceError(f"expected {n_classes} logits per image from {elf}, got "
                          f"{logit_array.shape[1:]}")
    return Output(np.array(ticks, np.int64), np.array(classes, np.int64),
                  logit_array.astype(np.int8), int(stack),
                  np.array(marks, np.int64) if marks else None, int(mark_ticks or 0))


def symbol_sizes(tools: Toolchain, elf: Path, prefix: str) -> dict[str, tuple[str, int]]:
    """``{name: (nm type letter, bytes)}`` of the classifier's symbols (``prefix_*``)."""
    text = _run([tools.nm, "-S", "--defined-only", elf.name], elf.parent, "reading symbols")
    out = {}
    for line in text.splitlines():
        parts = line.split()
        if len(parts) == 4 and parts[3].startswith(prefix + "_"):
            out[parts[3]] = (parts[2], int(parts[1], 16))
    return out
