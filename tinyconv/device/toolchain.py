"""Finding the Arm cross-compiler and the emulator, or saying how to install them."""

from __future__ import annotations

import shutil
from dataclasses import dataclass

from tinyconv.errors import InputError

#: the tools and the Debian packages that bring them
TOOLS = {"arm-none-eabi-gcc": "gcc-arm-none-eabi", "arm-none-eabi-nm": "binutils-arm-none-eabi",
         "qemu-system-arm": "qemu-system-arm"}
PACKAGES = ("gcc-arm-none-eabi", "libnewlib-arm-none-eabi", "qemu-system-arm")
INSTALL = "apt-get install -y " + " ".join(PACKAGES)


class ToolMissing(InputError):
    """The cross-compiler, its C library or the emulator is not installed."""


@dataclass(frozen=True)
class Toolchain:
    """Paths of the programs a device measurement runs."""

    gcc: str
    nm: str
    qemu: str


def find_toolchain() -> Toolchain:
    """The installed tools, or :class:`ToolMissing` naming the Debian packages."""
    found = {tool: shutil.which(tool) for tool in TOOLS}
    missing = [tool for tool, path in found.items() if path is None]
    if missing:
        raise ToolMissing(f"{', '.join(missing)} not found on PATH: device measurement needs "
                          f"the Arm cross-compiler, its C library and QEMU; on Debian or "
                          f"Ubuntu install them with `{INSTALL}` (as root)")
    return Toolchain(found["arm-none-eabi-gcc"], found["arm-none-eabi-nm"],
                     found["qemu-system-arm"])


def missing_newlib(stderr: str) -> bool:
    """Whether a link error means the C library for the cross-compiler is absent."""
    return "cannot find -lc" in stderr or "stdint.h: No such file" in stderr
