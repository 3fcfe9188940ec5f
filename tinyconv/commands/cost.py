"""``tinyconv cost ARCH``: the per-layer cost table of a network and its totals.

ARCH is a whole architecture text (``32x32rgb/c8k3-p2-gap``), an input alone
(``32x32rgb``: the classifier head only), or just the layers (``c8k3-p2-gap``),
which then read the input given by ``--input`` (32x32rgb when not given).
``--input`` also replaces the input of a whole text.
"""

from __future__ import annotations

import argparse
import dataclasses
import json
import sys


from tinyconv.commands._args import add_device_options
from tinyconv.arch import Arch, parse, parse_input
from tinyconv.cost import KB, cost_of, training_memory

DEFAULT_INPUT = "32x32rgb"
# table columns shown, and their headings
_COLUMNS = {"name": "layer", "kind": "op", "in_shape": "in", "out_shape": "out",
            "params": "params", "macs": "MACs", "flash_bytes": "flash B",
            "live_elements": "live int8 B", "scratch_bytes": "scratch B"}


def _classes(value: str) -> int:
    try:
        n = int(value)
    except ValueError:
        n = 0
    if n < 2:
        raise argparse.ArgumentTypeError(f"--classes {value!r}: must be an integer of at "
                                         "least 2 (the number of classes)")
    return n


def _batch(value: str) -> int:
    try:
        n = int(value)
    except ValueError:
        n = 0
    if n < 1:
        raise argparse.ArgumentTypeError(f"--batch {value!r}: must be a positive integer")
    return n


def configure(parser: argparse.ArgumentParser) -> None:
    """Add the options of ``tinyconv cost``."""
    parser.add_argument("arch", metavar="ARCH",
                        help="architecture text, e.g. 32x32rgb/c8k3-p2-c16k3-p2-gap, or just "
                             "the layers (c8k3-p2-gap) with --input")
    parser.add_argument("--input", metavar="SPEC", default=None,
                        help=f"input size and colour mode, e.g. 16x16gray (default "
                             f"{DEFAULT_INPUT}, or the one in ARCH)")
    parser.add_argument("--classes", type=_classes, default=8, metavar="K",
                        help="number of classes of the head (default 8)")
    parser.add_argument("--batch", type=_batch, default=64, metavar="N",
                        help="batch size for the training-memory figure (default 64)")
    add_device_options(parser, "also the modelled instructions and milliseconds per layer "
                       "on this core", "clock of the part for the milliseconds")
    parser.add_argument("--json", action="store_true",
                        help="print JSON (totals, rows, training memory) instead of a table")


def grid(columns: dict[str, list]) -> list[str]:
    """Columns as right-aligned text, one space apart, the headings on top."""
    texts = {h: [str(v) for v in vals] for h, vals in columns.items()}
    widths = {h: max([len(h)] + [len(v) for v in vals]) for h, vals in texts.items()}
    n = max((len(v) for v in texts.values()), default=0)
    lines = [" ".join(h.rjust(widths[h]) for h in texts)]
    lines += [" ".join(texts[h][i].rjust(widths[h]) for h in texts) for i in range(n)]
    return lines


def pairs(items: dict[str, str]) -> list[str]:
    """Names left-aligned, values right-aligned, four spaces between the columns."""
    kw = max(map(len, items), default=0)
    vw = max(map(len, items.values()), default=0)
    return [f"{k.ljust(kw)}    {v.rjust(vw)}" for k, v in items.items()]


def resolve_arch(text: str, input_spec: str | None) -> Arch:
    """The architecture ``text`` names, on ``input_spec`` when given.

    Raises
    ------
    ArchError
        For a bad text or input.
    """
    if "/" in text or text[:1].isdigit():
        arch = parse(text)
    else:
        arch = parse(f"{input_spec or DEFAULT_INPUT}/{text}")
    if input_spec is not None and str(arch.input) != input_spec:
        arch = parse(str(arch.with_input(parse_input(input_spec))))
    return arch


def run(args: argparse.Namespace) -> int:
    """Print the cost table (or JSON); returns 0."""
    from tinyconv.errors import InputError

    arch = resolve_arch(args.arch, args.input)
    cost = cost_of(arch, args.classes)
    memory = training_memory(arch, args.classes, args.batch)
    device = None
    if args.core is None and args.clock_mhz is not None:
        raise InputError("--clock-mhz needs --core (the time depends on the core); e.g. "
                         "--core cortex-m4 --clock-mhz 80")
    if args.core is not None:
        from tinyconv.device.cores import check_clock, core_named
        from tinyconv.device.model import estimate

        core = core_named(args.core)
        clock = check_clock(args.clock_mhz) if args.clock_mhz is not None else core.clock_mhz
        device = (core, clock, estimate(arch, args.classes, core))
    if args.json:
        data = cost.as_dict()
        data["training_memory"] = dataclasses.asdict(memory)
        if device is not None:
            core, clock, est = device
            data["device"] = {"core": core.name, "clock_mhz": clock, "cpi": core.cpi,
                              **est.brief(), "ms": est.ms(core, clock),
                              "flash_code_bytes": est.flash_code_bytes,
                              "stack_bytes": est.stack_bytes,
                              "steps": [dataclasses.asdict(s) for s in est.steps]}
        json.dump(data, sys.stdout, indent=2)
        print()
        return 0
    records = cost.records()
    columns = {heading: [rec[key] for rec in records] for key, heading in _COLUMNS.items()}
    if device is not None:
        core, clock, est = device
        instr = [0.0] * len(cost.rows)
        for step in est.steps:
            instr[step.row] = step.instructions
        columns["instructions"] = [f"{v:,.0f}" if v else "-" for v in instr]
        columns[f"ms @{clock:g}MHz"] = [f"{v * core.cpi / (clock * 1e3):.3f}" if v else "-"
                                        for v in instr]
    # last, as it is the widest: what is alive at each step (residual blocks hold their input)
    columns["alive"] = [rec["alive"] for rec in records]
    print(f"{cost.arch}  ({cost.n_classes} classes)")
    print("\n".join(grid(columns)))
    totals = {
        "parameters": f"{cost.params:,}" + (f" (+{cost.state:,} batch-norm state)"
                                             if cost.state else ""),
        "MACs per image": f"{cost.macs:,}",
        "flash, int8": f"{cost.flash_bytes:,} B ({cost.flash_bytes / KB:.1f} KB)",
        "peak activations, int8": f"{cost.peak_int8_bytes:,} B ({cost.peak_kb:.1f} KB) "
                                  f"at {cost.peak_op}",
        "peak activations, float32": f"{cost.peak_float32_bytes:,} B",
        f"training memory, batch {args.batch}": f"{memory.total_bytes:,} B "
                                                f"({memory.total_bytes / KB / KB:.1f} MB)",
    }
    if device is not None:
        core, clock, est = device
        totals[f"instructions on {core.name}"] = f"{est.instructions:,} per image (model)"
        totals[f"time at {clock:g} MHz"] = f"{est.ms(core, clock):.2f} ms per image"
        totals["device flash, int8"] = (f"{est.flash_bytes:,} B (constants "
                                        f"{est.flash_data_bytes:,} + code ~{est.flash_code_bytes:,})")
        totals["device RAM"] = (f"{est.ram_bytes:,} B (activations {est.ram_static_bytes:,} + "
                                f"stack <= {est.stack_bytes:,})")
    print()
    print("\n".join(pairs(totals)))
    if device is not None:
        print(f"time assumes {device[0].cpi:g} cycles per instruction on {device[0].name}; "
              "measure the real count with `tinyconv emulate`")
    if not cost.exportable:
        print("note: a batch norm does not directly follow a conv, dwconv or dense layer; "
              "the int8 exporter cannot fold it, so its flash is not counted",
              file=sys.stderr)
    return 0

