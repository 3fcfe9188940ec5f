"""A device measurement beside the model's estimate: one record, as JSON and as text.

The record's top-level keys are what ``tinyconv emulate --json`` prints and
``device.json`` holds: ``core``, ``board``, ``clock_mhz``, ``cpi``,
``instructions``, ``instructions_per_mac``, ``ms_at_clock``, ``flash_bytes``,
``ram_bytes``, ``bit_exact`` and ``estimate`` (``instructions``,
``flash_bytes``, ``ram_bytes`` of the cost model), with the details beside
them (the parts of flash and RAM, per-step instructions measured and modelled).
"""

from __future__ import annotations

from tinyconv.cost import cost_of
from tinyconv.device.cores import Core, milliseconds
from tinyconv.device.measure import Measurement
from tinyconv.device.model import DeviceEstimate, estimate


def device_record(m: Measurement, arch: str, n_classes: int, core: Core,
                  clock_mhz: float | None = None, source: str = "random weights") -> dict:
    """The JSON-ready record of one measurement and the model's estimate of it."""
    clock = core.clock_mhz if clock_mhz is None else float(clock_mhz)
    est: DeviceEstimate = estimate(arch, n_classes, core)
    model_steps = {s.row: s for s in est.steps}
    rows = [s.row for s in est.steps]
    steps = []
    for row, fig in zip(rows, m.steps):
        steps.append({"name": fig.name, "kind": fig.kind, "instructions": fig.instructions,
                      "estimate": int(round(model_steps[row].instructions))})
    return {
        "arch": arch, "classes": n_classes, "weights": source,
        "core": core.name, "board": core.board, "compiler_opt": m.opt,
        "clock_mhz": clock, "cpi": core.cpi, "cpi_note": "assumed cycles per instruction "
        "on a real part (QEMU counts instructions, not cycles)",
        "images": m.images, "macs": m.macs or cost_of(arch, n_classes).macs,
        "instructions": m.instructions, "instructions_min": m.instructions_min,
        "instructions_max": m.instructions_max,
        "instructions_per_mac": round(m.instructions / max(m.macs, 1), 3),
        "ms_at_clock": round(milliseconds(m.instructions, core, clock), 4),
        "flash_bytes": m.flash_bytes, "flash_code_bytes": m.flash_code_bytes,
        "flash_data_bytes": m.flash_data_bytes,
        "ram_bytes": m.ram_bytes, "ram_static_bytes": m.ram_static_bytes,
        "stack_bytes": m.stack_bytes,
        "bit_exact": m.bit_exact, "mismatched_images": m.mismatched_images,
        "estimate": est.brief() | {"ms_at_clock": round(est.ms(core, clock), 4),
                                   "flash_code_bytes": est.flash_code_bytes,
                                   "stack_bytes": est.stack_bytes},
        "steps": steps,
    }


def _diff(measured: float, model: float) -> str:
    return f"{(model - measured) / measured:+.1%}" if measured else ""


def record_lines(rec: dict) -> list[str]:
    """The record as the lines ``tinyconv emulate`` prints."""
    est = rec["estimate"]
    out = [f"{rec['core']} on QEMU {rec['board']} (arm-none-eabi-gcc {rec['compiler_opt']}): "
           f"{rec['arch']}, {rec['classes']} classes, {rec['weights']}, {rec['images']} images",
           f"  {'':22s}{'measured':>14s}{'model':>14s}",
           f"  {'instructions / image':22s}{rec['instructions']:>14,d}{est['instructions']:>14,d}"
           f"  {_diff(rec['instructions'], est['instructions'])}",
           f"  {'instructions / MAC':22s}{rec['instructions_per_mac']:>14.2f}"
           f"{est['instructions'] / max(rec['macs'], 1):>14.2f}  ({rec['macs']:,d} MACs)",
           f"  {'ms at ' + format(rec['clock_mhz'], 'g') + ' MHz':22s}"
           f"{rec['ms_at_clock']:>14.3f}{est['ms_at_clock']:>14.3f}  assuming "
           f"{rec['cpi']:g} cycles per instruction",
           f"  {'flash bytes':22s}{rec['flash_bytes']:>14,d}{est['flash_bytes']:>14,d}  "
           f"{_diff(rec['flash_bytes'], est['flash_bytes'])} (code {rec['flash_code_bytes']:,d}"
           f" + constants {rec['flash_data_bytes']:,d})",
           f"  {'RAM bytes':22s}{rec['ram_bytes']:>14,d}{est['ram_bytes']:>14,d}  "
           f"(activations {rec['ram_static_bytes']:,d} + stack {rec['stack_bytes']:,d})",
           f"  bit-exact: {'yes' if rec['bit_exact'] else 'NO'}, "
           f"{rec['images'] - rec['mismatched_images']} of {rec['images']} images equal the "
           "NumPy integer reference"]
    if rec["steps"]:
        out.append(f"  {'step':24s}{'kind':>8s}{'measured':>14s}{'model':>14s}")
        for s in rec["steps"]:
            out.append(f"  {s['name']:24s}{s['kind']:>8s}{s['instructions']:>14,d}"
                       f"{s['estimate']:>14,d}")
    return out
