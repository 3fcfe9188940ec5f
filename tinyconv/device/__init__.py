"""The device: cross-compile the int8 C for a Cortex-M core, run it, measure it, model it.

* :mod:`~tinyconv.device.cores` — the supported cores, their emulated boards
  and the assumptions (cycles per instruction, default clock) stated beside them;
* :mod:`~tinyconv.device.toolchain` — finding the Arm cross-compiler and QEMU,
  with the Debian packages to install when they are missing;
* :mod:`~tinyconv.device.harness` — the start-up code, linker script and test
  program of ours that run the generated classifier on an emulated board;
* :mod:`~tinyconv.device.measure` — build, run under ``qemu-system-arm -icount
  shift=0``, read instruction counts, flash and RAM, check bit-exactness;
* :mod:`~tinyconv.device.model` — the time, flash and RAM model of the cost
  model, its constants fitted to emulator counts (``constants.json``, refitted
  by ``python -m tinyconv.device.refit``).
"""
