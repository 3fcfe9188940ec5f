"""The Cortex-M cores a network can be measured on, and what is assumed of each.

QEMU counts instructions, not cycles. The time of an image on a real part is
``instructions x cycles-per-instruction / clock``; the cycles-per-instruction
figure of each core below is an **assumption** (recalled from memory of
published figures for integer loop code on these cores, not measured here) and
is printed beside every time the tool shows. The default clock is a common
clock of parts built on the core (also an assumption); give the part's own
with ``--clock-mhz``.

Memory maps of the emulated boards (QEMU's MPS2 models): AN385, AN386 and
AN500 have 4 MB of code memory at 0x00000000 and 4 MB of data memory at
0x20000000; AN505 (TrustZone) starts in the secure state, with the secure
aliases of its code memory at 0x10000000 and of its data memory at 0x38000000.
The SysTick timer counts the board clock: 25 MHz on the MPS2 boards and
20 MHz on AN505, so with ``-icount shift=0`` (one nanosecond of virtual time
per instruction) one tick is 40 or 50 instructions; a test checks this with a
loop of known length.
"""

from __future__ import annotations

from dataclasses import dataclass

from tinyconv.errors import InputError


@dataclass(frozen=True)
class Core:
    """One supported core and the emulated board it runs on.

    Attributes
    ----------
    name : str
        ``cortex-m3`` etc. (the name GCC's ``-mcpu`` takes).
    board : str
        QEMU machine (``-M``).
    rom, ram : int
        Start addresses of the board's code and data memory (4 MB each).
    tick_instructions : int
        Instructions per SysTick tick under ``-icount shift=0``.
    cpi : float
        Assumed cycles per instruction on a real part (see the module text).
    clock_mhz : float
        Assumed default clock of a part with this core.
    dsp : bool
        Whether the core has the DSP extension (dual 16-bit multiply-accumulate).
    """

    name: str
    board: str
    rom: int
    ram: int
    tick_instructions: int
    cpi: float
    clock_mhz: float
    dsp: bool

    @property
    def gcc_flags(self) -> tuple[str, ...]:
        """Flags that make ``arm-none-eabi-gcc`` generate code for this core."""
        return (f"-mcpu={self.name}", "-mthumb", "-mfloat-abi=soft")


MB = 1024 * 1024
#: size of each of the boards' code and data memories
BOARD_MEMORY = 4 * MB

CORES: dict[str, Core] = {c.name: c for c in (
    Core("cortex-m3", "mps2-an385", 0x00000000, 0x20000000, 40, cpi=1.3, clock_mhz=72.0,
         dsp=False),
    Core("cortex-m4", "mps2-an386", 0x00000000, 0x20000000, 40, cpi=1.3, clock_mhz=80.0,
         dsp=True),
    Core("cortex-m7", "mps2-an500", 0x00000000, 0x20000000, 40, cpi=0.9, clock_mhz=216.0,
         dsp=True),
    Core("cortex-m33", "mps2-an505", 0x10000000, 0x38000000, 50, cpi=1.25, clock_mhz=110.0,
         dsp=True),
)}


def core_named(name: str) -> Core:
    """The :class:`Core` called ``name`` (case-insensitive; ``m4`` means ``cortex-m4``)."""
    if not isinstance(name, str):
        raise InputError(f"core must be a name such as 'cortex-m4', got {type(name).__name__}")
    key = name.strip().lower()
    if not key.startswith("cortex-"):
        key = "cortex-" + key
    if key not in CORES:
        raise InputError(f"core {name!r} is not supported; use one of "
                         f"{', '.join(CORES)} (e.g. --core cortex-m4)")
    return CORES[key]


def check_clock(mhz: float) -> float:
    """A clock in MHz: a finite number above 0 and at most 2,000."""
    try:
        value = float(mhz)
    except (TypeError, ValueError):
        raise InputError(f"clock {mhz!r} is not a number of MHz; e.g. 80") from None
    if not 0 < value <= 2000:
        raise InputError(f"clock {value:g} MHz is outside (0, 2000]; give the part's clock "
                         "in MHz, e.g. 80")
    return value


def milliseconds(instructions: float, core: Core, clock_mhz: float | None = None) -> float:
    """``instructions x cpi / clock``, in milliseconds (the core's assumptions)."""
    mhz = core.clock_mhz if clock_mhz is None else clock_mhz
    return instructions * core.cpi / (mhz * 1000.0)
